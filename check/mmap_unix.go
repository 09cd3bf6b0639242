//go:build unix

package check

import (
	"os"
	"syscall"
	"unsafe"

	"github.com/loadline/loadline/internal/regular"
)

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
	g := &pageGiver{data: b, page: os.Getpagesize()}
	return &mappedFile{data: b, release: func() { syscall.Munmap(b) }, readBehind: g.behind, passed: g.upTo, decoded: g.all}, nil
}

// giveBackStep is how far the reading must have moved past the pages last
// given back before more are: one system call per step, not per weight.
const giveBackStep = 1 << 20

// pageGiver gives back pages of the mapping data once they are read.
// Pages given back (MADV_DONTNEED) leave the process's resident memory; the
// kernel keeps them in its page cache as it would after a read(2), and
// reading them again maps them back in from the file. Without it, a
// measurement holds every page of the file it has read, the whole file:
// 41 MiB of the resident memory of a 42 MB model of 100,000 nodes at the
// moment inference ends, and all of a weights file of gigabytes.
type pageGiver struct {
	data []byte
	page int
	done int // data[:done] is given back since the last all
}

// all gives back every page: decoding has read them all, and what is read
// after (small constants during inference, then the weights front to back)
// comes back on demand.
func (g *pageGiver) all() {
	// Advice only: a failure leaves the pages resident, nothing else.
	_ = syscall.Madvise(g.data, syscall.MADV_DONTNEED)
	g.done = 0
}

// behind gives back the pages that lie wholly before the end of b, a
// slice of data just read, in steps of giveBackStep.
func (g *pageGiver) behind(b []byte) {
	base := uintptr(unsafe.Pointer(unsafe.SliceData(g.data)))
	at := uintptr(unsafe.Pointer(unsafe.SliceData(b)))
	if len(b) == 0 || at < base || at >= base+uintptr(len(g.data)) {
		return
	}
	g.upTo(int(at-base) + len(b))
}

// upTo gives back the pages that lie wholly before offset, in steps of
// giveBackStep.
func (g *pageGiver) upTo(offset int) {
	end := min(offset, len(g.data)) &^ (g.page - 1)
	if end-g.done < giveBackStep {
		return
	}
	_ = syscall.Madvise(g.data[g.done:end], syscall.MADV_DONTNEED)
	g.done = end
}
