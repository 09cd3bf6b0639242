package check

import (
	"fmt"
	"path"
	"path/filepath"
	"runtime"
	"sort"
	"strings"
	"sync"
	"sync/atomic"

	"github.com/loadline/loadline/measure"
	"github.com/loadline/loadline/model/format"
)

// Stats counts what a check did, for progress lines and tests.
type Stats struct {
	Measured  atomic.Int64 // models decoded and measured
	CacheHits atomic.Int64 // models whose figures came from the cache
}

// Line says what a run did in one line, counting models, not the sides
// measured: "2 models changed; 3 of 4 figures from cache". what is how
// the models were chosen ("changed", "audited").
func (s *Stats) Line(models int, what string) string {
	line := plural(models, "model", "models") + " " + what
	hits, total := s.CacheHits.Load(), s.CacheHits.Load()+s.Measured.Load()
	if total > 0 {
		line += fmt.Sprintf("; %d of %d figures from cache", hits, total)
	}
	return line
}

// blobJob is one model file at one revision to measure.
type blobJob struct {
	snap *Snapshot
	path string
}

// measured is one job's figures and the repository paths of the external
// data files they were read with. The figures carry the per-layer view
// (Layers, LiveBytesByStep) when it was asked for, and only then, whether
// they were measured now or read from the cache.
type measured struct {
	*measure.Metrics
	deps []string
}

// measureBlobs measures each job in a pool of one worker per CPU; each
// worker reads its models into one buffer it reuses, and holds one model
// in memory at a time.
func measureBlobs(jobs []blobJob, opts measure.Options, cache *Cache, stats *Stats) []measured {
	out := make([]measured, len(jobs))
	options := keyOptions(opts)
	next := make(chan int)
	var wg sync.WaitGroup
	for range min(len(jobs), max(1, runtime.NumCPU())) {
		wg.Add(1)
		go func() {
			defer wg.Done()
			var buf []byte
			for i := range next {
				out[i] = measureBlob(jobs[i].snap, jobs[i].path, opts, options, cache, stats, &buf)
			}
		}()
	}
	for i := range jobs {
		next <- i
	}
	close(next)
	wg.Wait()
	return out
}

// measureBlob reads one model from the git object store at a snapshot
// (never from the working tree: what is checked is what is committed) into
// buf and measures it, using the cache when it can (options are opts as
// keyOptions writes them). Nothing returned refers to buf.
func measureBlob(s *Snapshot, p string, opts measure.Options, options string, cache *Cache, stats *Stats, buf *[]byte) measured {
	h, ok := s.Hash(p)
	if !ok {
		return measured{Metrics: failed(p, s.notThere(p))}
	}
	key := keyWith(h.String(), options)
	// External data is resolved against the model's own folder, and the
	// same blob may sit in two folders with different data beside it: the
	// cache records dependencies relative to the folder and checks them
	// against this copy's folder.
	dir := path.Dir(p)
	if m, deps := cache.Get(key, opts.Layers, func(dep, blob string) bool {
		dh, ok := s.Hash(path.Join(dir, dep))
		return ok && dh.String() == blob
	}); m != nil {
		stats.CacheHits.Add(1)
		m.Path = p
		return measured{m, repoPaths(dir, deps)}
	}
	data, err := s.ReadInto(p, buf)
	if err != nil {
		return measured{Metrics: failed(p, err)}
	}
	deps := map[string]string{}
	var mu sync.Mutex
	met := decodeAndMeasure(p, data, format.Options{
		Dir: dir,
		ReadFile: func(name string) ([]byte, error) {
			rel := filepath.ToSlash(name)
			dh, ok := s.Hash(rel)
			if !ok {
				return nil, fmt.Errorf("external data file %s is not in %s (commit it beside the model)", rel, s.Label)
			}
			local := rel
			if dir != "." {
				local = strings.TrimPrefix(rel, dir+"/")
			}
			mu.Lock()
			deps[local] = dh.String()
			mu.Unlock()
			return s.Read(rel)
		},
	}, opts, nil)
	if met.Error != "" {
		return measured{Metrics: met}
	}
	stats.Measured.Add(1)
	cache.Put(key, met, deps, opts.Layers)
	return measured{met, repoPaths(dir, deps)}
}

// repoPaths turns dependencies named from a model's folder into
// repository paths, sorted.
func repoPaths(dir string, deps map[string]string) []string {
	out := make([]string, 0, len(deps))
	for d := range deps {
		out = append(out, path.Join(dir, d))
	}
	sort.Strings(out)
	return out
}
