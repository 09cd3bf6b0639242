//go:build !unix

package check

import (
	"math"

	"github.com/loadline/loadline/internal/regular"
)

// mapFile reads the whole file where memory mapping is not available.
func mapFile(path string) ([]byte, func(), error) {
	b, err := regular.ReadFile(path, math.MaxInt64)
	return b, func() {}, err
}
