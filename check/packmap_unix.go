//go:build unix

package check

import (
	"os"
	"syscall"
)

// mapPack maps an open pack file read-only, so that a run reads its
// entries without a system call each; nil when it cannot be mapped (the
// entries are then read one by one).
func mapPack(f *os.File, size int64) (data []byte, unmap func()) {
	if size <= 0 || size != int64(int(size)) {
		return nil, nil
	}
	b, err := syscall.Mmap(int(f.Fd()), 0, int(size), syscall.PROT_READ, syscall.MAP_SHARED)
	if err != nil {
		return nil, nil
	}
	return b, func() { syscall.Munmap(b) }
}
