package check

import (
	"bytes"
	"crypto/sha256"
	"encoding/json"
	"fmt"
	"maps"
	"path/filepath"
	"slices"
	"sort"
	"strings"
	"sync"

	"github.com/loadline/loadline/measure"
)

// AnalyzerVersion names the rules that produce the figures. It is part of
// every cache key: bump it whenever a change to a decoder or measure can
// change a figure, so that no stale figure survives an upgrade.
const AnalyzerVersion = "loadline-figures-15"

// entryFormat names the form of the cache's entries (entry.go). It is part
// of every cache key beside AnalyzerVersion: change it whenever that form
// changes, so that an entry of another form is never looked up (a miss,
// measured again).
const entryFormat = "figures-binary-1"

// Cache keeps measured figures keyed by blob id, analyzer version and the
// measuring options, in pack files under the repository's git directory
// (pack.go): each key has two entries, the figures (small, read by every
// check) and the per-layer view (read only when a report shows its detail
// or a device's target estimates from it). A run
// opens each pack once and reads only the entries it needs; what it
// measures is written as one new pack when it ends (Flush), and packs are
// merged when there are more than a few.
//
// It is safe under concurrent runs: a pack is written to a temporary file
// and renamed into place, and never changed after. It trusts nothing it
// reads: a pack that is not a regular file (a link, a device, a FIFO) or
// whose index does not fit the file is skipped, and an entry larger than
// its bound, that does not decode, or that was made for another blob,
// analyzer version or options is a miss, measured again and rewritten.
type Cache struct {
	Dir string

	openOnce sync.Once
	packs    []*pack // newest first

	mu      sync.Mutex
	pending map[packKey][]byte // entries of this run, not yet written
}

// Bounds of what the cache reads: figures are a few hundred bytes (the
// unresolved list of a large model can make them longer); the detail holds
// the live bytes of every step of the schedule.
const (
	maxFiguresEntry = 16 << 20
	maxDetailEntry  = 64 << 20
)

// cacheEntry is one stored measurement, bound to the key it was made for,
// with the blobs it depended on besides the model itself (external data
// files), so that an entry is only used when they are unchanged too.
type cacheEntry struct {
	Blob    string            `json:"blob"`
	Version string            `json:"version"`
	Options string            `json:"options"`
	Deps    map[string]string `json:"deps,omitempty"` // path from the model's folder → blob id
	Metrics *measure.Metrics  `json:"metrics,omitempty"`
	// Layers marks a per-layer entry: the model was measured with the
	// per-layer view, and PerLayer is what it gave.
	Layers   bool      `json:"layers,omitempty"`
	PerLayer *perLayer `json:"per_layer,omitempty"`
}

// perLayer is the part of the figures that only the per-layer view fills,
// kept apart from them.
type perLayer struct {
	Layers          []measure.Layer `json:"layers"`
	LiveBytesByStep []int64         `json:"live_bytes_by_step"`
}

// cacheKey is where the figures of one blob are kept.
type cacheKey struct {
	blob    string
	options string   // every option that changes the figures, canonical
	digest  [20]byte // of version, blob and options: the key in a pack
}

// NewCache returns the cache of a repository.
func NewCache(r *Repo) *Cache {
	return &Cache{Dir: filepath.Join(r.CommonDir, "loadline", "cache")}
}

// keyOf names the figures of one blob under every option that can change
// them: dims, shapes and values, lenient binding and the deployed view's
// rewrites. The per-layer view is no
// part of it: it is kept as the entry's detail, beside the figures.
func keyOf(blob string, opts measure.Options) cacheKey {
	return keyWith(blob, keyOptions(opts))
}

// keyWith is keyOf for options written by keyOptions, once for the many
// blobs measured with them.
func keyWith(blob, options string) cacheKey {
	b := make([]byte, 0, len(AnalyzerVersion)+len(entryFormat)+len(blob)+len(options)+3)
	for i, part := range []string{AnalyzerVersion, entryFormat, blob, options} {
		if i > 0 {
			b = append(b, 0)
		}
		b = append(b, part...)
	}
	sum := sha256.Sum256(b)
	k := cacheKey{blob: blob, options: options}
	copy(k.digest[:], sum[:])
	return k
}

// keyOptions writes every option that changes the figures, canonically.
func keyOptions(opts measure.Options) string {
	names := make([]string, 0, len(opts.Dims))
	for k := range opts.Dims {
		names = append(names, k)
	}
	sort.Strings(names)
	var o strings.Builder
	for _, k := range names {
		fmt.Fprintf(&o, "%s=%d\x00", k, opts.Dims[k])
	}
	// Shapes and values, when given, and lenient binding (what check
	// uses) change the figures or their binding issues.
	for _, k := range slices.Sorted(maps.Keys(opts.Shapes)) {
		fmt.Fprintf(&o, "shape %s=%v\x00", k, opts.Shapes[k])
	}
	for _, k := range slices.Sorted(maps.Keys(opts.Values)) {
		fmt.Fprintf(&o, "value %s=%v\x00", k, opts.Values[k])
	}
	if opts.Lenient {
		fmt.Fprintf(&o, "lenient\x00")
	}
	deploy := measure.DefaultDeployOptions()
	if opts.Deploy != nil {
		deploy = *opts.Deploy
	}
	if opts.Digests {
		fmt.Fprintf(&o, "digests\x00")
	}
	fmt.Fprintf(&o, "deploy=%+v", deploy)
	return o.String()
}

// Get returns the cached figures and the dependencies they were read with
// (paths from the model's folder → blob id), or nil; with layers, the
// figures carry the per-layer view too, and it is a miss when that is not
// cached. depOK reports whether a dependency's recorded blob id is still
// the one at the revision.
func (c *Cache) Get(k cacheKey, layers bool, depOK func(path, blob string) bool) (*measure.Metrics, map[string]string) {
	if c == nil {
		return nil, nil
	}
	e, ok := c.read(k, kindFigures, maxFiguresEntry)
	if !ok || e.Metrics == nil {
		return nil, nil
	}
	for p, blob := range e.Deps {
		if !depOK(p, blob) {
			return nil, nil
		}
	}
	if !layers {
		return e.Metrics, e.Deps
	}
	d, ok := c.read(k, kindDetail, maxDetailEntry)
	if !ok || !d.Layers || d.PerLayer == nil {
		return nil, nil
	}
	e.Metrics.Layers, e.Metrics.MemoryDetail.LiveBytesByStep = d.PerLayer.Layers, d.PerLayer.LiveBytesByStep
	return e.Metrics, e.Deps
}

// read decodes one entry, refusing one larger than limit bytes, one that
// does not decode, and one made for another key.
func (c *Cache) read(k cacheKey, kind byte, limit int64) (*cacheEntry, bool) {
	var e *cacheEntry
	if kind == kindFigures {
		s, ok := c.lookupString(k.pack(kind), limit)
		if !ok {
			return nil, false
		}
		var err error
		if e, err = decodeFigures(s); err != nil {
			return nil, false
		}
	} else {
		b, ok := c.lookup(k.pack(kind), limit)
		if !ok {
			return nil, false
		}
		e = &cacheEntry{}
		if json.Unmarshal(b, e) != nil {
			return nil, false
		}
	}
	if e.Blob != k.blob || e.Version != AnalyzerVersion || e.Options != k.options {
		return nil, false // corrupt, stale or forged for another key: measured again and rewritten
	}
	return e, true
}

// entryLimit is the bound on the entry filed under k, by its kind.
func entryLimit(k packKey) int64 {
	if k[packKeyLen-1] == kindFigures {
		return maxFiguresEntry
	}
	return maxDetailEntry
}

// entryCurrent reports whether b, read under key k, is an entry this
// version would read: its own blob and options give k again under the
// current analyzer version and entry format (keyWith). Only the entry's
// head is read: a figures entry's first three strings, a per-layer
// entry's first three JSON members.
func entryCurrent(k packKey, b []byte) bool {
	var blob, version, options string
	switch k[packKeyLen-1] {
	case kindFigures:
		r := entryReader{s: string(b)}
		blob, version, options = r.str(), r.str(), r.str()
		if r.err != nil {
			return false
		}
	case kindDetail:
		head, ok := jsonHead(b, "blob", "version", "options")
		if !ok {
			return false
		}
		blob, version, options = head[0], head[1], head[2]
	default:
		return false
	}
	return version == AnalyzerVersion && keyWith(blob, options).pack(k[packKeyLen-1]) == k
}

// jsonHead reads the string members names, in that order, at the start
// of the JSON object b, without reading the rest of it.
func jsonHead(b []byte, names ...string) ([]string, bool) {
	d := json.NewDecoder(bytes.NewReader(b))
	if t, err := d.Token(); err != nil || t != json.Delim('{') {
		return nil, false
	}
	out := make([]string, len(names))
	for i, name := range names {
		key, err := d.Token()
		if err != nil || key != name {
			return nil, false
		}
		v, err := d.Token()
		s, isString := v.(string)
		if err != nil || !isString {
			return nil, false
		}
		out[i] = s
	}
	return out, true
}

// Put keeps figures, with layers (measured with the per-layer view) in two
// entries: the figures without it, and the per-layer view; Flush writes
// them. Errors are ignored because the cache only saves time.
func (c *Cache) Put(k cacheKey, m *measure.Metrics, deps map[string]string, layers bool) {
	if c == nil || m == nil || m.Error != "" {
		return
	}
	figures := *m
	figures.Layers, figures.MemoryDetail.LiveBytesByStep = nil, nil
	fig, err := encodeFigures(&cacheEntry{Blob: k.blob, Version: AnalyzerVersion, Options: k.options, Deps: deps, Metrics: &figures})
	if err != nil {
		return
	}
	if layers {
		det, err := json.Marshal(cacheEntry{Blob: k.blob, Version: AnalyzerVersion, Options: k.options, Layers: true,
			PerLayer: &perLayer{Layers: m.Layers, LiveBytesByStep: m.MemoryDetail.LiveBytesByStep}})
		if err != nil {
			return
		}
		c.keep(k.pack(kindDetail), det, maxDetailEntry)
	}
	c.keep(k.pack(kindFigures), fig, maxFiguresEntry)
}

func (c *Cache) keep(pk packKey, b []byte, limit int) {
	if len(b) > limit {
		return
	}
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.pending == nil {
		c.pending = map[packKey][]byte{}
	}
	c.pending[pk] = b
}
