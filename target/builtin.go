package target

import (
	"fmt"
	"sort"
	"strings"
)

// The built-in targets. Each was calibrated with Calibrate on one row of
// published measurements (MLPerf Tiny inference results on an STM32
// Nucleo-L4R5ZI board, Arm Cortex-M4F at 120 MHz; the four models of the
// benchmark: keyword spotting, visual wake words, image classification,
// anomaly detection), fitting the per-MAC cycles of the three classes the
// four models exercise (conv, depthwise, dense) and the power; published_test.go
// repeats the fit and checks these numbers and their errors.
//
// The four models cannot tell more numbers apart, so the others are set,
// not fitted, and said so in each description: recurrent takes dense's
// per-MAC cycles (an LSTM's or SVDF's gates are fully connected products);
// elementwise, pooling and movement per-element cycles and the fixed
// cycles per operator are assumptions from memory (they are under 2 % of
// each of the four models' estimated cycles); the memory bandwidths are
// those of a 32-bit bus (4 bytes per cycle from SRAM) and of flash behind
// wait states (2 bytes per cycle), from memory too.
var Builtin = map[string]*Target{
	"m4-reference": {
		Name: "m4-reference",
		Description: "Arm Cortex-M4F class core at 120 MHz running TensorFlow Lite Micro's reference kernels; " +
			"conv, depthwise and dense cycles per MAC and power fitted to MLPerf Tiny v0.5 closed/reference " +
			"results on the STM32 Nucleo-L4R5ZI (KWS 181.9 ms, VWW 600.6 ms, IC 704.2 ms, AD 10.05 ms); " +
			"recurrent = dense; elementwise, pooling, movement, fixed cycles and memory bandwidths assumed, not measured",
		Runtime: "tflite-micro", ClockHz: 120e6, PowerMW: 40.97,
		FlashBytesPerCycle: 2, RAMBytesPerCycle: 4,
		Classes: map[Class]ClassCost{
			Conv:        {PerUnit: 6.72, Fixed: 1000}, // fitted
			Depthwise:   {PerUnit: 26.0, Fixed: 1000}, // fitted
			Dense:       {PerUnit: 4.53, Fixed: 1000}, // fitted
			Recurrent:   {PerUnit: 4.53, Fixed: 1000}, // = dense
			Elementwise: {PerUnit: 20, Fixed: 1000},
			Pooling:     {PerUnit: 4, Fixed: 1000},
			Movement:    {PerUnit: 1, Fixed: 1000},
		},
	},
	"m4-optimized": {
		Name: "m4-optimized",
		Description: "Arm Cortex-M4F class core at 120 MHz running Arm's optimised int8 kernels (CMSIS-NN); " +
			"conv, depthwise and dense cycles per MAC and power fitted to MLPerf Tiny v1.0 closed/OctoML " +
			"microtvm_cmsis_nn results on the NUCLEO_L4R5ZI (KWS 99.8 ms, VWW 301.2 ms, IC 389.6 ms, AD 8.60 ms); " +
			"recurrent = dense; elementwise, pooling, movement, fixed cycles and memory bandwidths assumed, not measured",
		Runtime: "tflite-micro", ClockHz: 120e6, PowerMW: 51.87,
		FlashBytesPerCycle: 2, RAMBytesPerCycle: 4,
		Classes: map[Class]ClassCost{
			Conv:        {PerUnit: 3.72, Fixed: 1000}, // fitted
			Depthwise:   {PerUnit: 12.4, Fixed: 1000}, // fitted
			Dense:       {PerUnit: 3.87, Fixed: 1000}, // fitted
			Recurrent:   {PerUnit: 3.87, Fixed: 1000}, // = dense
			Elementwise: {PerUnit: 10, Fixed: 1000},
			Pooling:     {PerUnit: 2, Fixed: 1000},
			Movement:    {PerUnit: 1, Fixed: 1000},
		},
	},
}

// BuiltinNames lists the built-in targets, sorted.
func BuiltinNames() []string {
	out := make([]string, 0, len(Builtin))
	for n := range Builtin {
		out = append(out, n)
	}
	sort.Strings(out)
	return out
}

// Lookup resolves NAME or NAME@CLOCK ("m4-reference@80MHz") to a copy of a
// built-in target, at the clock given.
func Lookup(spec string) (*Target, error) {
	name, clock, hasClock := strings.Cut(strings.TrimSpace(spec), "@")
	b, ok := Builtin[name]
	if !ok {
		return nil, fmt.Errorf("unknown target %q (built-in targets: %s)", name, strings.Join(BuiltinNames(), ", "))
	}
	t := b.Clone()
	if hasClock {
		hz, err := ParseHz(clock)
		if err != nil {
			return nil, fmt.Errorf("target %q: %w", spec, err)
		}
		t = t.WithClock(hz)
	}
	return t, nil
}
