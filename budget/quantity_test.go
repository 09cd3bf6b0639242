package budget

import (
	"errors"
	"testing"
)

// Expected values are hand-worked: KiB = 1024 B, KB = 1000 B, k = 10³,
// M = 10⁶, G = 10⁹, and a percent is 10 000 millionths.
func TestParseQuantity(t *testing.T) {
	tests := []struct {
		in    string
		kind  Kind
		value int64
	}{
		{"512", Plain, 512},
		{"0", Plain, 0},
		{"512B", Bytes, 512},
		{"64KiB", Bytes, 64 * 1024},
		{"1.5MiB", Bytes, 1572864},    // 1.5 × 1 048 576
		{"1.5 MiB", Bytes, 1572864},   // a space between number and unit
		{" 2GiB ", Bytes, 2147483648}, // surrounding space
		{"64KB", Bytes, 64000},
		{"64kB", Bytes, 64000},
		{"2MB", Bytes, 2000000},
		{"0.3MiB", Bytes, 314573}, // 314 572.8 rounds half up
		{"1.1KiB", Bytes, 1126},   // 1126.4 rounds down
		{"300k", Count, 300000},
		{"60M", Count, 60000000},
		{"1.2G", Count, 1200000000},
		{"950", Plain, 950},
		{"0.0005k", Count, 1}, // 0.5 rounds half up
		{"90%", Percent, 900000},
		{"12.5%", Percent, 125000},
		{"100%", Percent, 1000000},
		{"0.0001%", Percent, 1},
		{"250%", Percent, 2500000},
		{"+5%", Percent, 50000},
	}
	for _, tt := range tests {
		t.Run(tt.in, func(t *testing.T) {
			q, err := ParseQuantity(tt.in)
			if err != nil {
				t.Fatalf("ParseQuantity(%q): %v", tt.in, err)
			}
			if q.Kind != tt.kind || q.Value != tt.value {
				t.Errorf("ParseQuantity(%q) = %v %d, want %v %d", tt.in, q.Kind, q.Value, tt.kind, tt.value)
			}
		})
	}
}

func TestParseQuantityErrors(t *testing.T) {
	tests := []struct{ in, want string }{
		{"1.5 Mib", `"1.5 Mib": unknown unit "Mib" (did you mean "MiB"?)`},
		{"64kib", `"64kib": unknown unit "kib" (did you mean "KiB"?)`},
		{"300K", `"300K": unknown unit "K" (did you mean "k"?)`},
		{"60Mi", `"60Mi": unknown unit "Mi" (did you mean "MiB"?)`},
		{"64 KiBs", `"64 KiBs": unknown unit "KiBs" (did you mean "KiB"?)`},
		{"1,5MiB", `"1,5MiB": unknown unit ",5MiB" (write a decimal point, not a comma)`},
		{"1e6", `"1e6": unknown unit "e6" (write 1e6 as 1M)`},
		{"12 parsecs", `"12 parsecs": unknown unit "parsecs" (units: B, KiB, MiB, GiB, KB, MB, GB for bytes; k, M, G for counts; % for shares; ms, us for latency; uJ, mJ for energy)`},
		{"", `"": empty value (write e.g. 512KiB, 300k or 90%)`},
		{"MiB", `"MiB": not a number (write e.g. 512KiB, 1.5MiB, 300k or 90%)`},
		{".5MiB", `".5MiB": write a digit before the decimal point (e.g. 0.5MiB)`},
		{"1.MiB", `"1.MiB": a decimal point needs digits after it`},
		{"-5%", `"-5%": must not be negative`},
		{"1.5", `"1.5": bytes and plain numbers must be whole (add a unit, e.g. 1.5KiB or 1.5k)`},
		{"1.5B", `"1.5B": bytes and plain numbers must be whole (add a unit, e.g. 1.5KiB or 1.5k)`},
		{"9000000TiB", `"9000000TiB": too large`},
		{"99999999999999999999", `"99999999999999999999": too large`},
	}
	for _, tt := range tests {
		t.Run(tt.in, func(t *testing.T) {
			_, err := ParseQuantity(tt.in)
			if err == nil {
				t.Fatalf("ParseQuantity(%q) succeeded, want %s", tt.in, tt.want)
			}
			var qe *QuantityError
			if !errors.As(err, &qe) {
				t.Fatalf("error %T is not a *QuantityError", err)
			}
			if err.Error() != tt.want {
				t.Errorf("ParseQuantity(%q):\n got %s\nwant %s", tt.in, err, tt.want)
			}
		})
	}
}

func TestFormatValue(t *testing.T) {
	tests := []struct {
		metric string
		v      int64
		want   string
	}{
		{MetricRAM, 512, "512 B"},
		{MetricRAM, 308736, "301.5 KiB"}, // 301.5 × 1024
		{MetricRAM, 1048575, "1.00 MiB"}, // rounds into the next unit rather than "1024.0 KiB"
		{MetricFlash, -20378, "-19.9 KiB"},
		{MetricMACs, 950, "950"},
		{MetricMACs, 48100000, "48.1 M"},
		{MetricParams, 300000, "300.0 k"},
		{MetricFLOPs, 1200000000, "1.20 G"},
	}
	for _, tt := range tests {
		if got := FormatValue(tt.metric, tt.v); got != tt.want {
			t.Errorf("FormatValue(%s, %d) = %q, want %q", tt.metric, tt.v, got, tt.want)
		}
	}
	if got := formatPercent(125000); got != "12.5%" {
		t.Errorf("formatPercent(125000) = %q", got)
	}
}

func TestSuggest(t *testing.T) {
	metrics := Metrics
	tests := []struct{ word, want string }{
		{"mac", "macs"},
		{"flps", "flops"},
		{"RAM", "ram"},
		{"falsh", "flash"}, // a swap is one edit
		{"colour", ""},
		{"x", ""},
	}
	for _, tt := range tests {
		if got := suggest(tt.word, metrics); got != tt.want {
			t.Errorf("suggest(%q) = %q, want %q", tt.word, got, tt.want)
		}
	}
}
