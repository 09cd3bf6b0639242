package budget

import (
	"fmt"
	"math/big"
	"strconv"
	"strings"
)

// Kind is what a quantity's unit says it measures.
type Kind int

// The kinds of quantity.
const (
	Plain    Kind = iota // a bare whole number: bytes or a count, as its metric says
	Bytes                // B, KiB, MiB, GiB, TiB (1024-based) or KB, MB, GB, TB (1000-based)
	Count                // k = 10³, M = 10⁶, G = 10⁹, T = 10¹²
	Percent              // %
	Duration             // ns, us (µs), ms, s; Value in nanoseconds
	Energy               // nJ, uJ (µJ), mJ, J; Value in nanojoules
)

func (k Kind) String() string {
	switch k {
	case Plain:
		return "plain number"
	case Bytes:
		return "bytes"
	case Count:
		return "count"
	case Percent:
		return "percent"
	case Duration:
		return "duration"
	case Energy:
		return "energy"
	}
	return "kind(" + strconv.Itoa(int(k)) + ")"
}

// Quantity is one value of the budget file as written ("1.5MiB", "60M",
// "90%", "512") and as a number.
type Quantity struct {
	Text string // as written
	Kind Kind
	// Value is the bytes or the count, rounded half up to a whole number;
	// for a Percent, millionths of the whole: 90% is 900000, 12.5% is 125000.
	Value int64
}

// PercentScale is the Value of 100%.
const PercentScale = 1_000_000

// maxQuantityText bounds the text ParseQuantity looks at: no figure needs
// more, and big-number arithmetic on a megabyte of digits is a denial of
// service, not a budget.
const maxQuantityText = 64

type unitDef struct {
	name string
	kind Kind
	mult int64 // for Percent: millionths per percent
}

var unitDefs = []unitDef{
	{"B", Bytes, 1},
	{"KiB", Bytes, 1 << 10}, {"MiB", Bytes, 1 << 20}, {"GiB", Bytes, 1 << 30}, {"TiB", Bytes, 1 << 40},
	{"KB", Bytes, 1e3}, {"kB", Bytes, 1e3}, {"MB", Bytes, 1e6}, {"GB", Bytes, 1e9}, {"TB", Bytes, 1e12},
	{"k", Count, 1e3}, {"M", Count, 1e6}, {"G", Count, 1e9}, {"T", Count, 1e12},
	{"%", Percent, PercentScale / 100},
	{"ns", Duration, 1}, {"us", Duration, 1e3}, {"µs", Duration, 1e3}, {"ms", Duration, 1e6}, {"s", Duration, 1e9},
	{"nJ", Energy, 1}, {"uJ", Energy, 1e3}, {"µJ", Energy, 1e3}, {"mJ", Energy, 1e6}, {"J", Energy, 1e9},
}

var unitNames = func() []string {
	out := make([]string, len(unitDefs))
	for i, u := range unitDefs {
		out[i] = u.name
	}
	return out
}()

// QuantityError says why a text is not a quantity, with a hint on the
// form to write instead.
type QuantityError struct {
	Text string // the value as written
	Msg  string
	Hint string
}

func (e *QuantityError) Error() string {
	s := fmt.Sprintf("%q: %s", e.Text, e.Msg)
	if e.Hint != "" {
		s += " (" + e.Hint + ")"
	}
	return s
}

// ParseQuantity reads a number with an optional unit, optionally separated
// by spaces: "512", "512B", "64KiB", "1.5 MiB", "64KB" (64000 bytes),
// "300k", "1.2G", "90%". A fraction is allowed before a unit other than B
// and is rounded half up to a whole byte or count (percent: to a
// millionth); a plain number must be whole. Negative values are refused:
// no budget figure is negative.
func ParseQuantity(text string) (Quantity, error) {
	fail := func(msg, hint string) (Quantity, error) {
		return Quantity{}, &QuantityError{Text: text, Msg: msg, Hint: hint}
	}
	s := strings.TrimSpace(text)
	if s == "" {
		return fail("empty value", "write e.g. 512KiB, 300k or 90%")
	}
	if len(s) > maxQuantityText {
		return Quantity{}, &QuantityError{Text: s[:20] + "…", Msg: fmt.Sprintf("value is %d characters long; a quantity needs at most %d", len(s), maxQuantityText)}
	}
	if s[0] == '-' {
		return fail("must not be negative", "")
	}
	if s[0] == '+' {
		s = s[1:]
	}
	i := 0
	for i < len(s) && isDigit(s[i]) {
		i++
	}
	intPart := s[:i]
	frac := ""
	if i < len(s) && s[i] == '.' {
		j := i + 1
		for j < len(s) && isDigit(s[j]) {
			j++
		}
		frac = s[i+1 : j]
		if frac == "" {
			return fail("a decimal point needs digits after it", "")
		}
		i = j
	}
	if intPart == "" {
		if frac != "" {
			return fail("write a digit before the decimal point", "e.g. 0"+s)
		}
		return fail("not a number", "write e.g. 512KiB, 1.5MiB, 300k or 90%")
	}
	rest := strings.TrimLeft(s[i:], " \t")
	u := unitDef{kind: Plain, mult: 1}
	if rest != "" {
		found := false
		for _, d := range unitDefs {
			if d.name == rest {
				u, found = d, true
				break
			}
		}
		if !found {
			var hint string
			switch {
			case rest[0] == ',':
				hint = "write a decimal point, not a comma"
			case didYouMean(rest, unitNames) != "":
				hint = didYouMean(rest, unitNames)
			case rest[0] == 'e' || rest[0] == 'E':
				hint = "write 1e6 as 1M"
			default:
				hint = "units: B, KiB, MiB, GiB, KB, MB, GB for bytes; k, M, G for counts; % for shares; ms, us for latency; uJ, mJ for energy"
			}
			return fail(fmt.Sprintf("unknown unit %q", rest), hint)
		}
	}
	if frac != "" && (u.kind == Plain || u.name == "B") {
		return fail("bytes and plain numbers must be whole", "add a unit, e.g. "+intPart+"."+frac+"KiB or "+intPart+"."+frac+"k")
	}
	n, ok := new(big.Int).SetString(intPart+frac, 10)
	if !ok {
		return fail("not a number", "")
	}
	n.Mul(n, big.NewInt(u.mult))
	if frac != "" {
		den := new(big.Int).Exp(big.NewInt(10), big.NewInt(int64(len(frac))), nil)
		// round half up: (2n + den) / (2 den)
		n.Mul(n, big.NewInt(2))
		n.Add(n, den)
		n.Quo(n, den.Mul(den, big.NewInt(2)))
	}
	if !n.IsInt64() {
		return fail("too large", "")
	}
	return Quantity{Text: strings.TrimSpace(text), Kind: u.kind, Value: n.Int64()}, nil
}

func isDigit(c byte) bool { return '0' <= c && c <= '9' }

// byteMetrics are the metrics measured in bytes; the others are counts.
var byteMetrics = map[string]bool{
	MetricFile: true, MetricWeights: true, MetricArena: true, MetricRAM: true, MetricFlash: true,
}

// IsBytes reports whether a metric is measured in bytes (file, weights,
// arena, ram, flash) rather than counted (params, macs, flops).
func IsBytes(metric string) bool { return byteMetrics[metric] }

// UnitOf is the kind of quantity a metric's limits are written in: Bytes,
// Count, Duration (latency) or Energy (energy).
func UnitOf(metric string) Kind {
	switch {
	case IsBytes(metric):
		return Bytes
	case metric == MetricLatency:
		return Duration
	case metric == MetricEnergy:
		return Energy
	}
	return Count
}

// FormatValue prints a metric's value as reports show it: bytes in binary
// units ("301.5 KiB", "1.18 MiB", "512 B"), counts with decimal suffixes
// ("48.1 M", "6.40 k", "950"), latency from nanoseconds ("181.9 ms",
// "850 µs") and energy from nanojoules ("7.37 mJ", "412 µJ"); one
// decimal, two below 10.
func FormatValue(metric string, v int64) string {
	if metric == MetricLoad {
		// A share of the core, in millionths: "37.5%".
		return strconv.FormatFloat(float64(v)*100/PercentScale, 'f', 1, 64) + "%"
	}
	switch UnitOf(metric) {
	case Bytes:
		return FormatBytes(v)
	case Duration:
		return formatScaled(v, 1000, " ns", []string{" µs", " ms", " s"})
	case Energy:
		return formatScaled(v, 1000, " nJ", []string{" µJ", " mJ", " J"})
	}
	return FormatCount(v)
}

// FormatBytes prints bytes in binary units: "301.5 KiB", "1.18 MiB",
// "512 B". It is loadline's one byte formatter: reasons, tables and the
// measure view all print with it.
func FormatBytes(v int64) string {
	return formatScaled(v, 1024, " B", []string{" KiB", " MiB", " GiB", " TiB", " PiB", " EiB"})
}

// FormatCount prints a count with decimal suffixes: "48.1 M", "6.40 k",
// "950". It is loadline's one count formatter.
func FormatCount(v int64) string {
	return formatScaled(v, 1000, "", []string{" k", " M", " G", " T", " P", " E"})
}

func formatScaled(v, base int64, unit string, units []string) string {
	sign := ""
	a := float64(v)
	if v < 0 {
		sign, a = "-", -a
	}
	// A figure moves to the next unit once it would print with four digits
	// before the point: 1003.3 KiB reads 0.98 MiB, 1000 B reads 0.98 KiB.
	if a < 1000 {
		return sign + strconv.FormatInt(int64(a), 10) + unit
	}
	i := 0
	a /= float64(base)
	for a >= 999.95 && i < len(units)-1 {
		a /= float64(base)
		i++
	}
	// Three significant digits at least: "1.18 MiB", "50.8 KiB", "460.8 KiB".
	decimals := 1
	if a < 9.995 {
		decimals = 2
	}
	return sign + strconv.FormatFloat(a, 'f', decimals, 64) + units[i]
}

// formatPercent prints millionths as a percent without trailing zeros:
// 900000 is "90%", 125000 is "12.5%".
func formatPercent(millionths int64) string {
	return strconv.FormatFloat(float64(millionths)/(PercentScale/100), 'f', -1, 64) + "%"
}

// share returns v × millionths / 10⁶, rounded down, without overflow.
func share(v, millionths int64) int64 {
	n := new(big.Int).Mul(big.NewInt(v), big.NewInt(millionths))
	n.Quo(n, big.NewInt(PercentScale))
	if !n.IsInt64() {
		if n.Sign() < 0 {
			return -1 << 63
		}
		return 1<<63 - 1
	}
	return n.Int64()
}

// addSat adds without overflow, saturating at the int64 bounds.
func addSat(a, b int64) int64 {
	s := a + b
	if (b > 0 && s < a) || (b < 0 && s > a) {
		if b > 0 {
			return 1<<63 - 1
		}
		return -1 << 63
	}
	return s
}
