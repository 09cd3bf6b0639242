//go:build !unix

package check

// mapFile reads the whole file where memory mapping is not available.
func mapFile(path string) (*mappedFile, error) { return readWhole(path) }
