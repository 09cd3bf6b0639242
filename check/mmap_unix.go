//go:build unix

package check

import (
	"math"
	"os"
	"syscall"
	"unsafe"

	"github.com/loadline/loadline/internal/regular"
)

// mappedFile is a model file's bytes: mapped read-only where the system
// allows it, else read whole.
type mappedFile struct {
	data []byte
	// release unmaps the file; sub-slices of data must not be kept past it.
	release func()
	// readBehind, for a mapped file, gives back to the kernel the pages
	// that lie wholly before b (a slice of data), once they are no longer
	// read (measure.Options.WeightsRead); nil for a file read whole.
	readBehind func(b []byte)
}

// mapFile maps a file read-only, so that decoding touches only the pages it
// reads: the weights of a large model are skipped, not copied.
func mapFile(path string) (*mappedFile, error) {
	// Only a regular file: a FIFO would block the open or the read, and a
	// device such as /dev/zero would be read without end.
	f, size, err := regular.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	if size == 0 || size != int64(int(size)) {
		return readWhole(path)
	}
	b, err := syscall.Mmap(int(f.Fd()), 0, int(size), syscall.PROT_READ, syscall.MAP_SHARED)
	if err != nil {
		return readWhole(path)
	}
	return &mappedFile{data: b, release: func() { syscall.Munmap(b) }, readBehind: pagesBehind(b)}, nil
}

func readWhole(path string) (*mappedFile, error) {
	b, err := regular.ReadFile(path, math.MaxInt64)
	return &mappedFile{data: b, release: func() {}}, err
}

// giveBackStep is how far the reading must have moved past the pages last
// given back before more are: one system call per step, not per weight.
const giveBackStep = 1 << 20

// pagesBehind returns readBehind for the mapping data. Pages given back
// (MADV_DONTNEED) leave the process's resident memory; the kernel keeps
// them in its page cache as it would after a read(2), and reading them
// again maps them back in from the file. Without this, a measurement holds
// every page of the file it has read, the whole file once the weights'
// zeros are counted: 41 MiB of the resident memory of a 42 MB model of
// 100,000 nodes, and all of a weights file of gigabytes.
func pagesBehind(data []byte) func(b []byte) {
	page := os.Getpagesize()
	done := 0 // data[:done] is given back
	base := uintptr(unsafe.Pointer(unsafe.SliceData(data)))
	return func(b []byte) {
		at := uintptr(unsafe.Pointer(unsafe.SliceData(b)))
		if len(b) == 0 || at < base || at >= base+uintptr(len(data)) {
			return
		}
		upTo := int(at-base) &^ (page - 1)
		if upTo-done < giveBackStep {
			return
		}
		// Advice only: a failure leaves the pages resident, nothing else.
		_ = syscall.Madvise(data[done:upTo], syscall.MADV_DONTNEED)
		done = upTo
	}
}
