package budget

import (
	"fmt"
	"math"
	"sort"
	"strings"
	"time"
)

// Device totals. Definitions (README "Conventions", `loadline --help`),
// for the models a device's budget entry says it runs:
//
//	flash  the sum of each model's flash (Device.Deploy). Constant tensors
//	       whose stored bytes are identical (same dtype, shape and content,
//	       found by their digest) in more than one of the models are
//	       counted once when the device links them once (shared_weights:
//	       true); otherwise the sum counts every copy and the bytes a
//	       single copy would save are reported as a possible saving.
//	       flash_shared_bytes is those bytes either way: the sum of each
//	       shared tensor's size × (copies − 1).
//	ram    one at a time: the largest model arena plus every model's
//	       persistent bytes (state kept between invocations) plus the
//	       weights of every model when the device keeps weights in RAM;
//	       concurrent: the sum of the arenas plus the same. Shared weights
//	       in RAM are counted once when shared_weights is true: of the
//	       shared constants only those that are parameters (counted in
//	       param_bytes, so in each model's weights in RAM) are, each
//	       size × (models holding it as a parameter − 1) less. A shared
//	       shape tensor or BatchNormalization statistic is in flash but
//	       was never in the RAM sum, so nothing of it is taken off.
//
// A constant is shared when more than one of the models stores it; a
// model that stores it twice is one copy in this count (both are in its
// file, and the file is what it stores in flash).
//	load   the share of the core's time the set needs: Σ latency ÷ period
//	       over the models with a period (needs the device's target for
//	       latency). Each model's latency is also judged against its own
//	       period: a model that cannot finish before its next invocation
//	       fails.
//
// A total is unknown, with the reason, when a figure it sums is unknown
// (a model that could not be measured, an arena that needs a binding, a
// latency without a target); it is then reported, never judged as if the
// missing part were zero.

// ConstantDigest identifies one stored constant tensor by its content:
// Digest covers dtype, shape and bytes, so two tensors with one digest are
// the same weights, whatever their names.
type ConstantDigest struct {
	Name   string `json:"name"`
	Bytes  int64  `json:"bytes"`
	Digest string `json:"digest"`
	// Weight is true when the constant is a parameter of the model
	// (counted in param_bytes, so in ram with weights: ram).
	Weight bool `json:"weight,omitempty"`
}

// DeviceInput is one model a device runs, with its figures (as measured,
// before Deploy) and its period; Error is set when it could not be
// measured.
type DeviceInput struct {
	Path    string
	Every   time.Duration
	Figures *Figures
	Error   string
}

// DeviceTotals are one device's totals at one revision.
type DeviceTotals struct {
	FlashBytes int64 `json:"flash_bytes"`
	// FlashSharedBytes is the flash that identical constants take beyond
	// their first copy: subtracted from FlashBytes when the device links
	// them once, a possible saving otherwise.
	FlashSharedBytes int64 `json:"flash_shared_bytes"`
	RAMBytes         int64 `json:"ram_bytes"`
	// Load is the share of the core's time the models need (0.25 is a
	// quarter); nil when no latency is known.
	Load *float64 `json:"load"`
	// Unknown says why a total could not be computed, by metric.
	Unknown map[string]string `json:"unknown,omitempty"`
}

// DeviceShare is one model's part in a device's totals.
type DeviceShare struct {
	Path     string  `json:"path"`
	EveryMS  float64 `json:"every_ms,omitempty"`
	Flash    int64   `json:"flash_bytes"`
	Arena    int64   `json:"arena_bytes"`
	Persist  int64   `json:"persistent_bytes"`
	Weights  int64   `json:"weights_in_ram_bytes,omitempty"`
	Latency  float64 `json:"latency_ms,omitempty"`
	LoadPart float64 `json:"load,omitempty"`
	Error    string  `json:"error,omitempty"`
}

// SharedConstant is one constant stored identically in several models.
type SharedConstant struct {
	Digest string   `json:"digest"`
	Bytes  int64    `json:"bytes"`
	Models []string `json:"models"`
	Names  []string `json:"names"`
}

// DeviceResult is one device judged as a whole.
type DeviceResult struct {
	Name          string `json:"name"`
	Runs          string `json:"runs"`
	SharedWeights bool   `json:"shared_weights"`
	// DeviceTotals are the totals at the head (the revision judged).
	DeviceTotals
	// Base are the totals before the change; nil in an audit of one
	// revision, or when the base could not be read.
	Base   *DeviceTotals    `json:"base"`
	Models []DeviceShare    `json:"models"`
	Shared []SharedConstant `json:"shared"`
	Checks []Check          `json:"checks"`
	Status Status           `json:"status"`
	// Notes say what the reader needs beyond the checks: which model's
	// growth moved a total, entries that match no model.
	Notes []string `json:"notes,omitempty"`
}

// Totals computes a device's totals over the models it runs; shares lists
// each model's part, shared the constants stored in more than one of them.
func (dev *Device) Totals(models []DeviceInput) (DeviceTotals, []DeviceShare, []SharedConstant) {
	t := DeviceTotals{}
	unknown := func(metric, why string) {
		if t.Unknown == nil {
			t.Unknown = map[string]string{}
		}
		if _, ok := t.Unknown[metric]; !ok {
			t.Unknown[metric] = why
		}
	}
	shares := make([]DeviceShare, 0, len(models))
	type seen struct {
		bytes  int64
		models []string
		names  []string
		// weightIn counts the models that hold the constant as a
		// parameter, so in their weights in RAM; last is the index of the
		// last model that stored it, for counting each model once.
		weightIn int64
		last     int
		lastPaid bool
	}
	digests := map[string]*seen{}
	var maxArena, sumArena, persist, weights int64
	var load float64
	loadKnown := false
	for k, in := range models {
		sh := DeviceShare{Path: in.Path, Error: in.Error}
		if in.Every > 0 {
			sh.EveryMS = float64(in.Every) / float64(time.Millisecond)
		}
		if in.Error != "" || in.Figures == nil {
			why := in.Path + " could not be measured"
			unknown(MetricFlash, why)
			unknown(MetricRAM, why)
			unknown(MetricLoad, why)
			shares = append(shares, sh)
			continue
		}
		fig := dev.Deploy(in.Figures)
		sh.Flash = fig.Flash
		t.FlashBytes = addSat(t.FlashBytes, fig.Flash)
		if why, ok := fig.Unknown[MetricFlash]; ok {
			unknown(MetricFlash, in.Path+": "+why)
		}
		arena := in.Figures.RunArena()
		if why, bad := fig.Unknown[MetricArena]; bad {
			unknown(MetricRAM, in.Path+": "+why)
		}
		sh.Arena, sh.Persist = arena, in.Figures.Memory.PersistentBytes
		maxArena = max(maxArena, arena)
		sumArena = addSat(sumArena, arena)
		persist = addSat(persist, sh.Persist)
		if dev.Weights == WeightsRAM {
			sh.Weights = in.Figures.ParamBytes
		} else {
			sh.Weights = in.Figures.GeneratedParamBytes // held in RAM either way (Device.Deploy)
		}
		weights = addSat(weights, sh.Weights)
		for _, c := range in.Figures.Constants {
			s := digests[c.Digest]
			if s == nil {
				s = &seen{bytes: c.Bytes, last: -1}
				digests[c.Digest] = s
			}
			if s.last != k {
				s.last, s.lastPaid = k, false
				s.models = append(s.models, in.Path)
				s.names = append(s.names, c.Name)
			}
			if c.Weight && !s.lastPaid {
				s.lastPaid = true
				s.weightIn++
			}
		}
		if in.Every > 0 {
			if ns, ok := fig.Value(MetricLatency); ok {
				sh.Latency = float64(ns) / 1e6
				sh.LoadPart = float64(ns) / float64(in.Every)
				load += sh.LoadPart
				loadKnown = true
			} else {
				why := fig.Unknown[MetricLatency]
				if why == "" {
					why = "no latency estimate"
				}
				unknown(MetricLoad, in.Path+": "+why)
			}
		}
		shares = append(shares, sh)
	}
	var shared []SharedConstant
	var sharedBytes, sharedWeights, sharedInRAM int64
	for d, s := range digests {
		if len(s.models) < 2 {
			continue
		}
		copies := int64(len(s.models))
		sharedBytes = addSat(sharedBytes, s.bytes*(copies-1))
		if s.weightIn > 1 {
			sharedWeights = addSat(sharedWeights, s.bytes*(s.weightIn-1))
		}
		shared = append(shared, SharedConstant{Digest: d, Bytes: s.bytes, Models: s.models, Names: s.names})
	}
	sort.Slice(shared, func(i, j int) bool {
		if shared[i].Bytes != shared[j].Bytes {
			return shared[i].Bytes > shared[j].Bytes
		}
		return shared[i].Digest < shared[j].Digest
	})
	t.FlashSharedBytes = sharedBytes
	if dev.SharedWeights {
		t.FlashBytes -= sharedBytes
		if dev.Weights == WeightsRAM {
			sharedInRAM = sharedWeights
		}
	}
	arenas := maxArena
	if dev.Runs == RunsConcurrent {
		arenas = sumArena
	}
	t.RAMBytes = addSat(addSat(arenas, persist), weights-sharedInRAM)
	if loadKnown {
		t.Load = &load
	}
	return t, shares, shared
}

// loadPPM is a load as millionths of the core, the unit load checks carry.
func loadPPM(l float64) int64 { return int64(math.Round(l * PercentScale)) }

// JudgeDevice judges a device as a whole: each total against the
// device's limit for it (without one, against its capacity: the models
// must fit; load against the whole core), warning past DefaultWarnAt of the
// limit, and each model's latency against its period. base is nil when the
// totals before the change are not known (an audit of one revision); with
// it, a total that breaks its limit names the models whose growth did it.
func (dev *Device) JudgeDevice(base, head []DeviceInput) DeviceResult {
	res := DeviceResult{Name: dev.Name, Runs: dev.Runs, SharedWeights: dev.SharedWeights, Status: Pass,
		Checks: []Check{}, Shared: []SharedConstant{}}
	ht, shares, shared := dev.Totals(head)
	res.DeviceTotals, res.Models = ht, shares
	if shared != nil {
		res.Shared = shared
	}
	var baseShares []DeviceShare
	if base != nil {
		bt, bs, _ := dev.Totals(base)
		res.Base, baseShares = &bt, bs
	}
	for _, metric := range deviceTotalMetrics {
		limit, limitText, ok := dev.deviceLimit(metric)
		if !ok {
			continue
		}
		if _, limited := dev.Limits[metric]; metric == MetricLoad && !limited && dev.Target == nil {
			// No target and no load limit: the device does not ask for its
			// core time to be judged.
			continue
		}
		c := Check{Metric: metric, Kind: "total", Status: Pass}
		if s, ok := dev.Limits[metric]; ok {
			c.Source = fmt.Sprintf("%d:%d", s.Line, s.Column)
		}
		if why, unknown := ht.Unknown[metric]; unknown {
			c.Status, c.Reason = Warn, fmt.Sprintf("%s total of %s unknown: %s", metric, dev.Name, why)
			res.Checks = append(res.Checks, c)
			res.Status = worse(res.Status, c.Status)
			continue
		}
		if metric == MetricLoad && ht.Load == nil {
			continue // no model has a period: nothing to judge
		}
		c.Value = totalValue(&ht, metric)
		c.Limit = &limit
		room := limit - c.Value
		c.Headroom = &room
		if res.Base != nil {
			if _, unknown := res.Base.Unknown[metric]; !unknown && (metric != MetricLoad || res.Base.Load != nil) {
				b := totalValue(res.Base, metric)
				d := c.Value - b
				c.Base, c.Delta = &b, &d
			}
		}
		switch {
		case c.Value > limit:
			c.Status = Fail
			c.Reason = fmt.Sprintf("%s total of %s %s > %s", metric, dev.Name, FormatValue(metric, c.Value), limitText)
		case c.Value > mulPercent(limit, DefaultWarnAt):
			c.Status = Warn
			c.Reason = fmt.Sprintf("%s total of %s %s is past %s of %s", metric, dev.Name, FormatValue(metric, c.Value), FormatValue(MetricLoad, DefaultWarnAt), limitText)
		default:
			c.Reason = fmt.Sprintf("%s total of %s %s within %s", metric, dev.Name, FormatValue(metric, c.Value), limitText)
		}
		if c.Status != Pass && baseShares != nil {
			if grew := whoGrew(metric, baseShares, shares); grew != "" {
				c.Reason += "; " + grew
			}
		}
		res.Checks = append(res.Checks, c)
		res.Status = worse(res.Status, c.Status)
	}
	for _, sh := range shares {
		if sh.EveryMS <= 0 || sh.Latency <= 0 {
			continue
		}
		lat, per := int64(math.Round(sh.Latency*1e6)), int64(math.Round(sh.EveryMS*1e6))
		c := Check{Metric: "latency", Kind: "period", Value: lat, Limit: &per, Status: Pass}
		room := per - lat
		c.Headroom = &room
		if lat > per {
			c.Status = Fail
			c.Reason = fmt.Sprintf("%s takes %.1f ms, longer than its period of %.1f ms on %s: it cannot finish before its next run", sh.Path, sh.Latency, sh.EveryMS, dev.Name)
		} else {
			c.Reason = fmt.Sprintf("%s takes %.1f ms of its %.1f ms period on %s", sh.Path, sh.Latency, sh.EveryMS, dev.Name)
		}
		res.Checks = append(res.Checks, c)
		res.Status = worse(res.Status, c.Status)
	}
	if ht.FlashSharedBytes > 0 {
		if dev.SharedWeights {
			res.Notes = append(res.Notes, fmt.Sprintf("%s of identical constants stored in several models is counted once (shared_weights: true)", FormatBytes(ht.FlashSharedBytes)))
		} else {
			res.Notes = append(res.Notes, fmt.Sprintf("%s of identical constants is stored more than once; linking each once (shared_weights: true) would save it", FormatBytes(ht.FlashSharedBytes)))
		}
	}
	return res
}

// totalValue is a total as a check carries it: bytes, or load in
// millionths of the core.
func totalValue(t *DeviceTotals, metric string) int64 {
	switch metric {
	case MetricRAM:
		return t.RAMBytes
	case MetricFlash:
		return t.FlashBytes
	case MetricLoad:
		if t.Load != nil {
			return loadPPM(*t.Load)
		}
	}
	return 0
}

// whoGrew names the models whose part of a total rose since the base,
// largest rise first: "models/kws.tflite +24.0 KiB, models/vad.onnx added".
func whoGrew(metric string, base, head []DeviceShare) string {
	part := func(s DeviceShare) int64 {
		switch metric {
		case MetricFlash:
			return s.Flash
		case MetricLoad:
			return loadPPM(s.LoadPart)
		}
		return s.Arena + s.Persist + s.Weights
	}
	was := map[string]int64{}
	for _, s := range base {
		was[s.Path] = part(s)
	}
	type rise struct {
		path  string
		delta int64
		added bool
	}
	var rises []rise
	for _, s := range head {
		old, ok := was[s.Path]
		switch {
		case !ok:
			rises = append(rises, rise{s.Path, part(s), true})
		case part(s) > old:
			rises = append(rises, rise{s.Path, part(s) - old, false})
		}
	}
	if len(rises) == 0 {
		return ""
	}
	sort.SliceStable(rises, func(i, j int) bool { return rises[i].delta > rises[j].delta })
	var out []string
	for _, r := range rises {
		if r.added {
			out = append(out, fmt.Sprintf("%s added (%s)", r.path, FormatValue(metric, r.delta)))
		} else {
			out = append(out, fmt.Sprintf("%s grew by %s", r.path, FormatValue(metric, r.delta)))
		}
	}
	return "grown by: " + strings.Join(out, ", ")
}

// deviceLimit is the limit in force for one total: the device's own
// setting, else its capacity (ram, flash) or the whole core (load).
func (dev *Device) deviceLimit(metric string) (int64, string, bool) {
	if s, ok := dev.Limits[metric]; ok {
		if s.Quantity.Kind != Percent {
			return s.Quantity.Value, fmt.Sprintf("limit %s", FormatValue(metric, s.Quantity.Value)), true
		}
		if metric == MetricLoad {
			return s.Quantity.Value, fmt.Sprintf("limit %s of the core", s.Quantity.Text), true
		}
		if c := dev.capacityQuantity(metric); c != nil {
			v := mulPercent(c.Value, s.Quantity.Value)
			return v, fmt.Sprintf("limit %s (%s of %s's %s)", FormatValue(metric, v), s.Quantity.Text, dev.Name, FormatValue(metric, c.Value)), true
		}
		return 0, "", false
	}
	switch metric {
	case MetricLoad:
		return PercentScale, "the whole core", true
	default:
		if c := dev.capacityQuantity(metric); c != nil {
			return c.Value, fmt.Sprintf("%s's capacity %s", dev.Name, FormatValue(metric, c.Value)), true
		}
	}
	return 0, "", false
}

func mulPercent(v, ppm int64) int64 {
	return int64(math.Floor(float64(v) * float64(ppm) / PercentScale))
}

// FoldDevices makes the result's verdict account for its devices: a
// device that fails fails the result, one that warns makes it warn.
func (r *Result) FoldDevices() {
	if r.Devices == nil {
		r.Devices = []DeviceResult{}
	}
	for _, d := range r.Devices {
		r.Verdict = worse(r.Verdict, d.Status)
	}
}
