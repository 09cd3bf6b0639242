package report

import (
	"fmt"
	"math"
	"strconv"

	"github.com/loadline/loadline/budget"
)

// Bytes prints a byte count in binary units (KiB = 1024 B), as device
// datasheets give RAM and flash: "1.34 MiB", "512 B".
func Bytes(n int64) string {
	if n < 0 {
		return "?"
	}
	const unit = 1024
	if n < unit {
		return strconv.FormatInt(n, 10) + " B"
	}
	units := []string{"KiB", "MiB", "GiB", "TiB", "PiB", "EiB"}
	v := float64(n) / unit
	i := 0
	for v >= unit && i < len(units)-1 {
		v /= unit
		i++
	}
	return trim3(v) + " " + units[i]
}

// Count prints a count with decimal suffixes (k = 10³, M = 10⁶, G = 10⁹), as
// parameter and MAC counts are published: "3.50 M", "950".
func Count(n int64) string {
	if n < 0 {
		return "?"
	}
	if n < 1000 {
		return strconv.FormatInt(n, 10)
	}
	units := []string{"k", "M", "G", "T", "P", "E"}
	v := float64(n) / 1000
	i := 0
	for v >= 1000 && i < len(units)-1 {
		v /= 1000
		i++
	}
	return trim3(v) + " " + units[i]
}

// trim3 prints three significant digits.
func trim3(v float64) string {
	switch {
	case v >= 100:
		return fmt.Sprintf("%.0f", v)
	case v >= 10:
		return fmt.Sprintf("%.1f", v)
	}
	return fmt.Sprintf("%.2f", v)
}

// Figure prints one budget metric's value in its own unit: binary bytes for
// the byte metrics (file, weights, arena, ram, flash), decimal counts for
// params, macs and flops. Any other key prints as a plain integer.
func Figure(metric string, v int64) string {
	switch metric {
	case budget.MetricFile, budget.MetricWeights, budget.MetricArena, budget.MetricRAM, budget.MetricFlash:
		return Bytes(v)
	case budget.MetricParams, budget.MetricMACs, budget.MetricFLOPs:
		return Count(v)
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
