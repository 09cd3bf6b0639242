package report

import (
	"math"
	"strconv"

	"github.com/loadline/loadline/budget"
)

// Bytes prints a byte count in binary units (KiB = 1024 B), as device
// datasheets give RAM and flash: "1.3 MiB", "512 B". It is budget's
// formatter, so tables and reasons print one figure one way.
func Bytes(n int64) string {
	if n < 0 {
		return "?"
	}
	return budget.FormatBytes(n)
}

// Count prints a count with decimal suffixes (k = 10³, M = 10⁶, G = 10⁹), as
// parameter and MAC counts are published: "3.5 M", "950".
func Count(n int64) string {
	if n < 0 {
		return "?"
	}
	return budget.FormatCount(n)
}

// Figure prints one budget metric's value in its own unit: binary bytes for
// the byte metrics (file, weights, arena, ram, flash), decimal counts for
// params, macs, flops and unsupported, milliseconds or microseconds for
// latency, µJ or mJ for energy. Any other key prints as a plain integer.
func Figure(metric string, v int64) string {
	switch metric {
	case budget.MetricFile, budget.MetricWeights, budget.MetricArena, budget.MetricRAM, budget.MetricFlash:
		return Bytes(v)
	case budget.MetricParams, budget.MetricMACs, budget.MetricFLOPs, budget.MetricUnsupported:
		return Count(v)
	case budget.MetricLatency, budget.MetricEnergy, budget.MetricLoad:
		if v < 0 {
			return "?"
		}
		return budget.FormatValue(metric, v)
	}
	return strconv.FormatInt(v, 10)
}

// signedFigure prints a difference with its sign: "+12.0 KiB", "-3.50 M",
// "±0".
func signedFigure(metric string, d int64) string {
	switch {
	case d > 0:
		return "+" + Figure(metric, d)
	case d < 0:
		if d == math.MinInt64 {
			return "-" + Figure(metric, math.MaxInt64)
		}
		return "-" + Figure(metric, -d)
	}
	return "±0"
}
