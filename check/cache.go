package check

import (
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"sort"

	"github.com/loadline/loadline/measure"
)

// AnalyzerVersion names the rules that produce the figures. It is part of
// every cache key: bump it whenever a change to a decoder or measure can
// change a figure, so that no stale figure survives an upgrade.
const AnalyzerVersion = "loadline-figures-9"

// Cache keeps measured figures keyed by blob id, analyzer version and dims,
// in files under the repository's git directory. It is safe under
// concurrent runs: entries are written to a temporary file and renamed into
// place, and a corrupt or unreadable entry counts as a miss and is
// rewritten.
type Cache struct {
	Dir string
}

// cacheEntry is one stored measurement with the blobs it depended on
// besides the model itself (external data files), so that an entry is only
// used when they are unchanged too.
type cacheEntry struct {
	Version string            `json:"version"`
	Deps    map[string]string `json:"deps"` // path from the model's folder → blob id
	Metrics *measure.Metrics  `json:"metrics"`
}

// NewCache returns the cache of a repository.
func NewCache(r *Repo) *Cache {
	return &Cache{Dir: filepath.Join(r.CommonDir, "loadline", "cache")}
}

// cacheKey names the figures of one blob under every option that can
// change them: dims, the deployed view's rewrites, and whether the
// per-layer view was asked for.
func cacheKey(blob string, opts measure.Options) string {
	names := make([]string, 0, len(opts.Dims))
	for k := range opts.Dims {
		names = append(names, k)
	}
	sort.Strings(names)
	h := sha256.New()
	fmt.Fprintf(h, "%s\x00%s\x00", AnalyzerVersion, blob)
	for _, k := range names {
		fmt.Fprintf(h, "%s=%d\x00", k, opts.Dims[k])
	}
	// Shapes and values, when given, and lenient binding (what check
	// uses) change the figures or their binding issues.
	for _, k := range sortedKeys(opts.Shapes) {
		fmt.Fprintf(h, "shape %s=%v\x00", k, opts.Shapes[k])
	}
	for _, k := range sortedKeys(opts.Values) {
		fmt.Fprintf(h, "value %s=%v\x00", k, opts.Values[k])
	}
	if opts.Lenient {
		fmt.Fprintf(h, "lenient\x00")
	}
	deploy := measure.DefaultDeployOptions()
	if opts.Deploy != nil {
		deploy = *opts.Deploy
	}
	// The defaults and no layers add nothing, so the keys of earlier
	// versions stay valid.
	if deploy != measure.DefaultDeployOptions() {
		fmt.Fprintf(h, "deploy=%+v\x00", deploy)
	}
	if opts.Layers {
		fmt.Fprintf(h, "layers\x00")
	}
	if opts.Digests {
		fmt.Fprintf(h, "digests\x00")
	}
	return hex.EncodeToString(h.Sum(nil))[:40]
}

func (c *Cache) file(key string) string {
	return filepath.Join(c.Dir, key[:2], key+".json")
}

// Get returns the cached figures and the dependencies they were read with
// (paths from the model's folder → blob id), or nil. depOK reports whether
// a dependency's recorded blob id is still the one at the revision.
func (c *Cache) Get(key string, depOK func(path, blob string) bool) (*measure.Metrics, map[string]string) {
	if c == nil {
		return nil, nil
	}
	b, err := os.ReadFile(c.file(key))
	if err != nil {
		return nil, nil
	}
	var e cacheEntry
	if json.Unmarshal(b, &e) != nil || e.Version != AnalyzerVersion || e.Metrics == nil {
		return nil, nil // corrupt or stale: measured again and rewritten
	}
	for p, blob := range e.Deps {
		if !depOK(p, blob) {
			return nil, nil
		}
	}
	return e.Metrics, e.Deps
}

// Put stores figures; errors are ignored because the cache only saves time.
func (c *Cache) Put(key string, m *measure.Metrics, deps map[string]string) {
	if c == nil || m == nil || m.Error != "" {
		return
	}
	b, err := json.Marshal(cacheEntry{Version: AnalyzerVersion, Deps: deps, Metrics: m})
	if err != nil {
		return
	}
	f := c.file(key)
	if err := os.MkdirAll(filepath.Dir(f), 0o755); err != nil {
		return
	}
	tmp, err := os.CreateTemp(filepath.Dir(f), ".tmp-*")
	if err != nil {
		return
	}
	_, werr := tmp.Write(b)
	cerr := tmp.Close()
	if werr != nil || cerr != nil {
		os.Remove(tmp.Name())
		return
	}
	if os.Rename(tmp.Name(), f) != nil {
		os.Remove(tmp.Name())
	}
}

func sortedKeys[V any](m map[string]V) []string {
	out := make([]string, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	sort.Strings(out)
	return out
}
