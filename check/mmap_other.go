//go:build !unix

package check

import (
	"math"

	"github.com/loadline/loadline/internal/regular"
)

// mappedFile is a model file's bytes, read whole where memory mapping is
// not available.
type mappedFile struct {
	data       []byte
	release    func()
	readBehind func(b []byte)   // nil: nothing to give back
	passed     func(offset int) // nil: nothing to give back
	decoded    func()           // nil: nothing to give back
}

// mapFile reads the whole file where memory mapping is not available.
func mapFile(path string) (*mappedFile, error) {
	b, err := regular.ReadFile(path, math.MaxInt64)
	return &mappedFile{data: b, release: func() {}}, err
}
