package budget

import (
	"sort"
	"time"
)

// Signoff is what a release sign-off report states: every model at one
// revision judged against that revision's budget file, the devices it ships
// on, and the same figures at earlier releases for the trend. check
// assembles it from git objects; report renders it. Every field is a fact
// of the repository (no wall-clock time), so the same revision gives the
// same report byte for byte.
type Signoff struct {
	// Revision is the revision signed off.
	Revision Revision `json:"revision"`
	// Date is the revision's commit date; waiver expiry is counted from it.
	Date time.Time `json:"date"`
	// BudgetFile is the budget file's path and BudgetBlob its git blob id
	// at Revision.
	BudgetFile string `json:"budget_file"`
	BudgetBlob string `json:"budget_blob"`
	// AnalyzerVersion names the measuring code the figures came from.
	AnalyzerVersion string `json:"analyzer_version"`
	// Devices are the budget file's devices with their capacities, in the
	// order the file lists them.
	Devices []DeviceCapacity `json:"devices"`
	// Current is the judgement of every model at Revision.
	Current *Result `json:"current"`
	// Releases are the earlier releases compared, oldest first.
	Releases []Release `json:"releases"`
	// Missing names the parts of a full sign-off this build cannot state
	// yet, each a sentence, so a reader knows what the report leaves out.
	Missing []string `json:"missing"`
}

// DeviceCapacity is one device of the budget file as a report shows it.
type DeviceCapacity struct {
	Name string `json:"name"`
	// RAM and Flash are capacities in bytes; nil when the budget file
	// gives none.
	RAM   *int64 `json:"ram"`
	Flash *int64 `json:"flash"`
	// Weights is where the device keeps weights at run time.
	Weights string `json:"weights"`
}

// Release is one earlier release: a tag, its commit, and every model at it
// judged by that release's own budget file. Error is set when the release
// could not be read (its figures are then absent, not zero).
type Release struct {
	Tag    string    `json:"tag"`
	Commit string    `json:"commit"`
	Date   time.Time `json:"date"`
	Result *Result   `json:"result,omitempty"`
	Error  string    `json:"error,omitempty"`
}

// Capacities lists a budget file's devices as a report shows them.
func (f *File) Capacities() []DeviceCapacity {
	if f == nil {
		return nil
	}
	devs := make([]*Device, 0, len(f.Devices))
	for _, d := range f.Devices {
		devs = append(devs, d)
	}
	sort.Slice(devs, func(i, j int) bool {
		if devs[i].Line != devs[j].Line {
			return devs[i].Line < devs[j].Line
		}
		return devs[i].Name < devs[j].Name
	})
	out := make([]DeviceCapacity, 0, len(devs))
	for _, d := range devs {
		dc := DeviceCapacity{Name: d.Name, Weights: d.Weights}
		if d.Weights == "" {
			dc.Weights = WeightsFlash
		}
		if v, ok := d.Capacity(MetricRAM); ok {
			dc.RAM = &v
		}
		if v, ok := d.Capacity(MetricFlash); ok {
			dc.Flash = &v
		}
		out = append(out, dc)
	}
	return out
}
