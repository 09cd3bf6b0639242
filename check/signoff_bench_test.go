package check

import (
	"fmt"
	"os"
	"path/filepath"
	"testing"

	"github.com/loadline/loadline/internal/benchrepo"
	"github.com/loadline/loadline/internal/corpus"
	"github.com/loadline/loadline/measure/benchmodel"
	"github.com/loadline/loadline/model/onnx"
)

// BenchmarkSignoff50Models10Releases times the sign-off of a repository
// of 50 models (about 1 MB of weights each) with 10 earlier release tags,
// each release changing 10 of the models: cold (no cache) and warm (the
// second run, every blob from the cache). 50 + 10 × 10 = 150 distinct
// blobs are measured cold. Run it with
//
//	go test ./check -run '^$' -bench Signoff50 -benchtime 3x
func BenchmarkSignoff50Models10Releases(b *testing.B) {
	corpus.Tool(b, "git", "git")
	dir := b.TempDir()
	git := func(args ...string) {
		if err := benchrepo.Git(dir, args...); err != nil {
			b.Fatal(err)
		}
	}
	write := func(i int, seed uint64) {
		m, err := benchmodel.BuildSeeded(1, seed)
		if err != nil {
			b.Fatal(err)
		}
		data, err := onnx.Encode(m)
		if err != nil {
			b.Fatal(err)
		}
		p := filepath.Join(dir, "models", fmt.Sprintf("m%02d.onnx", i))
		if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
			b.Fatal(err)
		}
		if err := os.WriteFile(p, data, 0o644); err != nil {
			b.Fatal(err)
		}
	}
	if err := benchrepo.Init(dir); err != nil {
		b.Fatal(err)
	}
	for i := range 50 {
		write(i, uint64(i+1))
	}
	for r := range 11 {
		if r > 0 {
			for i := range 10 {
				write((r*10+i)%50, uint64(1000*r+i+1))
			}
		}
		git("add", "-A")
		git("commit", "-q", "-m", fmt.Sprintf("release %d", r))
		if r < 10 {
			git("tag", fmt.Sprintf("v1.%d.0", r))
		}
	}
	cacheDir := filepath.Join(dir, ".git", "loadline")
	run := func(b *testing.B) {
		s, stats, err := Signoff(SignoffOptions{Dir: dir})
		if err != nil {
			b.Fatal(err)
		}
		if len(s.Releases) != 10 || len(s.Current.Models) != 50 {
			b.Fatalf("%d releases, %d models", len(s.Releases), len(s.Current.Models))
		}
		b.ReportMetric(float64(stats.Measured.Load()), "measured/op")
	}
	b.Run("cold", func(b *testing.B) {
		b.ReportAllocs()
		for range b.N {
			if err := os.RemoveAll(cacheDir); err != nil {
				b.Fatal(err)
			}
			run(b)
		}
	})
	b.Run("warm", func(b *testing.B) {
		b.ReportAllocs()
		run(b) // fill the cache
		b.ResetTimer()
		for range b.N {
			run(b)
		}
	})
}
