package check

import (
	"fmt"
	"io/fs"
	"math"
	"path"
	"path/filepath"
	"sort"
	"strings"

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
// the text of a starter loadline.yaml: one device and one rule per folder of
// models, limits at today's figures plus the headroom, and comments that
// explain each key. It returns the figures too, for the caller's summary.
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
		return "", nil, fmt.Errorf("no model files (.onnx) under %s", o.Dir)
	}
	sort.Strings(paths)
	ms := MeasureFiles(paths, measure.Options{})
	// Group by folder: one rule per folder keeps the file short and lets a
	// team split devices later.
	type group struct {
		folder string
		models []*measure.Metrics
	}
	var groups []*group
	byFolder := map[string]*group{}
	for _, m := range ms {
		rel, _ := filepath.Rel(o.Dir, m.Path)
		rel = filepath.ToSlash(rel)
		m.Path = rel
		folder := path.Dir(rel)
		g := byFolder[folder]
		if g == nil {
			g = &group{folder: folder}
			byFolder[folder] = g
			groups = append(groups, g)
		}
		g.models = append(g.models, m)
	}
	up := func(v int64) int64 { return int64(math.Ceil(float64(v) * (1 + o.Headroom))) }
	var b strings.Builder
	pct := fmt.Sprintf("%.0f%%", 100*o.Headroom)
	fmt.Fprintf(&b, `# loadline budget file, written by loadline init.
# Limits start at today's figures plus %s headroom: tighten them to what
# your devices really have, and commit this file at the repository root.
version: 1

# devices: what each target has. ram and flash are capacities; weights says
# where the runtime keeps the weights while the model runs (flash or ram).
devices:
  my-device:               # rename to your board; add one entry per target
    ram: 512KiB            # SRAM available to the model (activations, plus weights when weights: ram)
    flash: 4MiB            # storage for the model file
    weights: flash

# models: which files a rule covers (a glob from the repository root, ** for
# any depth), the device they ship on, values for symbolic dims, limits on
# the head's figures, and how much a change may grow each figure.
# Metrics: file, params, weights (parameter bytes), macs, flops, arena
# (deployed activation arena), ram, flash. Units: B, KiB, MiB (1024-based),
# KB, MB (1000-based); k, M, G for counts; %% of the device for ram and flash.
models:
`, pct)
	for _, g := range groups {
		glob := escapeGlob(g.folder) + "/*.onnx"
		if g.folder == "." {
			glob = "*.onnx"
		}
		var maxFile, maxParams, maxWeights, maxMACs int64
		var names []string
		var symbolic bool
		for _, m := range g.models {
			if m.Error != "" {
				fmt.Fprintf(&b, "  # %s could not be measured: %s\n", m.Path, strings.ReplaceAll(m.Error, "\n", " "))
				continue
			}
			names = append(names, path.Base(m.Path))
			maxFile = max(maxFile, m.FileBytes)
			maxParams = max(maxParams, m.Params)
			maxWeights = max(maxWeights, m.ParamBytes)
			maxMACs = max(maxMACs, m.MACs)
			for _, in := range m.Inputs {
				for _, d := range in.Shape {
					if _, ok := d.(string); ok {
						symbolic = true
					}
				}
			}
		}
		if len(names) == 0 {
			continue
		}
		fmt.Fprintf(&b, "  - path: %q   # %s\n", glob, strings.Join(names, ", "))
		b.WriteString("    device: my-device\n")
		if symbolic {
			b.WriteString("    dims: {batch: 1}       # values for symbolic input dims; rename to your model's\n")
		}
		b.WriteString("    limits:                # today's largest figures in this folder + headroom\n")
		fmt.Fprintf(&b, "      file: %s\n", yamlBytes(up(maxFile)))
		fmt.Fprintf(&b, "      weights: %s\n", yamlBytes(up(maxWeights)))
		fmt.Fprintf(&b, "      params: %d\n", up(maxParams))
		if maxMACs > 0 {
			fmt.Fprintf(&b, "      macs: %d\n", up(maxMACs))
		}
		b.WriteString("      ram: 90%            # of my-device's ram\n")
		b.WriteString("    growth:                # how much one change may add, against the base revision\n")
		b.WriteString("      ram: 5%\n      macs: 10%\n")
		b.WriteString("    warn_at: 90%           # warn when a figure passes this share of its limit\n")
	}
	b.WriteString(`
# waivers: a temporary exception for one model and metric, with a reason
# and an expiry date; an expired waiver is reported.
waivers: []
`)
	return b.String(), ms, nil
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
