// Package target is loadline's device cost model: what a model costs a
// device in time and energy, per layer and in all, and which of its
// operators the device's runtime lacks.
//
// A Target describes how a device executes a model: a core with its kernel
// library (the cycles each operator class spends per unit of work, and a
// fixed cost per operator), its memories (bytes per cycle from flash and
// from RAM), its clock and the power it draws while running. The estimates
// are a calibrated model, not a measurement: each built-in target says
// which published measurements it was fitted to and how far off it is.
package target

import (
	"fmt"
	"math"
	"sort"
)

// Weights placements, as a budget's device names them.
const (
	WeightsFlash = "flash"
	WeightsRAM   = "ram"
)

// ClassCost is what one operator class costs: PerUnit cycles per MAC (or
// per element, Class.PerMAC) and Fixed cycles per operator.
type ClassCost struct {
	PerUnit float64 `json:"per_unit"`
	Fixed   float64 `json:"fixed"`
}

// Target is one device's cost model.
type Target struct {
	Name        string `json:"name"`
	Description string `json:"description,omitempty"`
	// Runtime names the operator-support table of the runtime the device
	// deploys with (Runtimes).
	Runtime string `json:"runtime"`
	// ClockHz is the core clock the estimates are for.
	ClockHz float64 `json:"clock_hz"`
	// PowerMW is the power drawn while running at ClockHz, in milliwatts.
	PowerMW float64 `json:"power_mw"`
	// FlashBytesPerCycle and RAMBytesPerCycle are the memory bandwidths of
	// the roofline bound.
	FlashBytesPerCycle float64 `json:"flash_bytes_per_cycle"`
	RAMBytesPerCycle   float64 `json:"ram_bytes_per_cycle"`
	// Classes holds the cost of each operator class; a class missing from
	// it costs nothing and its nodes are listed as uncosted.
	Classes map[Class]ClassCost `json:"classes"`
}

// Clone returns a deep copy.
func (t *Target) Clone() *Target {
	c := *t
	c.Classes = make(map[Class]ClassCost, len(t.Classes))
	for k, v := range t.Classes {
		c.Classes[k] = v
	}
	return &c
}

// WithClock returns a copy running at hz. Cycle counts do not change, so
// every layer's time scales by ClockHz/hz; power scales with the clock
// (dynamic power α·C·V²·f at a fixed supply, leakage not modelled), so the
// energy of a compute-bound inference stays the same.
func (t *Target) WithClock(hz float64) *Target {
	c := t.Clone()
	if hz > 0 && t.ClockHz > 0 {
		c.PowerMW = t.PowerMW * hz / t.ClockHz
		c.ClockHz = hz
	}
	return c
}

// Validate reports the first number that makes the target unusable.
func (t *Target) Validate() error {
	bad := func(what string, v float64) bool {
		return math.IsNaN(v) || math.IsInf(v, 0) || v < 0 || (what != "" && v == 0)
	}
	switch {
	case bad("clock", t.ClockHz):
		return fmt.Errorf("target %s: clock must be more than 0 Hz", t.Name)
	case bad("", t.PowerMW):
		return fmt.Errorf("target %s: power must not be negative", t.Name)
	case bad("flash", t.FlashBytesPerCycle):
		return fmt.Errorf("target %s: flash_bytes_per_cycle must be more than 0", t.Name)
	case bad("ram", t.RAMBytesPerCycle):
		return fmt.Errorf("target %s: ram_bytes_per_cycle must be more than 0", t.Name)
	}
	for c, v := range t.Classes {
		if bad("", v.PerUnit) || bad("", v.Fixed) {
			return fmt.Errorf("target %s: class %s: cycles must be finite and not negative", t.Name, c)
		}
	}
	return nil
}

// Node is what the cost model needs of one operator of a model.
type Node struct {
	Step      int
	Name      string
	Op        string
	Domain    string // "" ONNX, "tflite" a TFLite builtin, "tflite.custom" a TFLite custom operator
	DType     string // the element type the operator computes on
	Depthwise bool   // an ONNX convolution measure found depthwise
	MACs      int64
	// InElements is the element count of input 0, OutElements of the
	// outputs together.
	InElements, OutElements int64
	// WeightBytes are read from where the device keeps weights,
	// ActivationBytes (outputs and run-time data inputs) from RAM; measure
	// defines both (traffic in measure/layers.go).
	WeightBytes, ActivationBytes int64
}

// Work is what a node's class charges per_unit on: its MACs for a class
// charged per MAC; otherwise the larger of its input-0 and output element
// counts (a pooling window reads its whole input, a concatenation writes
// its whole output).
func Work(c Class, n Node) float64 {
	if c.PerMAC() {
		return float64(n.MACs)
	}
	return float64(max(n.InElements, n.OutElements))
}

// Bound says which side of the roofline limits a layer.
type Bound string

// The two bounds.
const (
	ComputeBound Bound = "compute"
	MemoryBound  Bound = "memory"
)

// LayerEstimate is one operator's estimated cost.
type LayerEstimate struct {
	Step      int     `json:"step"`
	Node      string  `json:"node"`
	Op        string  `json:"op"`
	Class     Class   `json:"class"`
	Cycles    float64 `json:"cycles"`
	LatencyMS float64 `json:"latency_ms"`
	EnergyUJ  float64 `json:"energy_uj"`
	Bound     Bound   `json:"bound"`
	// ComputeCycles and MemoryCycles are the two sides of the roofline.
	ComputeCycles float64 `json:"compute_cycles"`
	MemoryCycles  float64 `json:"memory_cycles"`
}

// Uncosted is an operator the cost model has no class for: left out of
// the totals, which are then lower bounds.
type Uncosted struct {
	Step   int    `json:"step"`
	Node   string `json:"node"`
	Op     string `json:"op"`
	Reason string `json:"reason"`
}

// Estimate is a model's estimated cost on a target, and the operators the
// target's runtime lacks.
type Estimate struct {
	Name      string  `json:"name"`
	ClockHz   float64 `json:"clock_hz"`
	Runtime   string  `json:"runtime"`
	Cycles    float64 `json:"cycles"`
	LatencyMS float64 `json:"latency_ms"`
	EnergyUJ  float64 `json:"energy_uj"`
	// PowerMW is the power the energy was computed with.
	PowerMW     float64         `json:"power_mw"`
	Layers      []LayerEstimate `json:"layers"`
	Uncosted    []Uncosted      `json:"uncosted"`
	Unsupported []Unsupported   `json:"unsupported"`
	// SupportNote says why support was not checked (a model in another
	// format than the runtime reads), "" when it was.
	SupportNote string `json:"support_note,omitempty"`
}

// Cost is the one definition of the cost model's figures. For each node of
// class c, with w = Work(c, node):
//
//	compute cycles = fixed(c) + per_unit(c) × w
//	memory cycles  = weight bytes / (flash bytes per cycle, or RAM's when
//	                 weights live in RAM) + activation bytes / RAM bytes per cycle
//	cycles         = max(compute cycles, memory cycles)   (roofline, Williams et al. 2009)
//
// latency = Σ cycles / clock; energy = power × latency. weights is
// WeightsFlash (also for "") or WeightsRAM. Nodes of no known class, or of
// a class the target has no cost for, are listed as uncosted.
func (t *Target) Cost(nodes []Node, weights string) *Estimate {
	e := &Estimate{Name: t.Name, ClockHz: t.ClockHz, Runtime: t.Runtime, PowerMW: t.PowerMW,
		Layers: []LayerEstimate{}, Uncosted: []Uncosted{}, Unsupported: []Unsupported{}}
	for _, n := range nodes {
		c, ok := Classify(n.Domain, n.Op, n.Depthwise)
		if !ok {
			e.Uncosted = append(e.Uncosted, Uncosted{Step: n.Step, Node: n.Name, Op: n.Op, Reason: "no operator class for " + opLabel(n)})
			continue
		}
		cc, ok := t.Classes[c]
		if !ok {
			e.Uncosted = append(e.Uncosted, Uncosted{Step: n.Step, Node: n.Name, Op: n.Op, Reason: fmt.Sprintf("target %s has no cost for class %s", t.Name, c)})
			continue
		}
		l := LayerEstimate{Step: n.Step, Node: n.Name, Op: n.Op, Class: c}
		l.ComputeCycles = cc.Fixed + cc.PerUnit*Work(c, n)
		l.MemoryCycles = t.memoryCycles(n, weights)
		l.Cycles, l.Bound = l.ComputeCycles, ComputeBound
		if l.MemoryCycles > l.ComputeCycles {
			l.Cycles, l.Bound = l.MemoryCycles, MemoryBound
		}
		l.LatencyMS = t.ms(l.Cycles)
		l.EnergyUJ = t.PowerMW * l.LatencyMS // mW × ms = µJ
		e.Cycles += l.Cycles
		e.Layers = append(e.Layers, l)
	}
	e.LatencyMS = t.ms(e.Cycles)
	e.EnergyUJ = t.PowerMW * e.LatencyMS
	return e
}

func (t *Target) memoryCycles(n Node, weights string) float64 {
	wbpc := t.FlashBytesPerCycle
	if weights == WeightsRAM {
		wbpc = t.RAMBytesPerCycle
	}
	var m float64
	if n.WeightBytes > 0 && wbpc > 0 {
		m += float64(n.WeightBytes) / wbpc
	}
	if n.ActivationBytes > 0 && t.RAMBytesPerCycle > 0 {
		m += float64(n.ActivationBytes) / t.RAMBytesPerCycle
	}
	return m
}

func (t *Target) ms(cycles float64) float64 {
	if t.ClockHz <= 0 {
		return 0
	}
	return cycles / t.ClockHz * 1e3
}

func opLabel(n Node) string {
	switch n.Domain {
	case "", "ai.onnx":
		return n.Op
	case "tflite":
		return "TFLite " + n.Op
	case "tflite.custom":
		return "TFLite custom operator " + n.Op
	}
	return n.Domain + ":" + n.Op
}

// Slowest returns up to k layers, slowest first (ties in step order).
func (e *Estimate) Slowest(k int) []LayerEstimate {
	ls := append([]LayerEstimate{}, e.Layers...)
	sort.SliceStable(ls, func(i, j int) bool { return ls[i].Cycles > ls[j].Cycles })
	return ls[:min(k, len(ls))]
}
