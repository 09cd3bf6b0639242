package check

import (
	"bufio"
	"bytes"
	"encoding/hex"
	"errors"
	"os"
	"path"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"

	"github.com/go-git/go-git/v5/plumbing"

	"github.com/loadline/loadline/measure"
	"github.com/loadline/loadline/model/build"
	"github.com/loadline/loadline/model/format"
	"github.com/loadline/loadline/model/onnx"
)

// fuzzBlob is the blob id the cache fuzz targets' entries are made for.
const fuzzBlob = "0123456789abcdef0123456789abcdef01234567"

// fuzzEntries are the two stored entries (figures and per-layer view) of
// a real measurement, build.ConvClassifier at 16×16 and width 8, under
// fuzzKey: the seeds of the cache fuzz targets.
func fuzzEntries(f *testing.F) (cacheKey, []byte, []byte) {
	f.Helper()
	m, err := build.ConvClassifier("small", 16, 8)
	if err != nil {
		f.Fatal(err)
	}
	data, err := onnx.Encode(m)
	if err != nil {
		f.Fatal(err)
	}
	opts := measure.Options{Layers: true}
	met := decodeAndMeasure("small.onnx", data, format.Options{}, opts, nil)
	if met.Error != "" || len(met.Layers) == 0 {
		f.Fatalf("the seed model does not measure: %q, %d layers", met.Error, len(met.Layers))
	}
	k := keyOf(fuzzBlob, opts)
	c := &Cache{}
	c.Put(k, met, map[string]string{"weights.bin": fuzzBlob}, true)
	fig, det := c.pending[k.pack(kindFigures)], c.pending[k.pack(kindDetail)]
	if fig == nil || det == nil {
		f.Fatal("the seed entries were not kept")
	}
	return k, fig, det
}

// packBytes is a pack holding entries, as writePack writes it.
func packBytes(f *testing.F, entries map[packKey][]byte) []byte {
	f.Helper()
	p, err := writePack(f.TempDir(), entries)
	if err != nil {
		f.Fatal(err)
	}
	b, err := os.ReadFile(p)
	if err != nil {
		f.Fatal(err)
	}
	return b
}

// useEntry reads what a cache hit gives the way a check does: the
// figures the budget judges and the detail a report shows.
func useEntry(m *measure.Metrics) {
	Figures(m)
	DetailOf(m)
}

// FuzzCachePack: a restored CI cache is untrusted input. Whatever a pack
// file holds, openPack refuses it with an error naming the file or gives
// an index no larger than the file; get never returns an entry over its
// bound or outside the file; and the cache's look-up through it gives a
// miss or figures that Figures and DetailOf take without panicking. Seeds:
// packs written by writePack, one holding a real measurement.
func FuzzCachePack(f *testing.F) {
	k, fig, det := fuzzEntries(f)
	f.Add(packBytes(f, map[packKey][]byte{k.pack(kindFigures): fig, k.pack(kindDetail): det}))
	f.Add(packBytes(f, map[packKey][]byte{{1, 2, 3}: []byte("entry"), {1, 2, 4}: []byte("{}")}))
	f.Add(packBytes(f, nil))
	f.Add(append([]byte(packMagic), 0xe8, 0x03, 0, 0)) // claims 1,000 records
	dir := f.TempDir()
	p := filepath.Join(dir, "pack-fuzz"+packSuffix)
	f.Fuzz(func(t *testing.T, data []byte) {
		if err := os.WriteFile(p, data, 0o644); err != nil {
			t.Fatal(err)
		}
		pk, err := openPack(p)
		if err != nil {
			if !strings.HasPrefix(err.Error(), p+": ") {
				t.Fatalf("the error does not name the pack: %v", err)
			}
			return
		}
		defer pk.close()
		if n := int64(len(pk.keys)); n > maxPackEntries || int64(len(packMagic))+4+n*packRecordLen > int64(len(data)) {
			t.Fatalf("an index of %d records accepted from a file of %d bytes", n, len(data))
		}
		// Every entry read in full and its head judged (as a merge does)
		// is no more than the file, and judging it never panics.
		var total int64
		for _, key := range pk.keys {
			if b, ok := pk.get(key, maxDetailEntry); ok {
				total += int64(len(b))
				entryCurrent(key, b)
			}
		}
		if total > int64(len(data)) {
			t.Fatalf("a file of %d bytes gave %d bytes of entries", len(data), total)
		}
		const limit = 1 << 10
		for i, key := range pk.keys[:min(len(pk.keys), 64)] {
			b, ok := pk.get(key, limit)
			if !ok {
				continue
			}
			s := pk.at[i]
			if int64(len(b)) > limit || s.off < 0 || s.off+int64(len(b)) > int64(len(data)) || !bytes.Equal(b, data[s.off:s.off+int64(len(b))]) {
				t.Fatalf("record %d (offset %d, %d bytes): got %d bytes, not the file's", i, s.off, s.n, len(b))
			}
		}
		c := &Cache{Dir: dir}
		defer c.release()
		for _, layers := range []bool{false, true} {
			m, _ := c.Get(k, layers, func(string, string) bool { return true })
			useEntry(m)
		}
	})
}

// FuzzCacheEntry: whatever the stored bytes of an entry, the cache gives a
// miss or the figures it was made for: an entry for another blob, analyzer
// version or options, or that does not decode, is a miss, and what it
// gives, Figures and DetailOf take without panicking. Figures that decode
// are encoded again to the same figures. The pack around the entries is
// well formed, so the fuzzer works on the entries: the figures in their
// binary form (entry.go), the per-layer view as JSON. Seeds: the entries
// of a real measurement, and the smallest entries made for the key.
func FuzzCacheEntry(f *testing.F) {
	k, fig, det := fuzzEntries(f)
	f.Add(fig, det)
	f.Add([]byte{}, []byte("null"))
	empty, err := encodeFigures(&cacheEntry{Blob: fuzzBlob, Version: AnalyzerVersion, Options: k.options, Metrics: &measure.Metrics{}})
	if err != nil {
		f.Fatal(err)
	}
	f.Add(empty,
		[]byte(`{"blob":"`+fuzzBlob+`","version":"`+AnalyzerVersion+`","options":`+jsonString(f, k.options)+`,"layers":true,"per_layer":{"layers":[{}],"live_bytes_by_step":[-1]}}`))
	dir := f.TempDir()
	f.Fuzz(func(t *testing.T, fig, det []byte) {
		if e, err := decodeFigures(string(fig)); err == nil {
			again, err := encodeFigures(e)
			if err != nil {
				t.Fatalf("figures read from an entry do not encode: %v", err)
			}
			// Compared as bytes: a float may be NaN.
			e2, err := decodeFigures(string(again))
			if err != nil {
				t.Fatalf("figures encoded again do not read back: %v", err)
			}
			if again2, err := encodeFigures(e2); err != nil || !bytes.Equal(again2, again) {
				t.Fatalf("figures encoded again read back different: %v\n%x\n%x", err, again2, again)
			}
		}
		c := &Cache{Dir: dir}
		defer c.release()
		c.pending = map[packKey][]byte{k.pack(kindFigures): fig, k.pack(kindDetail): det}
		// This run's entries first (as a run reads what it measured) …
		for _, layers := range []bool{false, true} {
			m, _ := c.Get(k, layers, func(string, string) bool { return true })
			useEntry(m)
		}
		// … and the same entries read back from a pack.
		for _, p := range c.packPaths() {
			os.Remove(p)
		}
		c.Flush()
		c = &Cache{Dir: dir}
		defer c.release()
		for _, layers := range []bool{false, true} {
			m, deps := c.Get(k, layers, func(string, string) bool { return true })
			if m == nil {
				continue
			}
			useEntry(m)
			var e cacheEntry
			if got, ok := c.read(k, kindFigures, maxFiguresEntry); ok {
				e = *got
			}
			if e.Blob != fuzzBlob || e.Version != AnalyzerVersion || e.Options != k.options || len(deps) != len(e.Deps) {
				t.Fatalf("an entry made for blob %q, version %q, options %q was used for %q, %q, %q", e.Blob, e.Version, e.Options, fuzzBlob, AnalyzerVersion, k.options)
			}
		}
		// A dependency that changed makes an entry with dependencies a
		// miss.
		if m, _ := c.Get(k, false, func(string, string) bool { return false }); m != nil {
			if got, ok := c.read(k, kindFigures, maxFiguresEntry); !ok || len(got.Deps) > 0 {
				t.Fatal("an entry was used although a dependency changed")
			}
		}
	})
}

func jsonString(f *testing.F, s string) string {
	f.Helper()
	var b strings.Builder
	b.WriteByte('"')
	for _, r := range s {
		switch {
		case r == '"' || r == '\\':
			b.WriteByte('\\')
			b.WriteRune(r)
		case r < 0x20:
			b.WriteString(`\u00`)
			b.WriteString(hex.EncodeToString([]byte{byte(r)}))
		default:
			b.WriteRune(r)
		}
	}
	b.WriteByte('"')
	return b.String()
}

// nopWriteCloser takes a cat-file request and drops it.
type nopWriteCloser struct{}

func (nopWriteCloser) Write(p []byte) (int, error) { return len(p), nil }
func (nopWriteCloser) Close() error                { return nil }

// FuzzCatFileAnswer: whatever `git cat-file --batch` answers (a damaged
// or replaced git, a broken pipe), read returns an error or the blob
// exactly as the answer's header sized it, never one over the limit, and
// never allocates for a size above the limit. Seeds: answers in the
// formats of git-cat-file(1), BATCH OUTPUT: "<oid> <type> <size>\n<contents>\n"
// and "<object> missing\n".
func FuzzCatFileAnswer(f *testing.F) {
	h := plumbing.NewHash(fuzzBlob)
	f.Add([]byte(fuzzBlob + " blob 5\nhello\n"))
	f.Add([]byte(fuzzBlob + " blob 0\n\n"))
	f.Add([]byte(fuzzBlob + " missing\n"))
	f.Add([]byte(fuzzBlob + " tree 3\nabc\n"))
	f.Add([]byte(fuzzBlob + " blob 99999999999\n"))
	f.Add([]byte(fuzzBlob + " blob -1\n"))
	f.Add([]byte(fuzzBlob + " commit 9223372036854775807\n"))
	f.Add([]byte("fatal: not a git repository\n"))
	f.Fuzz(func(t *testing.T, answer []byte) {
		const limit = 1 << 12
		for _, reuse := range []bool{false, true} {
			p := &catFile{in: nopWriteCloser{}, out: bufio.NewReaderSize(bytes.NewReader(answer), 1<<16)}
			var buf *[]byte
			if reuse {
				buf = new([]byte)
			}
			data, _, err := p.read(h, limit, buf)
			if err != nil {
				if errors.Is(err, errCatFileMissing) && !bytes.HasPrefix(answer, []byte(fuzzBlob)) {
					t.Fatalf("%q read as missing", answer)
				}
				if reuse && cap(*buf) > limit {
					t.Fatalf("a buffer of %d bytes was made for a refused answer", cap(*buf))
				}
				continue
			}
			if len(data) > limit {
				t.Fatalf("a blob of %d bytes was read with a limit of %d", len(data), limit)
			}
			// The header named this blob and its size, and the contents
			// followed it with a newline.
			i := bytes.IndexByte(answer, '\n')
			if i < 0 {
				t.Fatalf("answer %q without a header line gave %q", answer, data)
			}
			head := strings.Fields(string(answer[:i]))
			if len(head) != 3 || head[0] != fuzzBlob || head[1] != "blob" {
				t.Fatalf("header %q gave %d bytes", answer[:i], len(data))
			}
			if n, err := strconv.ParseInt(head[2], 10, 64); err != nil || n != int64(len(data)) {
				t.Fatalf("header %q gave %d bytes", answer[:i], len(data))
			}
			if len(answer) < i+1+len(data)+1 || !bytes.Equal(data, answer[i+1:i+1+len(data)]) || answer[i+1+len(data)] != '\n' {
				t.Fatalf("answer %q gave %d bytes %q", answer, len(data), data)
			}
		}
	})
}

// FuzzParseLFSPointer: whatever a blob holds, parseLFSPointer accepts it
// only as a pointer of the Git LFS specification
// (https://github.com/git-lfs/git-lfs/blob/main/docs/spec.md): its oid is
// 64 hex digits (it becomes a path under lfs/objects, so nothing else may
// pass) and its size is a byte count, not negative. Seeds: a pointer as
// the specification shows one, and hostile variants.
func FuzzParseLFSPointer(f *testing.F) {
	oid := "4d7a214614ab2935c943f9e0ff69d22eadbb8f32b1258daaa5e2ca24d17e2393"
	f.Add([]byte("version https://git-lfs.github.com/spec/v1\noid sha256:" + oid + "\nsize 12345\n"))
	f.Add([]byte("version https://git-lfs.github.com/spec/v1\noid sha256:" + oid + "\nsize -1\n"))
	f.Add([]byte("version https://git-lfs.github.com/spec/v1\noid sha256:../../../../etc/passwd" + strings.Repeat("0", 41) + "\nsize 1\n"))
	f.Add([]byte("version https://git-lfs.github.com/spec/v1\noid sha256:" + oid + "\nsize 99999999999999999999\n"))
	f.Fuzz(func(t *testing.T, b []byte) {
		p, ok := parseLFSPointer(b)
		if !ok {
			return
		}
		if len(p.OID) != 64 || strings.Trim(p.OID, "0123456789abcdefABCDEF") != "" {
			t.Fatalf("oid %q accepted", p.OID)
		}
		if p.Size < 0 {
			t.Fatalf("size %d accepted", p.Size)
		}
		if len(b) > maxLFSPointer {
			t.Fatalf("a pointer of %d bytes accepted", len(b))
		}
	})
}

// FuzzLinkTarget: whatever a symbolic link in a commit points at,
// linkTarget refuses it or gives a path inside the repository. The link's
// own path is one in the repository (a tree's path, or what linkTarget
// gave for the hop before), never absolute.
func FuzzLinkTarget(f *testing.F) {
	f.Add("models/kws.onnx", "../shared/kws.onnx")
	f.Add("models/kws.onnx", "../../etc/passwd")
	f.Add("kws.onnx", "/etc/passwd")
	f.Add("a/b/c.onnx", "./././../x")
	f.Fuzz(func(t *testing.T, link, target string) {
		if path.IsAbs(link) {
			return
		}
		p, err := linkTarget(link, target)
		if err != nil {
			return
		}
		if p == ".." || strings.HasPrefix(p, "../") || strings.HasPrefix(p, "/") || filepath.IsAbs(p) {
			t.Fatalf("link %q → %q resolved to %q, outside the repository", link, target, p)
		}
	})
}

// FuzzEntryHead: judging whether any bytes filed under a key are a current
// entry (what a merge keeps) never panics, and accepts only an entry
// whose head gives the key it is filed under.
func FuzzEntryHead(f *testing.F) {
	k := keyWith("blob", "opts")
	fig, err := encodeFigures(&cacheEntry{Blob: "blob", Version: AnalyzerVersion, Options: "opts", Metrics: &measure.Metrics{}})
	if err != nil {
		f.Fatal(err)
	}
	f.Add(byte(kindFigures), fig)
	f.Add(byte(kindDetail), []byte(`{"blob":"blob","version":"`+AnalyzerVersion+`","options":"opts","layers":true}`))
	f.Add(byte(kindDetail), []byte(`{"blob":"blob","version":[1,2],"options":"opts"}`))
	f.Add(byte(kindDetail), []byte(`{"blob":`))
	f.Fuzz(func(t *testing.T, kind byte, b []byte) {
		pk := k.pack(kind)
		if !entryCurrent(pk, b) {
			return
		}
		var head []string
		switch kind {
		case kindFigures:
			r := entryReader{s: string(b)}
			head = []string{r.str(), r.str(), r.str()}
		case kindDetail:
			head, _ = jsonHead(b, "blob", "version", "options")
		default:
			t.Fatalf("kind %q accepted", kind)
		}
		if !slices.Equal(head, []string{"blob", AnalyzerVersion, "opts"}) {
			t.Fatalf("accepted under blob's key an entry whose head is %q", head)
		}
	})
}
