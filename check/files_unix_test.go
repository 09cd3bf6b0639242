//go:build unix

package check

import (
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/loadline/loadline/measure"
)

// TestMeasureFileNotRegular: a model path that is a FIFO (no writer) or a
// character device gets an error entry at once instead of blocking the
// open or reading without end.
func TestMeasureFileNotRegular(t *testing.T) {
	fifo := filepath.Join(t.TempDir(), "m.onnx")
	if err := syscall.Mkfifo(fifo, 0o644); err != nil {
		t.Fatal(err)
	}
	for path, want := range map[string]string{fifo: "named pipe", "/dev/zero": "character device"} {
		done := make(chan *measure.Metrics, 1)
		go func() { done <- MeasureFile(path, measure.Options{}) }()
		select {
		case m := <-done:
			if !strings.Contains(m.Error, want) {
				t.Errorf("%s: error %q, want one naming a %s", path, m.Error, want)
			}
		case <-time.After(time.Minute):
			// A hang guard, not a timing assertion: a blocked open never
			// returns.
			t.Fatalf("%s: measuring blocked", path)
		}
	}
}
