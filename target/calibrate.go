package target

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"strings"
)

// Sample is one model measured on the device: its nodes and the latency
// (and, when measured, the energy) of one inference.
type Sample struct {
	Name      string
	Nodes     []Node
	LatencyMS float64
	EnergyUJ  float64 // 0 when not measured
}

// SampleFit is a calibrated target's estimate of one sample beside the
// measurement. Errors are (estimate − measured) / measured, in percent;
// the energy fields are 0 when no energy was measured.
type SampleFit struct {
	Name           string  `json:"name"`
	MeasuredMS     float64 `json:"measured_ms"`
	EstimatedMS    float64 `json:"estimated_ms"`
	ErrorPct       float64 `json:"error_pct"`
	MeasuredUJ     float64 `json:"measured_uj,omitempty"`
	EstimatedUJ    float64 `json:"estimated_uj,omitempty"`
	EnergyErrorPct float64 `json:"energy_error_pct,omitempty"`
}

// Fit is the result of a calibration.
type Fit struct {
	Target *Target
	// Free are the classes whose per_unit was fitted; every other number
	// is the base target's.
	Free []Class
	// Kept lists the free classes asked for that no sample exercises, so
	// they kept the base's number.
	Kept []Class
	// PowerFitted tells whether power was fitted (some sample had energy).
	PowerFitted bool
	Samples     []SampleFit
	// LeaveOneOut holds, for each sample, the estimate of a target fitted
	// on the other samples alone (with two samples or more).
	LeaveOneOut []SampleFit
	// Underdetermined says why the measurements cannot pin the free
	// numbers down ("" when they can).
	Underdetermined string
}

// Calibrate fits the per_unit cycles of the free classes of base (the MAC
// classes the samples exercise when free is nil) and its power to the
// samples, and returns the fitted target with the error on each sample.
//
// The fit: each sample's measured cycles (latency × clock) are the target's
// cycles (Target.Cost); the fixed cycles, the other classes and the
// memory-bound layers are held at base's numbers, and the free per_unit
// numbers are the non-negative least-squares solution (NNLS) of the
// remaining linear system, each row divided by the sample's measured cycles
// so that the fit minimises relative, not absolute, errors. Which layers
// are memory-bound depends on the numbers, so the fit is repeated until
// that set stops changing. Power is then the least-squares fit of
// power × estimated latency to the measured energies (relative errors).
func Calibrate(base *Target, samples []Sample, free []Class, weights string) (*Fit, error) {
	if len(samples) == 0 {
		return nil, errors.New("calibrate: no measured model")
	}
	if err := base.Validate(); err != nil {
		return nil, err
	}
	for _, s := range samples {
		if !(s.LatencyMS > 0) || math.IsInf(s.LatencyMS, 0) {
			return nil, fmt.Errorf("calibrate: %s: measured latency must be more than 0 ms", s.Name)
		}
		if s.EnergyUJ < 0 || math.IsNaN(s.EnergyUJ) || math.IsInf(s.EnergyUJ, 0) {
			return nil, fmt.Errorf("calibrate: %s: measured energy must not be negative", s.Name)
		}
	}
	fit := &Fit{}
	if free == nil {
		for _, c := range Classes {
			if c.PerMAC() {
				free = append(free, c)
			}
		}
	}
	// A class no sample exercises cannot be fitted: keep base's number.
	var active []Class
	for _, c := range free {
		used := false
		for _, s := range samples {
			for _, n := range s.Nodes {
				if k, ok := Classify(n.Domain, n.Op, n.Depthwise); ok && k == c && Work(c, n) > 0 {
					used = true
				}
			}
		}
		if used {
			active = append(active, c)
		} else if !c.PerMAC() || hasClass(base, c) {
			fit.Kept = append(fit.Kept, c)
		}
	}
	fit.Free = active
	t, rank, err := solve(base, samples, active, weights)
	if err != nil {
		return nil, err
	}
	fit.Target = t
	switch {
	case len(active) > len(samples):
		fit.Underdetermined = fmt.Sprintf("%d numbers (%s) from %d measurement(s): more unknowns than measurements, so other numbers fit as well; measure more models or fit fewer classes",
			len(active), classList(active), len(samples))
	case rank < len(active):
		fit.Underdetermined = fmt.Sprintf("the %d models mix %s in proportions too alike to tell %d numbers apart (rank %d); other numbers fit as well",
			len(samples), classList(active), len(active), rank)
	}
	fit.PowerFitted = fitPower(t, samples, weights)
	fit.Samples = errorsOf(t, samples, weights)
	if len(samples) >= 2 {
		for i := range samples {
			rest := append(append([]Sample{}, samples[:i]...), samples[i+1:]...)
			lt, _, err := solve(base, rest, active, weights)
			if err != nil {
				return nil, err
			}
			fitPower(lt, rest, weights)
			fit.LeaveOneOut = append(fit.LeaveOneOut, errorsOf(lt, samples[i:i+1], weights)...)
		}
	}
	return fit, nil
}

func hasClass(t *Target, c Class) bool { _, ok := t.Classes[c]; return ok }

func classList(cs []Class) string {
	s := make([]string, len(cs))
	for i, c := range cs {
		s[i] = string(c)
	}
	return strings.Join(s, ", ")
}

// solve runs the NNLS fit of the free classes' per_unit, repeating it until
// the set of memory-bound layers is stable. It returns the fitted target
// and the rank of the design matrix.
func solve(base *Target, samples []Sample, free []Class, weights string) (*Target, int, error) {
	t := base.Clone()
	for _, c := range free {
		cc := t.Classes[c]
		t.Classes[c] = cc // make sure the class exists
	}
	col := map[Class]int{}
	for i, c := range free {
		col[c] = i
	}
	rank := 0
	var lastBound string
	for round := 0; round < 10; round++ {
		A := make([][]float64, len(samples))
		b := make([]float64, len(samples))
		var bound strings.Builder
		for i, s := range samples {
			measured := s.LatencyMS * 1e-3 * t.ClockHz
			A[i] = make([]float64, len(free))
			held := 0.0
			for _, n := range s.Nodes {
				c, ok := Classify(n.Domain, n.Op, n.Depthwise)
				if !ok {
					continue
				}
				cc, ok := t.Classes[c]
				if !ok {
					continue
				}
				j, isFree := col[c]
				compute := cc.Fixed + cc.PerUnit*Work(c, n)
				mem := t.memoryCycles(n, weights)
				if mem > compute {
					held += mem
					bound.WriteByte('m')
					continue
				}
				bound.WriteByte('c')
				if isFree {
					held += cc.Fixed
					A[i][j] += Work(c, n)
				} else {
					held += compute
				}
			}
			b[i] = (measured - held) / measured
			for j := range A[i] {
				A[i][j] /= measured
			}
		}
		// Scale columns to unit norm so that MAC counts and small counts
		// weigh alike in the solver; unscale after.
		scale := make([]float64, len(free))
		for j := range free {
			s := 0.0
			for i := range A {
				s += A[i][j] * A[i][j]
			}
			scale[j] = math.Sqrt(s)
			if scale[j] == 0 {
				scale[j] = 1
			}
			for i := range A {
				A[i][j] /= scale[j]
			}
		}
		rank = Rank(A)
		x, err := NNLS(A, b)
		if err != nil {
			return nil, 0, err
		}
		for c, j := range col {
			cc := t.Classes[c]
			cc.PerUnit = x[j] / scale[j]
			t.Classes[c] = cc
		}
		if bound.String() == lastBound {
			break
		}
		lastBound = bound.String()
	}
	return t, rank, nil
}

// fitPower sets t's power to the least-squares fit, in relative terms, of
// power × estimated latency to the measured energies; it reports whether
// any sample had one.
func fitPower(t *Target, samples []Sample, weights string) bool {
	var num, den float64
	for _, s := range samples {
		if s.EnergyUJ <= 0 {
			continue
		}
		est := t.Cost(s.Nodes, weights).LatencyMS
		r := est / s.EnergyUJ
		num += r
		den += r * r
	}
	if den == 0 {
		return false
	}
	t.PowerMW = num / den
	return true
}

func errorsOf(t *Target, samples []Sample, weights string) []SampleFit {
	out := make([]SampleFit, 0, len(samples))
	for _, s := range samples {
		e := t.Cost(s.Nodes, weights)
		f := SampleFit{Name: s.Name, MeasuredMS: s.LatencyMS, EstimatedMS: e.LatencyMS, ErrorPct: pct(e.LatencyMS, s.LatencyMS)}
		if s.EnergyUJ > 0 {
			f.MeasuredUJ, f.EstimatedUJ, f.EnergyErrorPct = s.EnergyUJ, e.EnergyUJ, pct(e.EnergyUJ, s.EnergyUJ)
		}
		out = append(out, f)
	}
	return out
}

func pct(est, meas float64) float64 { return (est - meas) / meas * 100 }

// MaxAbsError is the largest |error| of a list, latency or energy.
func MaxAbsError(fs []SampleFit, energy bool) float64 {
	m := 0.0
	for _, f := range fs {
		v := f.ErrorPct
		if energy {
			v = f.EnergyErrorPct
		}
		m = math.Max(m, math.Abs(v))
	}
	return m
}

// sortedClasses returns the classes of a target in report order.
func sortedClasses(t *Target) []Class {
	var out []Class
	for _, c := range Classes {
		if _, ok := t.Classes[c]; ok {
			out = append(out, c)
		}
	}
	var extra []string
	for c := range t.Classes {
		if !validClass(string(c)) {
			extra = append(extra, string(c))
		}
	}
	sort.Strings(extra)
	for _, c := range extra {
		out = append(out, Class(c))
	}
	return out
}
