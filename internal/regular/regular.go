// Package regular opens files that loadline reads from paths a repository
// or a command line names — model files, external data, budget files — and
// refuses anything that is not a regular file before reading from it. A FIFO
// would block the open or the read until some other process writes to it,
// and a device such as /dev/zero never ends: either would stall a check.
package regular

import (
	"fmt"
	"os"
	"syscall"
)

// Open opens path for reading when it is a regular file (after following
// symbolic links) and returns it with its size. The file is checked with
// Stat before it is opened, opened without blocking (O_NONBLOCK: opening a
// FIFO with no writer would wait), and checked again on the open
// descriptor, so that a file swapped for a FIFO in between is refused too.
func Open(path string) (*os.File, int64, error) {
	st, err := os.Stat(path)
	if err != nil {
		return nil, 0, err
	}
	if err := check(path, st); err != nil {
		return nil, 0, err
	}
	f, err := os.OpenFile(path, os.O_RDONLY|syscall.O_NONBLOCK, 0)
	if err != nil {
		return nil, 0, err
	}
	st, err = f.Stat()
	if err == nil {
		err = check(path, st)
	}
	if err != nil {
		f.Close()
		return nil, 0, err
	}
	return f, st.Size(), nil
}

// ReadFile reads the regular file at path, refusing other kinds of file
// (see Open) and files larger than limit bytes.
func ReadFile(path string, limit int64) ([]byte, error) {
	f, size, err := Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	if size > limit {
		return nil, fmt.Errorf("%s has %d bytes, more than the %d this reader accepts", path, size, limit)
	}
	b := make([]byte, size)
	n, err := f.ReadAt(b, 0)
	if n < len(b) {
		return nil, fmt.Errorf("%s: read %d of %d bytes: %w", path, n, size, err)
	}
	return b, nil
}

func check(path string, st os.FileInfo) error {
	if st.Mode().IsRegular() {
		return nil
	}
	return fmt.Errorf("%s is not a regular file (%s); loadline reads only regular files", path, kind(st.Mode()))
}

// kind names a file's type in words.
func kind(m os.FileMode) string {
	switch {
	case m&os.ModeNamedPipe != 0:
		return "a named pipe"
	case m&os.ModeSocket != 0:
		return "a socket"
	case m&os.ModeCharDevice != 0:
		return "a character device"
	case m&os.ModeDevice != 0:
		return "a device"
	case m.IsDir():
		return "a folder"
	}
	return "mode " + m.String()
}
