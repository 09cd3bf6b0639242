package check

import (
	"bytes"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadline/loadline/internal/benchrepo"
	"github.com/loadline/loadline/internal/corpus"
)

// benchRepoDir is a repository whose last commit modifies 20 models of
// about 20 MB each (different weights on each side), with a budget that
// covers them; made once per benchmark binary.
var benchRepoDir string

func makeBenchRepo(b *testing.B) string {
	b.Helper()
	if benchRepoDir != "" {
		return benchRepoDir
	}
	corpus.Tool(b, "git", "git")
	dir, err := os.MkdirTemp("", "loadline-bench-")
	if err != nil {
		b.Fatal(err)
	}
	if err := benchrepo.Write(dir, 20, 20, false); err != nil {
		b.Fatal(err)
	}
	benchRepoDir = dir
	return dir
}

// BenchmarkCheck20Models checks a change of 20 models of about 20 MB each
// (40 blobs read and measured) with a cold cache and with a warm one, and
// times `git cat-file --batch` reading the same 40 blobs, side by side in
// one run.
func BenchmarkCheck20Models(b *testing.B) {
	dir := makeBenchRepo(b)
	defer func() {
		if !b.Failed() {
			os.RemoveAll(dir)
			benchRepoDir = ""
		}
	}()
	var blobIDs bytes.Buffer
	for _, rev := range []string{"HEAD~1", "HEAD"} {
		out, err := exec.Command("git", "-C", dir, "ls-tree", "-r", rev, "models/").Output()
		if err != nil {
			b.Fatal(err)
		}
		for _, line := range strings.Split(strings.TrimSpace(string(out)), "\n") {
			f := strings.Fields(line)
			blobIDs.WriteString(f[2] + "\n")
		}
	}
	var blobBytes int64
	b.Run("git-cat-file", func(b *testing.B) {
		for b.Loop() {
			cmd := exec.Command("git", "-C", dir, "cat-file", "--batch")
			cmd.Stdin = bytes.NewReader(blobIDs.Bytes())
			var n countingWriter
			cmd.Stdout = &n
			if err := cmd.Run(); err != nil {
				b.Fatal(err)
			}
			blobBytes = int64(n)
		}
		b.SetBytes(blobBytes)
	})
	opts := Options{Dir: dir, Base: "HEAD~1", Head: "HEAD"}
	b.Run("cold", func(b *testing.B) {
		b.SetBytes(blobBytes)
		b.ReportAllocs()
		for b.Loop() {
			os.RemoveAll(filepath.Join(dir, ".git", "loadline"))
			res, st, err := Run(opts)
			if err != nil {
				b.Fatal(err)
			}
			if len(res.Models) != 20 || st.Measured.Load() != 40 {
				b.Fatalf("%d models, %d measured", len(res.Models), st.Measured.Load())
			}
		}
	})
	b.Run("warm", func(b *testing.B) {
		if _, _, err := Run(opts); err != nil {
			b.Fatal(err)
		}
		b.ReportAllocs()
		for b.Loop() {
			_, st, err := Run(opts)
			if err != nil {
				b.Fatal(err)
			}
			if st.Measured.Load() != 0 {
				b.Fatalf("warm run measured %d models", st.Measured.Load())
			}
		}
	})
}

// countingWriter discards what it is given and counts it.
type countingWriter int64

func (c *countingWriter) Write(p []byte) (int, error) {
	*c += countingWriter(len(p))
	return len(p), nil
}

// BenchmarkWarmCheck re-checks a change of 500 and of 2,000 small models in
// one folder with a warm cache: the time per check should grow with the
// number of models, not with its square.
func BenchmarkWarmCheck(b *testing.B) {
	corpus.Tool(b, "git", "git")
	for _, n := range []int{500, 2000} {
		b.Run(fmt.Sprintf("models-%d", n), func(b *testing.B) {
			dir := b.TempDir()
			if err := benchrepo.Write(dir, n, 0, true); err != nil {
				b.Fatal(err)
			}
			opts := Options{Dir: dir, Base: "HEAD~1", Head: "HEAD"}
			if _, _, err := Run(opts); err != nil {
				b.Fatal(err)
			}
			b.ReportAllocs()
			b.ResetTimer()
			for b.Loop() {
				res, st, err := Run(opts)
				if err != nil {
					b.Fatal(err)
				}
				if len(res.Models) != n || st.Measured.Load() != 0 {
					b.Fatalf("%d models, %d measured; want %d from the cache", len(res.Models), st.Measured.Load(), n)
				}
			}
		})
	}
}
