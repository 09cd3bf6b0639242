package target

import (
	"fmt"
	"math"
	"strconv"
	"strings"
)

// parseUnit reads a number with one of units (multipliers), e.g. "120MHz".
func parseUnit(text, what string, units map[string]float64, example string) (float64, error) {
	s := strings.TrimSpace(text)
	i := 0
	for i < len(s) && (s[i] >= '0' && s[i] <= '9' || s[i] == '.') {
		i++
	}
	num, unit := s[:i], strings.TrimSpace(s[i:])
	v, err := strconv.ParseFloat(num, 64)
	if num == "" || err != nil {
		return 0, fmt.Errorf("%q: a %s is a number with a unit, e.g. %s", text, what, example)
	}
	mult, ok := units[unit]
	if !ok {
		return 0, fmt.Errorf("%q: unknown unit %q for a %s, e.g. %s", text, unit, what, example)
	}
	v *= mult
	if math.IsInf(v, 0) || math.IsNaN(v) {
		return 0, fmt.Errorf("%q: too large", text)
	}
	return v, nil
}

// ParseHz reads a clock: "120MHz", "80 MHz", "32768Hz", "1.2GHz".
func ParseHz(text string) (float64, error) {
	v, err := parseUnit(text, "clock", map[string]float64{"Hz": 1, "kHz": 1e3, "MHz": 1e6, "GHz": 1e9}, "120MHz")
	if err == nil && v <= 0 {
		err = fmt.Errorf("%q: a clock must be more than 0 Hz", text)
	}
	return v, err
}

// ParseMW reads a power in milliwatts: "41mW", "0.5W", "900uW".
func ParseMW(text string) (float64, error) {
	return parseUnit(text, "power", map[string]float64{"uW": 1e-3, "µW": 1e-3, "mW": 1, "W": 1e3}, "41mW")
}

// FormatHz prints a clock in the largest unit that keeps it whole-ish:
// "120MHz", "32.768kHz".
func FormatHz(hz float64) string {
	for _, u := range []struct {
		name string
		mult float64
	}{{"GHz", 1e9}, {"MHz", 1e6}, {"kHz", 1e3}} {
		if hz >= u.mult {
			return strconv.FormatFloat(hz/u.mult, 'f', -1, 64) + u.name
		}
	}
	return strconv.FormatFloat(hz, 'f', -1, 64) + "Hz"
}
