//go:build unix

package check

import (
	"math"
	"syscall"

	"github.com/loadline/loadline/internal/regular"
)

// mapFile maps a file read-only, so that decoding touches only the pages it
// reads: the weights of a large model are skipped, not copied. The caller
// must call release and must not keep sub-slices past it.
func mapFile(path string) (data []byte, release func(), err error) {
	// Only a regular file: a FIFO would block the open or the read, and a
	// device such as /dev/zero would be read without end.
	f, size, err := regular.Open(path)
	if err != nil {
		return nil, nil, err
	}
	defer f.Close()
	if size == 0 || size != int64(int(size)) {
		b, err := regular.ReadFile(path, math.MaxInt64)
		return b, func() {}, err
	}
	b, err := syscall.Mmap(int(f.Fd()), 0, int(size), syscall.PROT_READ, syscall.MAP_SHARED)
	if err != nil {
		b, err := regular.ReadFile(path, math.MaxInt64)
		return b, func() {}, err
	}
	return b, func() { syscall.Munmap(b) }, nil
}
