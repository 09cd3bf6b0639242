// Package budget reads loadline.yaml, the team's budget file, and judges
// measured figures against it: per device, what a model may use and how
// fast it may grow. It knows nothing of ONNX or git; it is given figures.
package budget

import (
	"math"
	"strings"
	"time"
)

// Metric names, as the budget file and every report spell them.
const (
	MetricFile    = "file"    // model file bytes
	MetricParams  = "params"  // parameter count
	MetricWeights = "weights" // parameter bytes
	MetricMACs    = "macs"    // multiply-accumulates
	MetricFLOPs   = "flops"   // floating-point operations
	MetricArena   = "arena"   // deployed activation arena bytes
	MetricRAM     = "ram"     // arena + weights when the device keeps weights in RAM (else the generated ones); defined in Device.Deploy
	MetricFlash   = "flash"   // the model file as stored in flash; defined in Device.Deploy
	// The device cost model's figures, for a device that names a target
	// (package target defines them): estimated latency in nanoseconds,
	// energy in nanojoules, and the count of operators the target's
	// runtime lacks.
	MetricLatency     = "latency"
	MetricEnergy      = "energy"
	MetricUnsupported = "unsupported"
)

// Metrics lists every metric key in report order.
var Metrics = []string{MetricRAM, MetricFlash, MetricArena, MetricWeights, MetricParams, MetricMACs, MetricFLOPs, MetricFile,
	MetricLatency, MetricEnergy, MetricUnsupported}

// Figures are one model's measured figures, as the budget needs them. The
// JSON keys are those of a loadline.measure/v1 entry, plus ram and flash as
// the budget computed them for the model's device.
type Figures struct {
	FileBytes int64 `json:"file_bytes"`
	// ExternalBytes is the weight data kept in external data files, which
	// FileBytes leaves out.
	ExternalBytes int64         `json:"external_bytes"`
	Params        int64         `json:"params"`
	ParamBytes    int64         `json:"param_bytes"`
	MACs          int64         `json:"macs"`
	FLOPs         int64         `json:"flops"`
	Memory        MemoryFigures `json:"memory"`
	RAM           int64         `json:"ram"`
	Flash         int64         `json:"flash"`
	// GeneratedParamBytes is the part of ParamBytes the file does not
	// store (weights computed from constants at load time): the device
	// holds them in RAM wherever it keeps its weights, so ram counts them
	// with weights: flash too (Device.Deploy).
	GeneratedParamBytes int64 `json:"generated_param_bytes,omitempty"`
	// Target is the estimate on the device's target, nil when the device
	// names none.
	Target *TargetFigures `json:"target,omitempty"`
	// Unknown lists metric keys whose value could not be computed
	// (unresolved shapes), with the reason; such a metric is not judged as
	// a number but reported.
	Unknown map[string]string `json:"unknown,omitempty"`
	// Constants identify the model's stored constant tensors by content,
	// for the device totals' shared weights (totals.go); filled only for
	// models a device runs together with others.
	Constants []ConstantDigest `json:"-"`
}

// TargetFigures are a model's estimated cost on its device's target, as
// loadline.measure/v1's "target" entry names them.
type TargetFigures struct {
	Name      string  `json:"name"`
	ClockHz   float64 `json:"clock_hz"`
	LatencyMS float64 `json:"latency_ms"`
	EnergyUJ  float64 `json:"energy_uj"`
	// Unsupported names each operator the target's runtime lacks
	// ("node (OP): reason").
	Unsupported []string `json:"unsupported"`
	// Slowest are the layers that take the most time, slowest first, each
	// Value its estimated latency in nanoseconds.
	Slowest []Layer `json:"slowest,omitempty"`
}

// MemoryFigures are activation memory in the graph view and the deployed
// view, as loadline.measure/v1 names them.
type MemoryFigures struct {
	Graph    MemoryView `json:"graph"`
	Deployed MemoryView `json:"deployed"`
	// Runtime is the arena the microcontroller runtime plans (TFLite
	// models only); nil otherwise.
	Runtime *RuntimeView `json:"runtime,omitempty"`
	// PersistentBytes are the bytes of state kept between invocations
	// (TFLite variable tensors).
	PersistentBytes int64 `json:"persistent_bytes"`
}

// RuntimeView is the runtime view of a TFLite model's memory, as
// loadline.measure/v1 names it.
type RuntimeView struct {
	PeakLiveBytes int64 `json:"peak_live_bytes"`
	ArenaBytes    int64 `json:"arena_bytes"`
	ScratchBytes  int64 `json:"scratch_bytes"`
}

// MemoryView is one view's peak live bytes (lower bound) and planned arena.
type MemoryView struct {
	PeakLiveBytes int64 `json:"peak_live_bytes"`
	ArenaBytes    int64 `json:"arena_bytes"`
}

// Value returns the figure a metric key names; ok is false for unknown keys
// or figures listed in Unknown.
func (f *Figures) Value(metric string) (v int64, ok bool) {
	if f == nil {
		return 0, false
	}
	if _, unknown := f.Unknown[metric]; unknown {
		return 0, false
	}
	switch metric {
	case MetricFile:
		return f.FileBytes, true
	case MetricParams:
		return f.Params, true
	case MetricWeights:
		return f.ParamBytes, true
	case MetricMACs:
		return f.MACs, true
	case MetricFLOPs:
		return f.FLOPs, true
	case MetricArena:
		return f.Memory.Deployed.ArenaBytes, true
	case MetricRAM:
		return f.RAM, true
	case MetricFlash:
		return f.Flash, true
	case MetricLatency, MetricEnergy, MetricUnsupported:
		if f.Target == nil {
			return 0, false
		}
		switch metric {
		case MetricLatency:
			return int64(math.Round(f.Target.LatencyMS * 1e6)), true
		case MetricEnergy:
			return int64(math.Round(f.Target.EnergyUJ * 1e3)), true
		}
		return int64(len(f.Target.Unsupported)), true
	}
	return 0, false
}

// Status is the verdict of one check.
type Status string

// The statuses a check can have; the overall verdict is the worst of pass,
// warn, fail (waived counts as pass with a note).
const (
	Pass   Status = "pass"
	Warn   Status = "warn"
	Fail   Status = "fail"
	Waived Status = "waived"
)

// Check is one metric of one model judged against one limit.
type Check struct {
	Metric string `json:"metric"`
	Value  int64  `json:"value"`
	// Base is the figure on the base revision; nil for an added model.
	Base *int64 `json:"base"`
	// Limit is the absolute limit in force (for growth checks, the largest
	// allowed head value); nil when the check is a growth check without base.
	Limit *int64 `json:"limit"`
	// Kind says which rule produced the check: "limit" or "growth"; or
	// "figure" for a figure shown without a budget (compare without a
	// budget file), which judges nothing.
	Kind     string `json:"kind"`
	Status   Status `json:"status"`
	Reason   string `json:"reason"`
	Headroom *int64 `json:"headroom,omitempty"` // limit − value
	Delta    *int64 `json:"delta,omitempty"`    // value − base
	// Unknown is set on a growth check whose base figure cannot be
	// computed: the growth is unknown, a warning (a failure with --strict),
	// and Reason says why.
	Unknown bool `json:"unknown,omitempty"`
	// Waiver is set when a waiver turned a failure into Waived.
	Waiver *Waiver `json:"waiver,omitempty"`
	// Source is the place in the budget file of the limit or growth entry
	// ("loadline.yaml:9:12"), for annotations.
	Source string `json:"source,omitempty"`
}

// Change says how a model changed between base and head.
type Change string

// The kinds of change.
const (
	Added     Change = "added"
	Modified  Change = "modified"
	Removed   Change = "removed"
	Renamed   Change = "renamed"
	Unchanged Change = "unchanged"
)

// ModelResult is one model's verdict.
type ModelResult struct {
	Path    string   `json:"path"`
	OldPath string   `json:"old_path,omitempty"` // for renames
	Change  Change   `json:"change"`
	Device  string   `json:"device,omitempty"`
	Rule    string   `json:"rule,omitempty"` // the matching rule's path glob
	Base    *Figures `json:"base"`
	Head    *Figures `json:"head"`
	Checks  []Check  `json:"checks"`
	Status  Status   `json:"status"`
	// Unbudgeted is set when no rule matches the model.
	Unbudgeted bool `json:"unbudgeted,omitempty"`
	// Error is set when the model could not be measured.
	Error string `json:"error,omitempty"`
	// Notes are one-line remarks for the reader: why a removed model is
	// not judged, which rules disagree about it.
	Notes []string `json:"notes,omitempty"`
	// Detail carries optional per-layer data for renderers (top layers,
	// live memory over steps); renderers must cope with it being nil.
	Detail *Detail `json:"-"`
}

// Detail is per-layer information for a model's collapsible report section.
type Detail struct {
	TopMACs   []Layer `json:"top_macs,omitempty"`
	TopMemory []Layer `json:"top_memory,omitempty"`
	// LiveBytes is the live activation bytes at each step (graph view),
	// for a one-line picture of memory over the schedule.
	LiveBytes []int64 `json:"live_bytes,omitempty"`
	PeakStep  int     `json:"peak_step"`
	// Views are the memory views, graph view first, each with its live
	// bytes per step and what is live at its peak; Judged marks the one
	// ram is judged on.
	Views []DetailView `json:"views,omitempty"`
}

// DetailView is one memory view of a model's detail section.
type DetailView struct {
	Name      string         `json:"name"`
	Judged    bool           `json:"judged"`
	LiveBytes []int64        `json:"live_bytes,omitempty"`
	PeakStep  int            `json:"peak_step"`
	PeakBytes int64          `json:"peak_bytes"`
	AtPeak    []DetailTensor `json:"at_peak,omitempty"`
}

// DetailTensor is a buffer live at a view's peak, with its arena offset
// (-1 when it has none).
type DetailTensor struct {
	Name   string `json:"name"`
	Bytes  int64  `json:"bytes"`
	Offset int64  `json:"offset"`
}

// Layer is one node's contribution.
type Layer struct {
	Node  string `json:"node"`
	Op    string `json:"op"`
	Value int64  `json:"value"`
}

// Waiver excuses one metric of the models its path matches until a date:
// the checks it names (Excuses: the limit, the growth, or both), and only
// while the figure is at most its ceiling (UpTo), when it has one.
type Waiver struct {
	Path   string `json:"path"`
	Metric string `json:"metric"`
	// Excuses lists the kinds of check the waiver excuses, "limit" and/or
	// "growth"; both when the file does not say.
	Excuses []string `json:"excuses,omitempty"`
	// UpTo is the ceiling above which the waiver no longer applies; nil
	// when it has none. UpToText is it as the file writes it.
	UpTo     *int64    `json:"up_to,omitempty"`
	UpToText string    `json:"up_to_text,omitempty"`
	Until    time.Time `json:"until"`
	Reason   string    `json:"reason"`
	Line     int       `json:"line"`
	Column   int       `json:"column"`
}

// Covers reports whether the waiver excuses a check of kind ("limit" or
// "growth") with the figure v: the kind is one it names and v is within
// its ceiling.
func (w *Waiver) Covers(kind string, v int64) bool {
	named := false
	for _, k := range w.Excuses {
		named = named || k == kind
	}
	return named && (w.UpTo == nil || v <= *w.UpTo)
}

// Scope says what a waiver excuses in words: "ram limit and growth, up to
// 320.0 M".
func (w *Waiver) Scope() string {
	s := w.Metric
	if len(w.Excuses) > 0 {
		s += " " + strings.Join(w.Excuses, " and ")
	}
	if w.UpTo != nil {
		s += ", up to " + FormatValue(w.Metric, *w.UpTo)
	}
	return s
}

// BudgetChange is one difference between the base's and the head's budget
// file, listed in reports so a reviewer sees a loosened gate.
type BudgetChange struct {
	Key      string `json:"key"` // e.g. devices.porch-cam.ram, models[0].limits.macs
	Old      string `json:"old"`
	New      string `json:"new"`
	Loosened bool   `json:"loosened"`
	// Path is the rule's or waiver's path glob, when the change is in one.
	Path string `json:"path,omitempty"`
}

// Revision names one side of a change.
type Revision struct {
	Ref    string `json:"ref"`    // as the user or CI named it ("origin/main", "HEAD", "index")
	Commit string `json:"commit"` // full hash, empty for the index or plain files
}

// Result is the whole judgement of one change.
type Result struct {
	Base          Revision       `json:"base"`
	Head          Revision       `json:"head"`
	Verdict       Status         `json:"verdict"`
	Models        []ModelResult  `json:"models"`
	BudgetChanges []BudgetChange `json:"budget_changes"`
	Waivers       []Waiver       `json:"waivers"` // waivers in force
	// Problems are budget-file findings that do not stop evaluation
	// (an expired waiver, a model matched by no rule).
	Problems []string `json:"problems"`
	// Devices are the devices judged as a whole (totals.go): those that
	// list the models they run and run one the change touches.
	Devices []DeviceResult `json:"devices"`
	// Findings are the same problems with their level and place: Fail
	// for an expired waiver or disagreeing rules, Warn (Fail when strict)
	// for a model matched by no rule. Problems[i] is Findings[i].Message.
	Findings []Finding `json:"findings"`
	// Notes are remarks on how the change was judged that are no budget
	// problem and do not move the verdict: which budget file is in force,
	// which of the change's own budget edits are not in force yet and how
	// to land them.
	Notes []string `json:"notes,omitempty"`
	// Audit is set when the result judges every model at one revision
	// (Head) rather than a change: there is no base, and models are
	// "unchanged".
	Audit bool `json:"audit,omitempty"`
	// FiguresOnly is set when there was no budget to judge by: the models
	// carry figures and deltas ("figure" checks) and no verdicts.
	FiguresOnly bool `json:"figures_only,omitempty"`
}

// Finding is one budget-file problem found while evaluating.
type Finding struct {
	Level   Status `json:"level"` // Warn or Fail
	Message string `json:"message"`
	Path    string `json:"path,omitempty"` // the model concerned, if one
	Line    int    `json:"line,omitempty"` // place in the budget file, if one
	Column  int    `json:"column,omitempty"`
}
