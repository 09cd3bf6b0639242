//go:build unix

package check

import (
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadline/loadline/internal/fifotest"
	"github.com/loadline/loadline/measure"
)

// TestMeasureFileNotRegular: a model path that is a FIFO or a character
// device gets an error entry naming its kind, refused before it is opened
// or read. The test cannot hang: fifotest meets any reader of the pipe with
// a writer that closes at once, and /dev/null is empty, so code that opened
// either would fail here on the error text (an empty model), not block or
// read without end.
func TestMeasureFileNotRegular(t *testing.T) {
	fifo := filepath.Join(t.TempDir(), "m.onnx")
	fifotest.Make(t, fifo)
	for path, want := range map[string]string{fifo: "named pipe", "/dev/null": "character device"} {
		m := MeasureFile(path, measure.Options{})
		if !strings.Contains(m.Error, want) {
			t.Errorf("%s: error %q, want one naming a %s", path, m.Error, want)
		}
	}
}
