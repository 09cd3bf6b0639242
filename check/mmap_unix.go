//go:build unix

package check

import (
	"os"
	"syscall"
)

// mapFile maps a file read-only, so that decoding touches only the pages it
// reads: the weights of a large model are skipped, not copied. The caller
// must call release and must not keep sub-slices past it.
func mapFile(path string) (data []byte, release func(), err error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, nil, err
	}
	defer f.Close()
	st, err := f.Stat()
	if err != nil {
		return nil, nil, err
	}
	size := st.Size()
	if size == 0 || !st.Mode().IsRegular() || size != int64(int(size)) {
		b, err := os.ReadFile(path)
		return b, func() {}, err
	}
	b, err := syscall.Mmap(int(f.Fd()), 0, int(size), syscall.PROT_READ, syscall.MAP_SHARED)
	if err != nil {
		b, err := os.ReadFile(path)
		return b, func() {}, err
	}
	return b, func() { syscall.Munmap(b) }, nil
}
