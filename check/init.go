package check

import (
	"fmt"
	"io/fs"
	"math"
	"path"
	"path/filepath"
	"sort"
	"strings"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/internal/display"
	"github.com/loadline/loadline/measure"
)

// InitOptions are the choices of `loadline init`.
type InitOptions struct {
	Dir string // the folder to search for models; its budget file is written there
	// Headroom is the share added to today's figures to make the starter
	// limits, e.g. 0.10 for 10 %; 0 sets the limits at today's figures.
	Headroom float64
}

// StarterBudget finds the models under o.Dir, measures them, and returns
// the text of a starter loadline.yaml that today's models pass without a
// warning, and the figures for the caller's summary:
//
//   - every model is measured with its own symbolic dims bound (by the
//     names its inputs have, each to 1, marked to be set);
//   - each limit is today's figure plus the headroom, raised so that the
//     figure plus the headroom also stays below warn_at of it: a fresh
//     starter does not warn;
//   - models of one folder that share their dims and whose figures are all
//     known share one rule whose glob covers the folder's models; other
//     models get a rule each, so that every model is covered by exactly one;
//   - a figure that cannot be computed (a shape that depends on an input's
//     value) gets no limit but a commented-out one that names the binding
//     it needs; a model that cannot be read at all gets a commented-out rule
//     with the reason;
//   - the device's capacities are commented-out placeholders to fill in,
//     and no limit is written as a share of them.
func StarterBudget(o InitOptions) (string, []*measure.Metrics, error) {
	if o.Headroom < 0 || math.IsNaN(o.Headroom) {
		return "", nil, fmt.Errorf("headroom %g: give a share of 0 or more, e.g. 0.10 for 10 %%", o.Headroom)
	}
	var paths []string
	err := filepath.WalkDir(o.Dir, func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		if d.IsDir() && (d.Name() == ".git" || d.Name() == "node_modules") {
			return filepath.SkipDir
		}
		if !d.IsDir() && IsModelPath(p) {
			paths = append(paths, p)
		}
		return nil
	})
	if err != nil {
		return "", nil, err
	}
	if len(paths) == 0 {
		return "", nil, fmt.Errorf("no model files (%s) under %s", strings.Join(modelExts, ", "), o.Dir)
	}
	sort.Strings(paths)
	ms := MeasureFiles(paths, measure.Options{})
	// Measure again, each model with its own symbolic dims bound.
	dims := make([]map[string]int64, len(ms))
	for i, m := range ms {
		if names := symbolicDims(m); len(names) > 0 {
			dims[i] = map[string]int64{}
			for _, n := range names {
				dims[i][n] = 1
			}
			ms[i] = MeasureFile(paths[i], measure.Options{Dims: dims[i]})
		}
	}
	for _, m := range ms {
		rel, _ := filepath.Rel(o.Dir, m.Path)
		m.Path = filepath.ToSlash(rel)
	}
	// Group models by folder, and within a folder by what their rule must
	// say (dims, which figures are known): one rule per folder when one
	// group holds all of the folder's models.
	type group struct {
		key    string
		models []int
	}
	type folder struct {
		name   string
		groups []*group
	}
	var folders []*folder
	byName := map[string]*folder{}
	for i, m := range ms {
		name := path.Dir(m.Path)
		f := byName[name]
		if f == nil {
			f = &folder{name: name}
			byName[name] = f
			folders = append(folders, f)
		}
		key := fmt.Sprint(dims[i], len(m.Unresolved) > 0, m.Error != "")
		var g *group
		for _, x := range f.groups {
			if x.key == key {
				g = x
			}
		}
		if g == nil {
			g = &group{key: key}
			f.groups = append(f.groups, g)
		}
		g.models = append(g.models, i)
	}
	var b strings.Builder
	pct := fmt.Sprintf("%.0f%%", 100*o.Headroom)
	fmt.Fprintf(&b, `# loadline budget file, written by loadline init.
# Limits start at today's figures plus %s headroom, set so that today's
# models pass without a warning; tighten them to what your devices really
# have, and commit this file at the repository root.
version: 1

# devices: what each target has. weights says where the runtime keeps the
# weights while the model runs (flash or ram).
devices:
  my-device:               # PLACEHOLDER: rename to your board; add one entry per target
    weights: flash
    # PLACEHOLDER capacities: fill in your board's, then limits may be written
    # as a share of them (ram: 90%%). Until then every limit is absolute.
    # ram: 512KiB          # SRAM for the model (activations, plus weights when weights: ram)
    # flash: 4MiB          # storage for the model

# models: which files a rule covers (a glob from the repository root, ** for
# any depth), the device they ship on, values for symbolic dims, limits on
# the head's figures, and how much a change may grow each figure.
# Metrics: file, params, weights (parameter bytes), macs, flops, arena
# (deployed activation arena), ram, flash. Units: B, KiB, MiB (1024-based),
# KB, MB (1000-based); k, M, G for counts; %% of the device for ram and flash.
models:
`, pct)
	for _, f := range folders {
		for _, g := range f.groups {
			var glob string
			if len(f.groups) == 1 {
				glob = folderGlob(f.name, ms, g.models)
			}
			if glob != "" {
				writeRule(&b, glob, ms, g.models, dims[g.models[0]], o.Headroom)
				continue
			}
			for _, i := range g.models {
				writeRule(&b, escapeGlob(ms[i].Path), ms, []int{i}, dims[i], o.Headroom)
			}
		}
	}
	b.WriteString(`
# waivers: a bounded exception for one metric of the models a path matches:
# what it excuses (excuses: limit, growth, or both), an optional ceiling
# (up_to: 320M) above which it does not apply, an expiry date and a reason.
#   - {path: models/cam/detect.onnx, metric: macs, excuses: limit, up_to: 320M,
#      until: 2027-01-31, reason: pruned in the next release}
waivers: []
`)
	return b.String(), ms, nil
}

// symbolicDims lists the names of the symbolic dims of a model's inputs,
// in order of first appearance.
func symbolicDims(m *measure.Metrics) []string {
	var names []string
	seen := map[string]bool{}
	for _, in := range m.Inputs {
		for _, d := range in.Shape {
			if s, ok := d.(string); ok && !seen[s] {
				seen[s] = true
				names = append(names, s)
			}
		}
	}
	return names
}

// folderGlob is the glob of a folder's models ("models/cam/*.onnx", with
// *.{onnx,tflite} when the folder has both); "" when the folder is the
// root, where such a glob would also match files added beside the budget.
func folderGlob(folder string, ms []*measure.Metrics, idx []int) string {
	exts := map[string]bool{}
	for _, i := range idx {
		exts[strings.TrimPrefix(strings.ToLower(path.Ext(ms[i].Path)), ".")] = true
	}
	var list []string
	for e := range exts {
		list = append(list, e)
	}
	sort.Strings(list)
	pattern := "*." + list[0]
	if len(list) > 1 {
		pattern = "*.{" + strings.Join(list, ",") + "}"
	}
	if folder == "." {
		return pattern
	}
	return escapeGlob(folder) + "/" + pattern
}

// starterMetrics are the figures a starter rule limits, in this order.
var starterMetrics = []string{budget.MetricRAM, budget.MetricFlash, budget.MetricWeights, budget.MetricParams, budget.MetricMACs}

// writeRule writes one rule covering the models idx, with limits at the
// largest of their figures plus headroom, or a commented-out rule when
// none of them could be read.
func writeRule(b *strings.Builder, glob string, ms []*measure.Metrics, idx []int, dims map[string]int64, headroom float64) {
	var names []string
	for _, i := range idx {
		names = append(names, path.Base(ms[i].Path))
	}
	first := ms[idx[0]]
	if first.Error != "" {
		fmt.Fprintf(b, "  # %s could not be measured: %s\n", strings.Join(names, ", "), strings.ReplaceAll(first.Error, "\n", " "))
		fmt.Fprintf(b, "  # - path: %q\n  #   device: my-device\n", glob)
		return
	}
	fig := map[string]int64{}
	unknown := map[string]string{}
	for _, i := range idx {
		f := (&budget.Device{Weights: budget.WeightsFlash}).Deploy(Figures(ms[i]))
		for _, metric := range starterMetrics {
			if v, ok := f.Value(metric); ok {
				fig[metric] = max(fig[metric], v)
			} else if _, seen := unknown[metric]; !seen {
				unknown[metric] = needs(ms[i])
			}
		}
	}
	// The names go in a comment: escaped, so that a line break in a file
	// name cannot end the comment and write keys of its own.
	fmt.Fprintf(b, "  - path: %q   # %s\n", glob, display.Escape(strings.Join(names, ", ")))
	b.WriteString("    device: my-device\n")
	if len(dims) > 0 {
		var parts []string
		for _, n := range sortedDimNames(dims) {
			parts = append(parts, fmt.Sprintf("%s: %d", yamlKey(n), dims[n]))
		}
		fmt.Fprintf(b, "    dims: {%s}   # PLACEHOLDER values: set each to what the device feeds the model\n", strings.Join(parts, ", "))
	}
	b.WriteString("    limits:                # today's largest figure + headroom, below warn_at\n")
	for _, metric := range starterMetrics {
		if why, ok := unknown[metric]; ok {
			fmt.Fprintf(b, "      # %s: not limited: cannot be computed until %s\n", metric, why)
			continue
		}
		v := fig[metric]
		if v == 0 && (metric == budget.MetricMACs || metric == budget.MetricRAM) {
			continue
		}
		lim := starterLimit(v, headroom)
		if budget.IsBytes(metric) {
			fmt.Fprintf(b, "      %s: %s\n", metric, yamlBytes(lim))
		} else {
			fmt.Fprintf(b, "      %s: %d\n", metric, lim)
		}
	}
	var growth []string
	for _, g := range []struct {
		metric, allow string
	}{{budget.MetricRAM, "5%"}, {budget.MetricMACs, "10%"}, {budget.MetricParams, "10%"}} {
		if _, ok := unknown[g.metric]; !ok {
			growth = append(growth, g.metric+": "+g.allow)
		}
	}
	fmt.Fprintf(b, "    growth: {%s}   # how much one change may add, against the base revision\n", strings.Join(growth, ", "))
	fmt.Fprintf(b, "    warn_at: %d%%           # warn when a figure passes this share of its limit\n", budget.DefaultWarnAt/10000)
}

// starterLimit is the smallest limit that today's figure v plus the
// headroom stays within, and below the default warn_at of: v × (1 +
// headroom), rounded up, divided by warn_at, rounded up.
func starterLimit(v int64, headroom float64) int64 {
	target := int64(math.Ceil(float64(v) * (1 + headroom)))
	// ceil(target × 10⁶ / warn_at) in integers: warn_at of the limit,
	// rounded down as evaluation rounds it, is then at least target.
	return (target*1_000_000 + budget.DefaultWarnAt - 1) / budget.DefaultWarnAt
}

// needs says what a model with figures that cannot be computed needs
// bound: the values of its integer inputs (shape or index operands given
// at run time), else the first unresolved node's reason.
func needs(m *measure.Metrics) string {
	var ins []string
	for _, in := range m.Inputs {
		if strings.HasPrefix(in.DType, "int") || strings.HasPrefix(in.DType, "uint") {
			ins = append(ins, in.Name)
		}
	}
	why := ""
	if len(m.Unresolved) > 0 {
		u := m.Unresolved[0]
		why = fmt.Sprintf("%s (%s): %s", u.Node, u.Op, u.Reason)
	}
	if len(ins) > 0 {
		return fmt.Sprintf("the value of input %s is bound (%s)", strings.Join(ins, ", "), why)
	}
	return "its unresolved nodes are bound: " + why
}

func sortedDimNames(d map[string]int64) []string {
	names := make([]string, 0, len(d))
	for n := range d {
		names = append(names, n)
	}
	sort.Strings(names)
	return names
}

// yamlKey quotes a dim name that YAML would not read as a plain string.
func yamlKey(s string) string {
	for _, r := range s {
		if !(r == '_' || r == '-' || r == '.' || r >= '0' && r <= '9' || r >= 'a' && r <= 'z' || r >= 'A' && r <= 'Z') {
			return fmt.Sprintf("%q", s)
		}
	}
	switch strings.ToLower(s) {
	case "", "true", "false", "yes", "no", "on", "off", "null", "y", "n", "~":
		return fmt.Sprintf("%q", s)
	}
	return s
}

// escapeGlob makes a folder name match only itself in a budget glob: a
// folder such as "cam[v2]" or "kws{a,b}" would otherwise be a pattern.
// The budget file refuses backslashes in paths, so each special character
// becomes a one-character class ("[[]v2]"); a "]" outside a class is
// literal already.
func escapeGlob(p string) string {
	var b strings.Builder
	for _, r := range p {
		if strings.ContainsRune(`*?[{}`, r) {
			b.WriteString("[" + string(r) + "]")
			continue
		}
		b.WriteRune(r)
	}
	return b.String()
}

// yamlBytes writes a byte figure in the largest binary unit that keeps it
// readable: whole KiB, rounded up, from 1 KiB on.
func yamlBytes(v int64) string {
	if v >= 1<<10 {
		return fmt.Sprintf("%dKiB", (v+1023)/1024)
	}
	return fmt.Sprintf("%dB", v)
}
