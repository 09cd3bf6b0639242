package report

import (
	"math"
	"testing"

	"github.com/loadline/loadline/budget"
)

func TestFigure(t *testing.T) {
	for _, tc := range []struct {
		metric string
		v      int64
		want   string
	}{
		{budget.MetricRAM, 471859, "460.8 KiB"},
		{budget.MetricFlash, 1572864, "1.50 MiB"},
		{budget.MetricArena, 512, "512 B"},
		{budget.MetricWeights, 2048, "2.00 KiB"},
		{budget.MetricFile, 1236000, "1.18 MiB"},
		{budget.MetricParams, 300000, "300.0 k"},
		{budget.MetricMACs, 60000000, "60.0 M"},
		{budget.MetricFLOPs, 2000000000, "2.00 G"},
		{budget.MetricMACs, 950, "950"},
		{"steps", 1234, "1234"}, // not a budget metric: a plain integer
	} {
		if got := Figure(tc.metric, tc.v); got != tc.want {
			t.Errorf("Figure(%s, %d) = %q, want %q", tc.metric, tc.v, got, tc.want)
		}
	}
}

func TestSignedFigure(t *testing.T) {
	for _, tc := range []struct {
		metric string
		d      int64
		want   string
	}{
		{budget.MetricRAM, 99328, "+97.0 KiB"},
		{budget.MetricRAM, -4096, "-4.00 KiB"},
		{budget.MetricMACs, -250000, "-250.0 k"},
		{budget.MetricMACs, 0, "±0"},
		{budget.MetricFile, math.MinInt64, "-8.00 EiB"}, // no overflow on negation
	} {
		if got := signedFigure(tc.metric, tc.d); got != tc.want {
			t.Errorf("signedFigure(%s, %d) = %q, want %q", tc.metric, tc.d, got, tc.want)
		}
	}
}

// TestFigureNextUnit: a figure that would print with four digits before
// the point moves to the next unit.
func TestFigureNextUnit(t *testing.T) {
	for _, tc := range []struct {
		metric string
		v      int64
		want   string
	}{
		{budget.MetricRAM, 1027379, "0.98 MiB"}, // 1027379 / 1024 = 1003.3 KiB
		{budget.MetricRAM, 1000, "0.98 KiB"},    // 1000 / 1024 = 0.977
		{budget.MetricRAM, 999, "999 B"},
		{budget.MetricRAM, 1023949, "0.98 MiB"}, // 999.9502 KiB would print as 1000.0 KiB
		{budget.MetricRAM, 1023900, "999.9 KiB"},
		{budget.MetricMACs, 999_960, "1.00 M"},
	} {
		if got := Figure(tc.metric, tc.v); got != tc.want {
			t.Errorf("Figure(%s, %d) = %q, want %q", tc.metric, tc.v, got, tc.want)
		}
	}
}
