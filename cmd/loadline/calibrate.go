package main

import (
	"fmt"
	"io"
	"path/filepath"
	"strconv"
	"strings"

	"github.com/spf13/cobra"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/check"
	"github.com/loadline/loadline/measure"
	"github.com/loadline/loadline/target"
)

func newCalibrateCmd(stdout, stderr io.Writer) *cobra.Command {
	var base, name, clock, fit, weights string
	cmd := &cobra.Command{
		Use:   "calibrate [--base TARGET] [--clock HZ] [--fit CLASSES] [--name NAME] MODEL=LATENCY[,ENERGY]...",
		Short: "Fit a device target's numbers to latencies (and energies) measured on your board",
		Long: "Measures each model, then fits the base target's cycles per MAC (or per element) of the\n" +
			"operator classes the models exercise, and its power, to the latencies and energies you\n" +
			"measured on the board: non-negative least squares over the models' operator-class mix,\n" +
			"in relative terms (target.Calibrate). Every other number (fixed cycles, the classes not\n" +
			"fitted, memory bandwidths, runtime) is the base target's. Prints the fitted target as YAML\n" +
			"to paste under a device's target: in loadline.yaml, preceded by comments giving the fit's\n" +
			"error on each model and, with two models or more, the leave-one-out error (fitted without\n" +
			"the model, then predicting it): the honest figure for a model nobody measured. A fit with\n" +
			"more numbers than measurements, or with models whose mixes cannot tell the classes apart,\n" +
			"says it is under-determined.\n\n" +
			"Operator classes: conv, depthwise, dense, recurrent (per MAC); elementwise, pooling,\n" +
			"movement (per element). By default the per-MAC classes the models exercise are fitted.",
		Example: "  loadline calibrate --base m4-optimized kws.tflite=99.8ms,5230uJ vww.tflite=301.2ms,15531uJ \\\n" +
			"      ic.tflite=389.6ms ad.tflite=8.6ms\n" +
			"  loadline calibrate --clock 80MHz --fit conv,dense --name my-board a.onnx=12ms b.onnx=40ms",
		Args: cobra.MinimumNArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			bt, err := target.Lookup(base)
			if err != nil {
				return &exitError{exitUsage, fmt.Errorf("--base: %w", err)}
			}
			if clock != "" {
				hz, err := target.ParseHz(clock)
				if err != nil {
					return &exitError{exitUsage, fmt.Errorf("--clock: %w", err)}
				}
				bt = bt.WithClock(hz)
			}
			if weights != target.WeightsFlash && weights != target.WeightsRAM {
				return &exitError{exitUsage, fmt.Errorf("--weights %q: flash or ram", weights)}
			}
			var free []target.Class
			if fit != "" {
				for _, c := range strings.Split(fit, ",") {
					c = strings.TrimSpace(c)
					if !validClass(c) {
						return &exitError{exitUsage, fmt.Errorf("--fit: unknown operator class %q (classes: %s)", c, classNames())}
					}
					free = append(free, target.Class(c))
				}
			}
			var paths []string
			var rows []target.Sample
			for _, a := range args {
				p, meas, ok := strings.Cut(a, "=")
				if !ok || p == "" {
					return &exitError{exitUsage, fmt.Errorf("%q: want MODEL=LATENCY[,ENERGY], e.g. kws.tflite=181.9ms,7374uJ", a)}
				}
				s := target.Sample{Name: p}
				for i, part := range strings.Split(meas, ",") {
					q, err := budget.ParseQuantity(part)
					want := budget.Duration
					if i == 1 {
						want = budget.Energy
					}
					if err != nil || q.Kind != want || i > 1 {
						return &exitError{exitUsage, fmt.Errorf("%q: want MODEL=LATENCY[,ENERGY] with units, e.g. kws.tflite=181.9ms,7374uJ", a)}
					}
					if i == 0 {
						s.LatencyMS = float64(q.Value) / 1e6
					} else {
						s.EnergyUJ = float64(q.Value) / 1e3
					}
				}
				paths = append(paths, p)
				rows = append(rows, s)
			}
			entries := check.MeasureFiles(paths, measure.Options{Layers: true})
			for i, m := range entries {
				if m.Error != "" {
					return &exitError{exitBudget, fmt.Errorf("%s", m.Error)}
				}
				if len(m.Unresolved) > 0 {
					return &exitError{exitBudget, fmt.Errorf("%s: %d node(s) unresolved (first %s: %s); bind its inputs and measure it with loadline measure first",
						paths[i], len(m.Unresolved), m.Unresolved[0].Node, m.Unresolved[0].Reason)}
				}
				rows[i].Nodes = measure.TargetNodes(m.Layers)
				if e := bt.Cost(rows[i].Nodes, weights); len(e.Uncosted) > 0 {
					fmt.Fprintf(stderr, "loadline: %s: %d node(s) have no cost class (first %s: %s); the fit leaves them out\n",
						paths[i], len(e.Uncosted), e.Uncosted[0].Node, e.Uncosted[0].Reason)
				}
			}
			res, err := target.Calibrate(bt, rows, free, weights)
			if err != nil {
				return &exitError{exitUsage, err}
			}
			t := res.Target
			if name != "" {
				t.Name = name
			} else {
				t.Name = bt.Name + "-fitted"
			}
			fitted := map[target.Class]bool{}
			for _, c := range res.Free {
				fitted[c] = true
			}
			models := make([]string, len(paths))
			for i, p := range paths {
				models[i] = filepath.Base(p)
			}
			t.Description = fmt.Sprintf("%s with %s fitted by loadline calibrate to %s measured at %s; the rest from %s",
				bt.Name, classList(res.Free, res.PowerFitted), strings.Join(models, ", "), target.FormatHz(t.ClockHz), bt.Name)
			calibrateReport(stdout, res)
			if res.Underdetermined != "" {
				fmt.Fprintln(stderr, "loadline: under-determined: "+res.Underdetermined)
			}
			fmt.Fprintln(stdout, "target:")
			fmt.Fprint(stdout, t.YAML(fitted, "  "))
			return nil
		},
	}
	f := cmd.Flags()
	f.StringVar(&base, "base", "m4-reference", "the built-in target to start from, NAME[@CLOCK]")
	f.StringVar(&clock, "clock", "", "the clock the board ran at when measured (default: the base's)")
	f.StringVar(&fit, "fit", "", "comma-separated operator classes to fit (default: the per-MAC classes the models exercise)")
	f.StringVar(&name, "name", "", "the fitted target's name (default: BASE-fitted)")
	f.StringVar(&weights, "weights", target.WeightsFlash, "where the board keeps weights: flash or ram")
	return cmd
}

// calibrateReport writes the fit's errors as YAML comments.
func calibrateReport(w io.Writer, res *target.Fit) {
	fmt.Fprintf(w, "# loadline calibrate: %d model(s), fitted %s\n", len(res.Samples), classList(res.Free, res.PowerFitted))
	if len(res.Kept) > 0 {
		fmt.Fprintf(w, "# not in any model, kept from the base: %s\n", classList(res.Kept, false))
	}
	if res.Underdetermined != "" {
		fmt.Fprintf(w, "# UNDER-DETERMINED: %s\n", res.Underdetermined)
	}
	fmt.Fprintln(w, "# fit error (estimate vs measured):")
	for _, s := range res.Samples {
		fmt.Fprintf(w, "#   %-28s %s", s.Name, errText(s))
	}
	if len(res.LeaveOneOut) > 0 {
		fmt.Fprintln(w, "# leave-one-out error (fitted without the model, then predicting it):")
		for _, s := range res.LeaveOneOut {
			fmt.Fprintf(w, "#   %-28s %s", s.Name, errText(s))
		}
	}
}

func errText(s target.SampleFit) string {
	out := fmt.Sprintf("latency %s ms vs %s ms (%+.1f %%)", decimal(s.EstimatedMS), decimal(s.MeasuredMS), s.ErrorPct)
	if s.MeasuredUJ > 0 {
		out += fmt.Sprintf(", energy %s µJ vs %s µJ (%+.1f %%)", decimal(s.EstimatedUJ), decimal(s.MeasuredUJ), s.EnergyErrorPct)
	}
	return out + "\n"
}

func classList(cs []target.Class, power bool) string {
	parts := make([]string, 0, len(cs)+1)
	for _, c := range cs {
		parts = append(parts, string(c))
	}
	if power {
		parts = append(parts, "power")
	}
	if len(parts) == 0 {
		return "nothing"
	}
	return strings.Join(parts, ", ")
}

func validClass(s string) bool {
	for _, c := range target.Classes {
		if string(c) == s {
			return true
		}
	}
	return false
}

func classNames() string {
	parts := make([]string, len(target.Classes))
	for i, c := range target.Classes {
		parts[i] = string(c)
	}
	return strings.Join(parts, ", ")
}

// decimal prints a figure with four significant digits and no exponent.
func decimal(v float64) string {
	if v >= 1000 || v <= -1000 {
		return strconv.FormatFloat(v, 'f', 0, 64)
	}
	return strconv.FormatFloat(v, 'g', 4, 64)
}
