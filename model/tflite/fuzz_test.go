package tflite

import (
	"os"
	"path/filepath"
	"testing"
)

// sharedSeeds reads the shared TFLite models of at most 40 KB, when they
// are there, to seed fuzzing (larger inputs slow every mutation down);
// fuzzing works without them.
func sharedSeeds() [][]byte {
	dir, _ := os.Getwd()
	for dir != filepath.Dir(dir) {
		if _, err := os.Stat(filepath.Join(dir, "go.mod")); err == nil {
			break
		}
		dir = filepath.Dir(dir)
	}
	paths, _ := filepath.Glob(filepath.Join(dir, "..", "shared", "models", "tflite", "*.tflite"))
	var out [][]byte
	for _, p := range paths {
		if b, err := os.ReadFile(p); err == nil && len(b) <= 40<<10 {
			out = append(out, b)
		}
	}
	return out
}

// FuzzDecode: no input makes the decoder panic; what it accepts, the
// encoder writes back and the decoder reads again.
func FuzzDecode(f *testing.F) {
	f.Add(encodeT(f, tiny(), EncodeOptions{}))
	f.Add(encodeT(f, tiny(), EncodeOptions{OutsideBuffers: true}))
	for _, b := range sharedSeeds() {
		f.Add(b)
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		m, err := Parse(data, "fuzz.tflite")
		if err != nil {
			return
		}
		if _, err := m.Convert("fuzz.tflite"); err != nil {
			return
		}
		again, err := Encode(m)
		if err != nil {
			return // options tables the encoder does not write
		}
		if _, err := Decode(again, Options{Path: "again.tflite"}); err != nil {
			t.Fatalf("re-encoded model does not decode: %v", err)
		}
	})
}
