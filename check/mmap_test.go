//go:build unix

package check

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadline/loadline/measure"
)

// TestMappedFileTruncated: a model file truncated while it is mapped makes
// reading its pages fault; that is an error entry for the file, not a crash
// of the run.
func TestMappedFileTruncated(t *testing.T) {
	p := filepath.Join(t.TempDir(), "m.onnx")
	if err := os.WriteFile(p, make([]byte, 1<<20), 0o644); err != nil {
		t.Fatal(err)
	}
	data, release, err := mapFile(p)
	if err != nil {
		t.Fatal(err)
	}
	defer release()
	if err := os.Truncate(p, 0); err != nil {
		t.Fatal(err)
	}
	m := onMapped(p, func() *measure.Metrics {
		faultSink = data[len(data)-1] // past the new end of the file
		t.Error("reading past the truncated end did not fault")
		return nil
	})
	if m == nil || !strings.Contains(m.Error, "changed while it was being read") {
		t.Fatalf("want an error entry, got %+v", m)
	}
}

// faultSink keeps the compiler from dropping the read.
var faultSink byte
