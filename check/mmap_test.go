//go:build unix

package check

import (
	"bytes"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"unsafe"

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
	f, err := mapFile(p)
	if err != nil {
		t.Fatal(err)
	}
	defer f.release()
	data := f.data
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

// TestMappedFileGivesBackPagesBehind: once the reading has moved past
// them, or the model is decoded, the pages of a mapped model file leave the
// process's resident memory (/proc/self/smaps, Linux), and reading them
// again gives the file's bytes as before.
func TestMappedFileGivesBackPagesBehind(t *testing.T) {
	const size = 8 << 20
	want := make([]byte, size)
	for i := range want {
		want[i] = byte(i*7 + i>>12)
	}
	p := filepath.Join(t.TempDir(), "m.onnx")
	if err := os.WriteFile(p, want, 0o644); err != nil {
		t.Fatal(err)
	}
	f, err := mapFile(p)
	if err != nil {
		t.Fatal(err)
	}
	defer f.release()
	if f.readBehind == nil {
		t.Fatal("a mapped file has no readBehind")
	}
	var sum byte
	for i := 0; i < size; i += 4096 {
		sum += f.data[i] // every page resident
	}
	faultSink = sum
	before, ok := residentKiB(t, f.data)
	if !ok {
		t.Skip("no /proc/self/smaps here; the pages given back cannot be counted")
	}
	f.readBehind(f.data[6<<20-100 : 6<<20+5]) // the reading is past the first 6 MiB
	after, _ := residentKiB(t, f.data)
	if before-after < 6<<10-4 || after > before {
		t.Errorf("resident %d KiB before, %d KiB after giving back 6 MiB", before, after)
	}
	f.readBehind(f.data[6<<20+5 : 6<<20+100]) // not a step further: nothing to do
	if !bytes.Equal(f.data, want) {
		t.Error("the pages read again differ from the file")
	}
	f.readBehind(make([]byte, 10)) // not in the mapping: ignored

	// Decoding done: every page goes; reading the weights front to back
	// brings them back, and the pages behind go again.
	f.decoded()
	if after, _ := residentKiB(t, f.data); after > 64 {
		t.Errorf("resident %d KiB after giving back every page", after)
	}
	for i := 0; i < size; i += 4096 {
		sum += f.data[i]
	}
	faultSink = sum
	f.readBehind(f.data[4<<20-10 : 4<<20])
	if after, _ := residentKiB(t, f.data); after > 4<<10+64 {
		t.Errorf("resident %d KiB after reading the file again and giving back its first 4 MiB", after)
	}
	if !bytes.Equal(f.data, want) {
		t.Error("the pages read again differ from the file")
	}
}

// residentKiB is the resident size of the mapping that starts at data, from
// /proc/self/smaps; false when that file is not there.
func residentKiB(t *testing.T, data []byte) (int, bool) {
	b, err := os.ReadFile("/proc/self/smaps")
	if err != nil {
		return 0, false
	}
	start := fmt.Sprintf("%x-", uintptr(unsafe.Pointer(unsafe.SliceData(data))))
	in := false
	for _, line := range strings.Split(string(b), "\n") {
		if strings.HasPrefix(line, start) {
			in = true
			continue
		}
		if in && strings.HasPrefix(line, "Rss:") {
			var kib int
			fmt.Sscanf(strings.TrimSpace(strings.TrimPrefix(line, "Rss:")), "%d", &kib)
			return kib, true
		}
	}
	t.Fatalf("no mapping at %s in /proc/self/smaps", start)
	return 0, false
}
