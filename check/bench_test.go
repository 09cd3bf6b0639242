package check

import (
	"bytes"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadline/loadline/internal/corpus"
	"github.com/loadline/loadline/measure/benchmodel"
	"github.com/loadline/loadline/model/onnx"
)

// benchRepo is a repository whose last commit modifies 20 models of about
// 20 MB each (different weights on each side), with a budget that covers
// them; made once per benchmark binary.
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
	git := func(args ...string) {
		cmd := exec.Command("git", args...)
		cmd.Dir = dir
		cmd.Env = append(os.Environ(), "GIT_CONFIG_NOSYSTEM=1", "HOME="+dir)
		if out, err := cmd.CombinedOutput(); err != nil {
			b.Fatalf("git %v: %v\n%s", args, err, out)
		}
	}
	git("init", "-q", "-b", "main")
	git("config", "user.email", "bench@wrenfield.example")
	git("config", "user.name", "bench")
	git("config", "core.compression", "1")
	os.WriteFile(filepath.Join(dir, "loadline.yaml"), []byte(`version: 1
devices:
  hub: {ram: 64MiB, flash: 1GiB}
models:
  - path: "models/*.onnx"
    device: hub
    dims: {batch: 1}
    limits: {flash: 100MiB}
`), 0o644)
	for side := 0; side < 2; side++ {
		for i := 0; i < 20; i++ {
			m, err := benchmodel.BuildSeeded(20, uint64(100*side+i+1))
			if err != nil {
				b.Fatal(err)
			}
			data, err := onnx.Encode(m)
			if err != nil {
				b.Fatal(err)
			}
			p := filepath.Join(dir, "models", fmt.Sprintf("m%02d.onnx", i))
			os.MkdirAll(filepath.Dir(p), 0o755)
			if err := os.WriteFile(p, data, 0o644); err != nil {
				b.Fatal(err)
			}
		}
		git("add", "-A")
		git("commit", "-q", "-m", fmt.Sprintf("side %d", side))
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
