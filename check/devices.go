package check

import (
	"fmt"
	"sort"

	"github.com/loadline/loadline/budget"
)

// Devices judged as a whole: a device whose budget entry lists the models
// its firmware runs together has totals (flash, ram, load) that a change to
// any one of them moves. The check recomputes them at both revisions,
// measuring the models the change did not touch too (from the cache where
// they were measured before), so a model within its own limits that breaks
// its device's RAM is caught on the pull request that grows it.

// devicesOf lists the devices of a budget file that list the models they
// run, by name.
func devicesOf(f *budget.File) []*budget.Device {
	var out []*budget.Device
	for _, d := range f.Devices {
		if len(d.Models) > 0 {
			out = append(out, d)
		}
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Name < out[j].Name })
	return out
}

// runsTogether reports whether any device of the budget file lists the
// models it runs: only then are constant digests worth computing.
func runsTogether(f *budget.File) bool { return f != nil && len(devicesOf(f)) > 0 }

// deviceModels lists the model files of a snapshot that a device runs,
// with the period of the entry that matched each (the first entry wins).
func deviceModels(dev *budget.Device, paths []string) []budget.DeviceInput {
	var out []budget.DeviceInput
	for _, p := range paths {
		if !IsModelPath(p) {
			continue
		}
		if e, ok := dev.RunsModel(p); ok {
			out = append(out, budget.DeviceInput{Path: p, Every: e.Every})
		}
	}
	return out
}

// deviceJudge measures and judges the devices a change touches.
type deviceJudge struct {
	file  *budget.File
	cli   Bindings // the command line's bindings, as the models' own measuring had them
	cache *Cache
	stats *Stats
}

// judge returns the result of every device that runs one of the touched
// paths (all of them when touched is nil), with base totals when base is
// given. Unmatched entries become findings on res.
func (j *deviceJudge) judge(res *budget.Result, base, head *Snapshot, touched map[string]bool) error {
	headPaths, err := head.Paths()
	if err != nil {
		return err
	}
	var basePaths []string
	if base != nil {
		if basePaths, err = base.Paths(); err != nil {
			return err
		}
	}
	for _, dev := range devicesOf(j.file) {
		hm := deviceModels(dev, headPaths)
		var bm []budget.DeviceInput
		if base != nil {
			bm = deviceModels(dev, basePaths)
		}
		if touched != nil && !touches(touched, hm) && !touches(touched, bm) {
			continue
		}
		for _, e := range dev.Models {
			if !anyMatch(dev, e, headPaths) {
				res.Findings = append(res.Findings, budget.Finding{Level: budget.Warn, Line: e.Line, Column: e.Column,
					Message: fmt.Sprintf("devices.%s.models: %s matches no model file: the device's totals leave it out (a folder renamed, or a typo?)", dev.Name, e.Path)})
				res.Problems = append(res.Problems, res.Findings[len(res.Findings)-1].Message)
			}
		}
		if err := j.measure(dev, head, hm); err != nil {
			return err
		}
		var baseIn []budget.DeviceInput
		if base != nil {
			if err := j.measure(dev, base, bm); err != nil {
				return err
			}
			baseIn = bm
		}
		dr := dev.JudgeDevice(baseIn, hm)
		res.Devices = append(res.Devices, dr)
	}
	return nil
}

// anyMatch reports whether a device entry matches one of the paths.
func anyMatch(dev *budget.Device, e budget.DeviceModel, paths []string) bool {
	one := budget.Device{Models: []budget.DeviceModel{e}}
	for _, p := range paths {
		if IsModelPath(p) {
			if _, ok := one.RunsModel(p); ok {
				return true
			}
		}
	}
	return false
}

func touches(touched map[string]bool, in []budget.DeviceInput) bool {
	for _, m := range in {
		if touched[m.Path] {
			return true
		}
	}
	return false
}

// measure fills the figures of a device's models at a snapshot, with the
// dims their rules give and constant digests for shared weights; the
// options match those of the change check, so the models it measured come
// from the cache.
func (j *deviceJudge) measure(dev *budget.Device, s *Snapshot, in []budget.DeviceInput) error {
	jobs := make([]blobJob, len(in))
	dims := make([]*boundSet, len(in))
	for i := range in {
		jobs[i], dims[i] = blobJob{s, in[i].Path}, bindingsOf(in[i].Path, j.cli, j.file)
	}
	// A target estimates from the per-layer view.
	metrics, _ := measureJobs(jobs, dims, true, dev != nil && dev.Target != nil, j.cache, j.stats)
	if err := envError(metrics); err != nil {
		return err
	}
	for i, m := range metrics {
		// Latency on this device's own target: a model shipped on two
		// devices takes each one's time.
		in[i].Figures = figuresOn(dev, dev.Name, m)
		if m != nil && m.Error != "" {
			in[i].Error = m.Error
		}
	}
	return nil
}
