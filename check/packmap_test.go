//go:build unix

package check

import (
	"bytes"
	"fmt"
	"os"
	"testing"

	"github.com/loadline/loadline/measure"
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

// TestCachePacksMerged: when more than maxPacks packs pile up, the run
// that writes one more merges them into one (reading every entry of every
// mapped pack), and every model's figures, with their per-layer view, are
// still found, equal to those first measured.
func TestCachePacksMerged(t *testing.T) {
	g := newGitRepo(t)
	const n = maxPacks + 2
	for i := range n {
		g.write(fmt.Sprintf("m%d.onnx", i), smallModel(t, int64(4+i)))
	}
	g.commit("models")
	r, s := snapshotAt(t, g.dir, "HEAD")
	var jobs []blobJob
	var first []int64
	for i := range n {
		j := blobJob{s, fmt.Sprintf("m%d.onnx", i)}
		jobs = append(jobs, j)
		out, st := cachedRun(r, []blobJob{j}) // one new pack each
		if st.Measured.Load() != 1 {
			t.Fatalf("%s: measured %d", j.path, st.Measured.Load())
		}
		first = append(first, out[0].Params)
		if got := len(NewCache(r).packPaths()); got > maxPacks {
			t.Fatalf("after %d runs, %d packs (at most %d before a merge)", i+1, got, maxPacks)
		}
	}
	if got := len(NewCache(r).packPaths()); got >= n {
		t.Fatalf("%d packs after %d runs: never merged", got, n)
	}
	// One cache reads every model from the merged packs, twice.
	c := NewCache(r)
	var st Stats
	got := measureBlobs(jobs, measure.Options{Layers: true}, c, &st)
	c.Flush()
	again := measureBlobs(jobs, measure.Options{Layers: true}, c, &st)
	c.Close()
	if st.Measured.Load() != 0 || st.CacheHits.Load() != 2*n {
		t.Fatalf("measured %d, hits %d; want all %d models from the cache twice", st.Measured.Load(), st.CacheHits.Load(), n)
	}
	for i := range got {
		if got[i].Params != first[i] || again[i].Params != first[i] || len(got[i].Layers) == 0 {
			t.Errorf("%s: params %d and %d, %d layers; first measured %d", jobs[i].path, got[i].Params, again[i].Params, len(got[i].Layers), first[i])
		}
	}
}
