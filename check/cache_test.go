package check

import (
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"errors"
	"math/rand"
	"os"
	"path/filepath"
	"runtime"
	"strings"
	"testing"

	"github.com/go-git/go-git/v5/plumbing"

	"github.com/loadline/loadline/measure"
)

// cacheFixture is a commit of two models of different widths (params
// 32·8+4 = 260 and 32·12+4 = 388, from smallModel's definition), measured
// once with the per-layer view so that the cache's pack holds their
// entries.
func cacheFixture(t *testing.T) (*Repo, []blobJob, []measured) {
	t.Helper()
	g := newGitRepo(t)
	g.write("a.onnx", smallModel(t, 8))
	g.write("b.onnx", smallModel(t, 12))
	g.commit("base")
	r, s := snapshotAt(t, g.dir, "HEAD")
	jobs := []blobJob{{s, "a.onnx"}, {s, "b.onnx"}}
	first, st := cachedRun(r, jobs)
	if st.Measured.Load() != 2 || first[0].Params == first[1].Params {
		t.Fatalf("cold: measured %d, params %d and %d", st.Measured.Load(), first[0].Params, first[1].Params)
	}
	return r, jobs, first
}

// cachedRun measures jobs as one run of check does: a cache opened for the
// run, written when it ends.
func cachedRun(r *Repo, jobs []blobJob) ([]measured, *Stats) {
	cache := NewCache(r)
	defer cache.Close()
	var st Stats
	out := measureBlobs(jobs, measure.Options{Layers: true}, cache, &st)
	cache.Flush()
	return out, &st
}

// entryOf is the stored bytes of a job's entry of one kind.
func entryOf(t *testing.T, r *Repo, j blobJob, kind byte) []byte {
	t.Helper()
	h, _ := j.snap.Hash(j.path)
	c := NewCache(r)
	defer c.Close()
	b, ok := c.lookup(keyOf(h.String(), measure.Options{Layers: true}).pack(kind), maxDetailEntry)
	if !ok {
		t.Fatalf("%s: no entry of kind %c", j.path, kind)
	}
	return b
}

// replacePacks removes every pack of the cache and writes one holding
// entries.
func replacePacks(t *testing.T, r *Repo, entries map[packKey][]byte) {
	t.Helper()
	c := NewCache(r)
	for _, p := range c.packPaths() {
		os.Remove(p)
	}
	if _, err := writePack(c.Dir, entries); err != nil {
		t.Fatal(err)
	}
}

// TestCachePackLinkedToDevZero: a pack that is a symbolic link to
// /dev/zero is refused without reading it (an entry linked there took a
// check to 6.1 GB): the models are measured again and written to a new
// pack, which the next run uses.
func TestCachePackLinkedToDevZero(t *testing.T) {
	if runtime.GOOS == "windows" {
		t.Skip("no /dev/zero")
	}
	r, jobs, first := cacheFixture(t)
	for _, p := range NewCache(r).packPaths() {
		os.Remove(p)
		if err := os.Symlink("/dev/zero", p); err != nil {
			t.Fatal(err)
		}
	}
	got, st := cachedRun(r, jobs)
	if st.Measured.Load() != 2 || st.CacheHits.Load() != 0 || got[0].Params != first[0].Params {
		t.Fatalf("linked pack: measured %d, hits %d, params %d (want both measured again, params %d)", st.Measured.Load(), st.CacheHits.Load(), got[0].Params, first[0].Params)
	}
	if _, st := cachedRun(r, jobs); st.CacheHits.Load() != 2 {
		t.Errorf("after the rewrite: hits %d, want 2", st.CacheHits.Load())
	}
}

// TestCacheEntryForgedForAnotherBlob: an entry copied from another blob's
// key (or made by another analyzer version, or under other options) is a
// miss: the model is measured again and reported with its own figures.
func TestCacheEntryForgedForAnotherBlob(t *testing.T) {
	r, jobs, first := cacheFixture(t)
	key := func(j blobJob, kind byte) packKey {
		h, _ := j.snap.Hash(j.path)
		return keyOf(h.String(), measure.Options{Layers: true}).pack(kind)
	}
	aFig, aDetail := entryOf(t, r, jobs[0], kindFigures), entryOf(t, r, jobs[0], kindDetail)
	replacePacks(t, r, map[packKey][]byte{
		key(jobs[0], kindFigures): aFig, key(jobs[0], kindDetail): aDetail,
		key(jobs[1], kindFigures): aFig, key(jobs[1], kindDetail): aDetail, // a's figures under b's key
	})
	got, st := cachedRun(r, jobs)
	if st.Measured.Load() != 1 || st.CacheHits.Load() != 1 || got[1].Params != first[1].Params {
		t.Fatalf("forged entry: measured %d, hits %d, b's params %d; want b.onnx measured again with its own params %d (the forged entry says %d)", st.Measured.Load(), st.CacheHits.Load(), got[1].Params, first[1].Params, first[0].Params)
	}
	// The entry is rewritten for its own blob: the next run hits.
	if _, st := cachedRun(r, jobs[1:]); st.CacheHits.Load() != 1 {
		t.Errorf("the forged entry was not rewritten: hits %d", st.CacheHits.Load())
	}
	// Another analyzer version's entry, or one made under other options,
	// stored under a's key, is a miss too.
	for _, c := range []struct {
		what   string
		change func(*cacheEntry)
	}{
		{"version", func(e *cacheEntry) { e.Version = "loadline-figures-0" }},
		{"options", func(e *cacheEntry) { e.Options = "batch=4\x00" + e.Options }},
	} {
		e, err := decodeFigures(string(aFig))
		if err != nil {
			t.Fatal(err)
		}
		c.change(e)
		changed, err := encodeFigures(e)
		if err != nil {
			t.Fatal(err)
		}
		replacePacks(t, r, map[packKey][]byte{key(jobs[0], kindFigures): changed, key(jobs[0], kindDetail): aDetail})
		if _, st := cachedRun(r, jobs[:1]); st.Measured.Load() != 1 {
			t.Errorf("an entry of another %s was used", c.what)
		}
	}
}

// TestCachePackRefused: what is not a regular file, and a pack whose index
// claims more than the file holds, are refused; a pack read back gives
// what was written.
func TestCachePackRefused(t *testing.T) {
	dir := t.TempDir()
	k := packKey{1, 2, 3}
	p, err := writePack(dir, map[packKey][]byte{k: []byte("entry")})
	if err != nil {
		t.Fatal(err)
	}
	pk, err := openPack(p)
	if err != nil {
		t.Fatal(err)
	}
	if b, ok := pk.get(k, 5); !ok || string(b) != "entry" {
		t.Errorf("entry read back: %q, %v", b, ok)
	}
	if _, ok := pk.get(k, 4); ok {
		t.Error("an entry over its bound was read")
	}
	pk.close()
	if _, err := openPack(dir); err == nil {
		t.Error("a folder was opened as a pack")
	}
	link := filepath.Join(dir, "link"+packSuffix)
	if err := os.Symlink(p, link); err == nil {
		if _, err := openPack(link); err == nil {
			t.Error("a symbolic link was followed")
		}
	}
	// A count of 1,000 records (33 bytes each) in a file of a few bytes.
	claim := filepath.Join(dir, "claim"+packSuffix)
	os.WriteFile(claim, append([]byte(packMagic), 0xe8, 0x03, 0, 0), 0o644)
	if _, err := openPack(claim); err == nil {
		t.Error("an index larger than its file was accepted")
	}
}

// TestCachePackRecordsSharingBytesRefused: a pack whose records point at
// the same bytes (or outside its entries) is refused when opened: a merge
// reads every entry, and 1,000 records over one entry of 1 MiB would have
// allocated 1,000 MiB from a file of 1 MiB.
func TestCachePackRecordsSharingBytesRefused(t *testing.T) {
	dir := t.TempDir()
	const n, size = 1000, 1 << 20
	var b bytes.Buffer
	b.WriteString(packMagic)
	binary.Write(&b, binary.LittleEndian, uint32(n))
	data := int64(len(packMagic)) + 4 + n*packRecordLen
	for i := range n {
		var k packKey
		binary.BigEndian.PutUint32(k[:], uint32(i)) // sorted
		b.Write(k[:])
		binary.Write(&b, binary.LittleEndian, uint64(data))
		binary.Write(&b, binary.LittleEndian, uint32(size))
	}
	b.Write(make([]byte, size))
	p := filepath.Join(dir, "shared"+packSuffix)
	if err := os.WriteFile(p, b.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := openPack(p); err == nil || !strings.Contains(err.Error(), "claim more than") {
		t.Errorf("records sharing their bytes: %v; want the pack refused", err)
	}
	// A record that starts inside the index, and one past the end.
	for _, off := range []uint64{uint64(len(packMagic)), uint64(data) + size + 1, 1 << 63} {
		var b bytes.Buffer
		b.WriteString(packMagic)
		binary.Write(&b, binary.LittleEndian, uint32(1))
		b.Write(make([]byte, packKeyLen))
		binary.Write(&b, binary.LittleEndian, off)
		binary.Write(&b, binary.LittleEndian, uint32(1))
		b.WriteString("x")
		if err := os.WriteFile(p, b.Bytes(), 0o644); err != nil {
			t.Fatal(err)
		}
		if _, err := openPack(p); err == nil || !strings.Contains(err.Error(), "outside the file") {
			t.Errorf("a record at offset %d: %v; want the pack refused", off, err)
		}
	}
}

// TestLargeBlobChecksumVerified: a blob above the streaming threshold is
// read to the end of its zlib stream, so a damaged object fails on the
// Adler-32 checksum (RFC 1950) instead of being measured; reading exactly
// the size the header gives would never look at it. Both readers, git
// cat-file and go-git, refuse it.
func TestLargeBlobChecksumVerified(t *testing.T) {
	g := newGitRepo(t)
	data := make([]byte, 2*largeObject)
	rand.New(rand.NewSource(1)).Read(data)
	g.write("big.bin", data)
	g.commit("big")
	id := g.git("rev-parse", "HEAD:big.bin")
	r, s := snapshotAt(t, g.dir, "HEAD")
	got, err := s.ReadInto("big.bin", new([]byte))
	if err != nil || !bytes.Equal(got, data) {
		t.Fatalf("intact blob: %d bytes, %v", len(got), err)
	}
	r.Close()
	loose := filepath.Join(g.dir, ".git", "objects", id[:2], id[2:])
	obj, err := os.ReadFile(loose)
	if err != nil {
		t.Fatalf("the blob is not loose: %v", err)
	}
	obj[len(obj)-1] ^= 0xff // the last byte of the zlib stream's Adler-32
	os.Chmod(loose, 0o644)
	if err := os.WriteFile(loose, obj, 0o644); err != nil {
		t.Fatal(err)
	}
	for _, reader := range []string{"git", "go-git"} {
		t.Setenv("LOADLINE_GIT_READER", strings.TrimPrefix(reader, "git"))
		r, s := snapshotAt(t, g.dir, "HEAD")
		// git refuses the object and stops; go-git then reads it and
		// finds the checksum wrong.
		if _, err := s.ReadInto("big.bin", new([]byte)); err == nil || !strings.Contains(err.Error(), "checksum") {
			t.Errorf("%s: damaged blob: %v; want a checksum error", reader, err)
		}
		r.Close()
	}
}

// TestBlobReadersAgree: git cat-file and go-git (the fallback) read the
// same bytes, for small and large blobs, loose and packed; a missing blob
// is an environment error either way.
func TestBlobReadersAgree(t *testing.T) {
	g := newGitRepo(t)
	big := make([]byte, 2*largeObject+17)
	rand.New(rand.NewSource(2)).Read(big)
	g.write("big.bin", big)
	g.write("small.bin", []byte("small"))
	g.commit("blobs")
	for _, packed := range []bool{false, true} {
		if packed {
			g.git("gc", "-q")
		}
		for _, reader := range []string{"git", "go-git"} {
			if reader == "go-git" {
				t.Setenv("LOADLINE_GIT_READER", "go-git")
			} else {
				t.Setenv("LOADLINE_GIT_READER", "")
			}
			r, s := snapshotAt(t, g.dir, "HEAD")
			buf := new([]byte)
			for p, want := range map[string][]byte{"big.bin": big, "small.bin": []byte("small")} {
				got, err := s.ReadInto(p, buf)
				if err != nil || !bytes.Equal(got, want) {
					t.Errorf("packed %v, %s: %s read %d bytes, %v", packed, reader, p, len(got), err)
				}
			}
			if used := len(r.cat.all) > 0; used != (reader == "git") {
				t.Errorf("packed %v, %s: cat-file processes started: %v", packed, reader, used)
			}
			var missing plumbing.Hash
			missing[0] = 1
			_, err := r.readBlob(missing, "gone.onnx", "HEAD", "HEAD", buf)
			var env *EnvError
			if !errors.As(err, &env) || !strings.Contains(err.Error(), "missing from the object store") {
				t.Errorf("packed %v, %s: a missing blob gave %v", packed, reader, err)
			}
			r.Close()
		}
	}
}

// TestCacheKeyDigest: a key's digest is the first 20 bytes of the SHA-256
// of the analyzer version, the entry form, the blob id and the options,
// joined by NUL bytes (hand-worked from the definition, hashed here with
// crypto/sha256 on the joined text), whether made by keyOf or by keyWith.
func TestCacheKeyDigest(t *testing.T) {
	opts := measure.Options{Dims: map[string]int64{"batch": 1, "seq": 8}, Lenient: true}
	k := keyOf(fuzzBlob, opts)
	if k.options != keyOptions(opts) || !strings.HasPrefix(k.options, "batch=1\x00seq=8\x00lenient\x00") {
		t.Fatalf("options %q", k.options)
	}
	sum := sha256.Sum256([]byte(AnalyzerVersion + "\x00" + entryFormat + "\x00" + fuzzBlob + "\x00" + k.options))
	if !bytes.Equal(k.digest[:], sum[:20]) || keyWith(fuzzBlob, k.options) != k {
		t.Errorf("digest %x, want %x", k.digest, sum[:20])
	}
}

// TestMergeKeepsOnlyCurrentEntries: when packs are merged, an entry made
// by an earlier analyzer version (under the key that version gave it), one
// whose head names another key than the one it is filed under, and one
// that does not decode are left behind; the current entries, figures and
// per-layer view, are kept and still read.
func TestMergeKeepsOnlyCurrentEntries(t *testing.T) {
	dir := t.TempDir()
	figures := measure.Metrics{Format: "onnx", Params: 7, Inputs: []measure.IOInfo{}, Outputs: []measure.IOInfo{}, Unresolved: []measure.Unresolved{}}
	// The key an earlier version gave blob "old": keyWith's digest with
	// its version string in place of AnalyzerVersion.
	oldVersion := "loadline-figures-0"
	sum := sha256.Sum256([]byte(oldVersion + "\x00" + entryFormat + "\x00old\x00opts"))
	var old cacheKey
	copy(old.digest[:], sum[:])
	oldFig, err := encodeFigures(&cacheEntry{Blob: "old", Version: oldVersion, Options: "opts", Metrics: &figures})
	if err != nil {
		t.Fatal(err)
	}
	oldDetail := []byte(`{"blob":"old","version":"` + oldVersion + `","options":"opts","layers":true,"per_layer":{"layers":[],"live_bytes_by_step":[]}}`)
	// Filed under blob "elsewhere"'s key, but made for blob "other".
	misfiled, err := encodeFigures(&cacheEntry{Blob: "other", Version: AnalyzerVersion, Options: "opts", Metrics: &figures})
	if err != nil {
		t.Fatal(err)
	}
	elsewhere := keyWith("elsewhere", "opts")
	garbled := keyWith("garbled", "opts")
	stale := map[packKey][]byte{
		old.pack(kindFigures): oldFig, old.pack(kindDetail): oldDetail,
		elsewhere.pack(kindFigures): misfiled, garbled.pack(kindFigures): []byte("\xff\xff"),
	}
	for range maxPacks {
		if _, err := writePack(dir, stale); err != nil {
			t.Fatal(err)
		}
	}
	// One more run's pack makes the merge.
	cur := keyWith("current", "opts")
	c := &Cache{Dir: dir}
	withLayers := figures
	withLayers.Layers = []measure.Layer{{Step: 0, Node: "n", Op: "Relu", Offset: -1}}
	withLayers.MemoryDetail.LiveBytesByStep = []int64{64}
	c.Put(cur, &withLayers, nil, true)
	c.Close()

	paths := (&Cache{Dir: dir}).packPaths()
	if len(paths) != 1 {
		t.Fatalf("%d packs after the merge, want 1", len(paths))
	}
	pk, err := openPack(paths[0])
	if err != nil {
		t.Fatal(err)
	}
	defer pk.close()
	want := map[packKey]bool{cur.pack(kindFigures): true, cur.pack(kindDetail): true}
	if len(pk.keys) != len(want) {
		t.Errorf("merged pack holds %d entries, want the %d current ones", len(pk.keys), len(want))
	}
	for _, k := range pk.keys {
		if !want[k] {
			t.Errorf("merged pack kept entry %x, which is not current", k)
		}
	}
	got, _ := (&Cache{Dir: dir}).Get(cur, true, func(string, string) bool { return true })
	if got == nil || got.Params != 7 || len(got.Layers) != 1 {
		t.Fatalf("current entry after the merge: %+v", got)
	}
}
