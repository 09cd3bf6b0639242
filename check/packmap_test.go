//go:build unix

package check

import (
	"bytes"
	"os"
	"testing"
)

// TestMappedPackTruncated: a pack cut short after a run mapped it faults
// on the pages past its new end; the entries there are misses, not a crash
// of the run, and an entry read before the cut was copied out of the
// mapping.
func TestMappedPackTruncated(t *testing.T) {
	dir := t.TempDir()
	first, last := packKey{1}, packKey{2}
	big := bytes.Repeat([]byte("x"), 1<<20)
	p, err := writePack(dir, map[packKey][]byte{first: []byte("first"), last: big})
	if err != nil {
		t.Fatal(err)
	}
	pk, err := openPack(p)
	if err != nil {
		t.Fatal(err)
	}
	defer pk.close()
	if pk.data == nil {
		t.Fatal("the pack was not mapped")
	}
	b, ok := pk.get(first, 16)
	if !ok || string(b) != "first" {
		t.Fatalf("first entry: %q, %v", b, ok)
	}
	if err := os.Truncate(p, 4096); err != nil {
		t.Fatal(err)
	}
	if got, ok := pk.get(last, 2<<20); ok {
		t.Fatalf("an entry past the cut was read: %d bytes", len(got))
	}
	if got, ok := pk.getString(last, 2<<20); ok {
		t.Fatalf("an entry past the cut was read as text: %d bytes", len(got))
	}
	if string(b) != "first" {
		t.Errorf("the entry read before the cut changed: %q", b)
	}
}
