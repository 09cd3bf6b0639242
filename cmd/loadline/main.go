// Command loadline keeps neural-network models inside the resource budgets
// of the devices they ship on. This file only parses flags and wires the
// packages together.
package main

import (
	"bufio"
	"bytes"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"runtime/pprof"
	"strconv"
	"strings"
	"sync"

	"github.com/spf13/cobra"

	"github.com/loadline/loadline/check"
	"github.com/loadline/loadline/internal/display"
	"github.com/loadline/loadline/measure"
	"github.com/loadline/loadline/report"
	"github.com/loadline/loadline/target"
)

// Exit codes, as the README ("Exit codes", under Commands) states them.
const (
	exitOK      = 0
	exitBudget  = 1 // a budget is broken, or a model cannot be measured
	exitUsage   = 2 // usage or budget-file error
	exitEnviron = 3 // environment error
)

// exitError carries an exit code up to main.
type exitError struct {
	code int
	err  error
}

func (e *exitError) Error() string { return e.err.Error() }

const conventions = `Figures (static estimates from the model file; measure on the device before release):
  file         bytes of the model file as stored.
  params       elements of every constant tensor (initializer or Constant output)
               used as a weight; constants read only as shapes, indices or axes,
               constants consumed only by shape arithmetic, scalars,
               BatchNormalization running statistics and quantization scales
               and zero points are not parameters. Weights computed at load time
               count too (load time, below).
  param bytes  storage of those parameters at their own dtype (int4 packs two
               to a byte).
  load time    a node with an input, all inputs fixed (initializers, Constant
               outputs, inferred values, such nodes' outputs), no subgraph, not
               random, runs once at load time. Its output is generated when it
               holds more than one element and more than its fixed data inputs
               were computed from (ConstantOfShape, Range, Expand, Tile, a
               broadcast; not a Transpose, Cast, Concat or Dequantize of
               constants, which count as those constants). Generated and read by
               a run-time node: from stored constants alone and read at a data
               position, a parameter (params, param bytes and
               generated_param_bytes, which ram counts wherever weights live);
               read only as indices or shapes, constant memory live at every
               step of both activation views; from an inferred value (the Shape
               of a run-time tensor), or in a TFLite model (its runtime computes
               every operator at run time), an activation like any node output.
  MACs         multiply-accumulates of Conv (output elements × C_in/group × kernel
               area), ConvTranspose (input elements × C_out/group × kernel area),
               Gemm and MatMul (output elements × K), Einsum (product of the
               distinct subscript sizes), their quantized forms, and LSTM/GRU/RNN
               (gates 4/3/1 × (input + hidden) × hidden × steps × batch × directions).
  FLOPs        2 × MACs, plus one per output element of elementwise, activation,
               normalisation and quantization ops, one per window element per
               output of pooling, one per input element of reductions; data
               movement (Reshape, Transpose, Concat, …) is 0. A 1-GMAC model is a
               2-GFLOP model. If runs only its branch when the condition is known
               (constants, --value), else counts its costlier branch; Loop and Scan
               their body × trip count (once, and listed as unresolved, when
               unknown). Nodes whose shapes have unbound symbolic dims are listed
               as unresolved and left out; bind them with --dim batch=1.
  sparsity     share of weight elements exactly zero, read from the weight bytes
               (-1 when no weight has stored values).
  activations  graph view: in the file's node order, each run-time tensor is live
               from its producer's step through its last consumer's (load-time
               constants that are not parameters: every step); peak live =
               the largest sum at one step (a lower bound for any allocator); arena =
               an offset plan, greedy by size (Pisarchyk & Lee 2020), ≥ peak.
               Deployed view: the same after BatchNormalization folding, activation
               fusion, view aliasing and QuantizeLinear/DequantizeLinear folding
               (each switchable; in-place depthwise off unless asked). Fused too:
               activations written as elementwise groups from the producer's output
               and constants alone (SiLU x*Sigmoid(x); hard-swish x*HardSigmoid(x)
               and x*Relu6(x+3)/6; GELU with Erf or Tanh; Mish). Views: Reshape,
               Flatten, Squeeze, Unsqueeze, Identity, a Cast to the same dtype, an
               inference Dropout; fusions see through chains of them.
               Runtime view (TFLite): the arena the microcontroller runtime plans:
               operator-scoped lifetimes, every buffer rounded up to 16 bytes,
               largest first (ties in tensor order) at the first gap among the
               buffers live with it, an offline plan's offsets honoured, reshape
               not in place, kernel scratch (SVDF) placed for its operator's step;
               scratch = the most one operator asks for.
  persistent   bytes of TFLite variable tensors (state kept between invocations),
               allocated beside the runtime arena.
  shapes       ONNX: inferred for every tensor; symbolic dims stay symbols unless
               bound. TFLite: the stored shapes, checked per operator (a
               contradiction is listed as unresolved); a -1 of a shape_signature is
               the dim "batch" (axis 0) or "dimK", at its stored size unless bound.
               Nodes whose shapes cannot be inferred are listed as unresolved, with
               the reason.
  bindings     --dim NAME=N sizes a symbolic input dim (an unnamed one is INPUT.AXIS,
               e.g. audio.1); --shape NAME=1x512 gives input NAME its whole shape;
               --value NAME=16000 (or 1,2,3) gives a small input its contents for
               constant folding. A budget rule's dims: and inputs: ({audio: [1, 512],
               rate: 16000}) do the same. Sizes are from 1 up; a binding naming
               nothing, or not fitting the input, is an error listing the inputs (in
               check: only for a model still waiting for a binding). Unbound models
               list each missing binding with what waits for it.
  TFLite ops   builtin operators use the same MAC formulas (CONV_2D, DEPTHWISE_CONV_2D
               with one input channel per output, FULLY_CONNECTED and BATCH_MATMUL
               as matmul, TRANSPOSE_CONV, UNIDIRECTIONAL_SEQUENCE_LSTM as LSTM, SVDF =
               batch × filters × (input + memory)); a fused activation adds one FLOP
               per output element; custom operators are listed as unresolved.
  latency,     estimates on a device target (--target, or a budget device's
  energy       target:): each operator is classed (conv, depthwise, dense,
               recurrent, elementwise, pooling, movement) and costs
               max(fixed + per_unit × work, memory cycles) cycles, work = MACs
               for the first four classes and the larger of input 0's and the
               outputs' elements for the others, memory cycles = weight bytes /
               flash (or RAM) bytes per cycle + activation bytes / RAM bytes per
               cycle (a roofline); weight bytes = the layer's constant inputs,
               stored or known before the run; activation bytes = its outputs
               plus its run-time inputs at data positions, indices read element
               by element (Gather's, ScatterND's, ...) included (a run-time
               shape, axis or count, statistics or quantization metadata is not
               data and counts in neither); latency = cycles / clock, energy = power × latency.
               Built-in targets are fitted to published MLPerf Tiny measurements;
               these are estimates: measure on the device before release.
  unsupported  operators the target's runtime has no kernel for (at their dtype),
               from the runtime's operator table.
  work         inference is charged a unit per node evaluated (subgraphs, unrolled
               loop iterations and function bodies each time they are inferred;
               calls with one signature share one result) and per 16 dims or held
               elements; past 524,288 units plus 8 per node the file stores, the
               model is refused with an error.
Units: B, KiB, MiB (1024-based) for bytes; k, M, G (1000-based) for counts;
ms, µs for latency; µJ, mJ for energy.`

func main() {
	stop := startProfile(os.Getenv("LOADLINE_CPUPROFILE"), os.Stderr)
	code := runWith(os.Args[1:], os.Stdin, os.Stdout, os.Stderr)
	stop()
	os.Exit(code)
}

// startProfile writes a CPU profile of the whole run to path when it is
// set (LOADLINE_CPUPROFILE, for contributors: DEVELOPERS.md, "Speed") and
// returns the function that ends it. A profile that cannot be written is
// said and the run goes on.
func startProfile(path string, stderr io.Writer) func() {
	if path == "" {
		return func() {}
	}
	f, err := os.Create(path)
	if err == nil {
		err = pprof.StartCPUProfile(f)
	}
	if err != nil {
		fmt.Fprintf(stderr, "loadline: LOADLINE_CPUPROFILE: %v; running without a profile\n", err)
		if f != nil {
			f.Close()
		}
		return func() {}
	}
	return func() {
		pprof.StopCPUProfile()
		if err := f.Close(); err != nil {
			fmt.Fprintf(stderr, "loadline: LOADLINE_CPUPROFILE: %v\n", err)
		}
	}
}

// run executes the command line with no standard input; tests call it.
func run(args []string, stdout, stderr io.Writer) int {
	return runWith(args, strings.NewReader(""), stdout, stderr)
}

// runWith executes the command line and returns the exit code.
func runWith(args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	out := newOrderedOutput(stdout, stderr)
	defer out.flush()
	stdout, stderr = out.stdout(), out.stderr()
	root := newRoot(stdin, stdout, stderr)
	root.SetArgs(args)
	err := root.Execute()
	out.flush()
	if err == nil {
		return exitOK
	}
	var ee *exitError
	if errors.As(err, &ee) {
		if ee.err != nil && ee.err.Error() != "" {
			sayError(stderr, "loadline: ", ee.err)
		}
		return ee.code
	}
	sayError(stderr, "loadline: ", err)
	return exitUsage
}

// orderedOutput buffers standard output (a per-layer table of a large
// model is millions of small writes) and writes what it holds before
// anything goes to standard error, so that the two streams interleave as
// they would unbuffered when a CI log joins them. Writers on other
// goroutines (progress) are serialised by its lock.
type orderedOutput struct {
	mu       sync.Mutex
	buf      *bufio.Writer
	out, err io.Writer
}

func newOrderedOutput(stdout, stderr io.Writer) *orderedOutput {
	return &orderedOutput{buf: bufio.NewWriterSize(stdout, 64<<10), out: stdout, err: stderr}
}

// stdout and stderr are the two streams through o.
func (o *orderedOutput) stdout() io.Writer { return stream{o.writeOut, o.out} }
func (o *orderedOutput) stderr() io.Writer { return stream{o.writeErr, o.err} }

func (o *orderedOutput) writeOut(p []byte) (int, error) {
	o.mu.Lock()
	defer o.mu.Unlock()
	return o.buf.Write(p)
}

func (o *orderedOutput) writeErr(p []byte) (int, error) {
	o.mu.Lock()
	defer o.mu.Unlock()
	o.buf.Flush() // an error writing stdout shows on the next stdout write
	return o.err.Write(p)
}

// flush writes what standard output holds.
func (o *orderedOutput) flush() {
	o.mu.Lock()
	defer o.mu.Unlock()
	o.buf.Flush()
}

// stream is one of orderedOutput's streams: its writes go through write,
// and Unwrap gives the stream beneath (whether it is a terminal decides
// colour, report.ColorFor).
type stream struct {
	write func([]byte) (int, error)
	under io.Writer
}

func (s stream) Write(p []byte) (int, error) { return s.write(p) }
func (s stream) Unwrap() io.Writer           { return s.under }

// sayError writes err to w, one line per part, each after prefix; every
// part shows outside strings (paths, names, revisions) escaped, so that no
// file name can start a line of its own in a CI log. The parts are an
// errors.Join's or a budget file's findings, and an environment error's
// hint.
func sayError(w io.Writer, prefix string, err error) {
	for _, line := range errorLines(err) {
		fmt.Fprintln(w, prefix+line)
		prefix = "  "
	}
}

func errorLines(err error) []string {
	if env, ok := err.(*check.EnvError); ok {
		lines := errorLines(env.Err)
		if env.Hint != "" {
			lines = append(lines, "hint: "+display.Escape(env.Hint))
		}
		return lines
	}
	if m, ok := err.(interface{ Unwrap() []error }); ok {
		var lines []string
		for _, e := range m.Unwrap() {
			if e != nil {
				lines = append(lines, errorLines(e)...)
			}
		}
		return lines
	}
	// A wrapper that adds nothing to its cause's message (a budget-file
	// error around the file's findings) is seen through.
	if u := errors.Unwrap(err); u != nil && u.Error() == err.Error() {
		return errorLines(u)
	}
	return []string{display.Escape(err.Error())}
}

func newRoot(stdin io.Reader, stdout, stderr io.Writer) *cobra.Command {
	root := &cobra.Command{
		Use:   "loadline",
		Short: "Keep neural-network models inside the resource budgets of their devices",
		Long: "loadline measures neural-network models (size, parameters, MACs, activation memory)\n" +
			"and keeps them inside the budgets of the devices they ship on: at every commit, on\n" +
			"every pull request, and for the release sign-off.\n\n" + conventions + "\n\n" + checkConventions,
		SilenceUsage:  true,
		SilenceErrors: true,
	}
	root.SetOut(stdout)
	root.SetErr(stderr)
	root.AddCommand(newMeasureCmd(stdout), newCheckCmd(stdin, stdout, stderr), newCompareCmd(stdout),
		newInitCmd(stdout, stderr), newHookCmd(stdout), newDemoCmd(stdout, stderr),
		newSignoffCmd(stdout, stderr), newCalibrateCmd(stdout, stderr))
	return root
}

func newMeasureCmd(stdout io.Writer) *cobra.Command {
	var asJSON, layers bool
	var bind bindFlags
	var targetSpec string
	var deploy deployFlags
	cmd := &cobra.Command{
		Use:   "measure [--json] [--layers] [--dim NAME=N]... [--shape NAME=1x512]... [--value NAME=V]... [--target NAME[@CLOCK]] FILE...",
		Short: "Print the figures of model files (no git, no budget)",
		Long:  "Decode each model file, infer every tensor's shape and print its figures.\n\n" + conventions,
		Example: "  loadline measure models/kws.onnx\n" +
			"  loadline measure --dim batch=1 --json models/*.onnx\n" +
			"  loadline measure --shape audio=1x16000 --value rate=16000 models/kws.onnx\n" +
			"  loadline measure --target m4-reference@120MHz models/kws.tflite",
		Args: cobra.MinimumNArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			bound, err := bind.parse()
			if err != nil {
				return &exitError{exitUsage, err}
			}
			var tgt *target.Target
			if targetSpec != "" {
				if tgt, err = target.Lookup(targetSpec); err != nil {
					return &exitError{exitUsage, fmt.Errorf("--target: %w", err)}
				}
			}
			entries := check.MeasureFiles(args, measure.Options{Dims: bound.Dims, Shapes: bound.Shapes, Values: bound.Values,
				Layers: layers || tgt != nil, Deploy: deploy.options()})
			if tgt != nil {
				for _, m := range entries {
					if m.Error == "" {
						m.Target = measure.Estimate(m, tgt, target.WeightsFlash)
						if !layers {
							m.Layers, m.MemoryDetail.LiveBytesByStep = nil, nil
						}
					}
				}
			}
			if asJSON {
				err = report.MeasureJSON(stdout, entries)
			} else {
				err = report.MeasureText(stdout, entries)
			}
			if err != nil {
				return &exitError{exitEnviron, err}
			}
			failed := 0
			for _, e := range entries {
				if e.Error != "" {
					failed++
				}
			}
			if failed > 0 {
				return &exitError{exitBudget, fmt.Errorf("%d of %d file(s) could not be measured", failed, len(entries))}
			}
			return nil
		},
	}
	cmd.Flags().BoolVar(&asJSON, "json", false, "print the "+report.MeasureSchema+" JSON document")
	bind.register(cmd)
	cmd.Flags().BoolVar(&layers, "layers", false, "add the per-node table, the top contributors to MACs and memory, and the peak's live tensors")
	cmd.Flags().StringVar(&targetSpec, "target", "", "estimate latency and energy on a device target, NAME[@CLOCK] (built-in: "+strings.Join(target.BuiltinNames(), ", ")+"; e.g. m4-reference@120MHz), and list the operators its runtime lacks")
	deploy.register(cmd)
	return cmd
}

// deployFlags switch the deployed view's rewrites.
type deployFlags struct {
	noFoldBN, noFuse, noAlias, noFoldQDQ, inPlaceDepthwise bool
}

func (d *deployFlags) register(cmd *cobra.Command) {
	f := cmd.Flags()
	f.BoolVar(&d.noFoldBN, "no-fold-bn", false, "deployed view: keep BatchNormalization as its own node")
	f.BoolVar(&d.noFuse, "no-fuse-activations", false, "deployed view: keep activations (single nodes and decomposed groups) as their own nodes")
	f.BoolVar(&d.noAlias, "no-alias-views", false, "deployed view: give Reshape/Flatten/Squeeze/Unsqueeze/Identity outputs their own buffers")
	f.BoolVar(&d.noFoldQDQ, "no-fold-qdq", false, "deployed view: keep QuantizeLinear/DequantizeLinear pairs (activations at float size)")
	f.BoolVar(&d.inPlaceDepthwise, "inplace-depthwise", false, "deployed view: depthwise convolutions overwrite their input")
}

func (d *deployFlags) options() *measure.DeployOptions {
	o := measure.DefaultDeployOptions()
	o.FoldBN = !d.noFoldBN
	o.FuseActivations = !d.noFuse
	o.AliasViews = !d.noAlias
	o.FoldQDQ = !d.noFoldQDQ
	o.InPlaceDepthwise = d.inPlaceDepthwise
	return &o
}

// bindFlags are --dim, --shape and --value: bindings of models' inputs.
type bindFlags struct {
	dims, shapes, values []string
}

func (b *bindFlags) register(cmd *cobra.Command) {
	f := cmd.Flags()
	f.StringArrayVar(&b.dims, "dim", nil, "bind a symbolic input dim, NAME=N (N from 1; an unnamed dim is INPUT.AXIS, e.g. audio.1) (repeatable)")
	f.StringArrayVar(&b.shapes, "shape", nil, "give input NAME its whole shape, NAME=1x512 (repeatable)")
	f.StringArrayVar(&b.values, "value", nil, "give small input NAME its value for constant folding, NAME=16000 or NAME=1,2,3 (repeatable)")
}

// parse reads the flags.
func (b *bindFlags) parse() (check.Bindings, error) {
	out := check.Bindings{Dims: map[string]int64{}, Shapes: map[string][]int64{}, Values: map[string][]float64{}}
	split := func(flag, f, example string) (string, string, error) {
		i := strings.LastIndex(f, "=")
		if i <= 0 || strings.TrimSpace(f[:i]) == "" {
			return "", "", fmt.Errorf("--%s %q: want NAME=VALUE, e.g. --%s %s", flag, f, flag, example)
		}
		return strings.TrimSpace(f[:i]), strings.TrimSpace(f[i+1:]), nil
	}
	size := func(flag, f, v string) (int64, error) {
		n, err := strconv.ParseInt(v, 10, 64)
		if err != nil || n < 1 || n > 1<<40 {
			return 0, fmt.Errorf("--%s %q: %q is not a size (a whole number from 1 up)", flag, f, v)
		}
		return n, nil
	}
	for _, f := range b.dims {
		name, v, err := split("dim", f, "batch=1")
		if err != nil {
			return out, err
		}
		if out.Dims[name], err = size("dim", f, v); err != nil {
			return out, err
		}
	}
	for _, f := range b.shapes {
		name, v, err := split("shape", f, "audio=1x512")
		if err != nil {
			return out, err
		}
		parts := strings.FieldsFunc(v, func(r rune) bool { return r == 'x' || r == 'X' || r == ',' })
		if len(parts) == 0 || len(parts) > 64 {
			return out, fmt.Errorf("--shape %q: want sizes joined by x, e.g. --shape audio=1x512", f)
		}
		shape := make([]int64, len(parts))
		for i, p := range parts {
			if shape[i], err = size("shape", f, strings.TrimSpace(p)); err != nil {
				return out, err
			}
		}
		out.Shapes[name] = shape
	}
	for _, f := range b.values {
		name, v, err := split("value", f, "rate=16000")
		if err != nil {
			return out, err
		}
		parts := strings.Split(v, ",")
		if len(parts) > 1<<16 {
			return out, fmt.Errorf("--value %q: at most %d values", f, 1<<16)
		}
		vals := make([]float64, len(parts))
		for i, p := range parts {
			x, err := strconv.ParseFloat(strings.TrimSpace(p), 64)
			if err != nil || math.IsNaN(x) || math.IsInf(x, 0) {
				return out, fmt.Errorf("--value %q: %q is not a number", f, p)
			}
			vals[i] = x
		}
		out.Values[name] = vals
	}
	return out, nil
}

func newDemoCmd(stdout, stderr io.Writer) *cobra.Command {
	var keep bool
	var signoff string
	cmd := &cobra.Command{
		Use:   "demo",
		Short: "Run the whole flow on an invented scenario in a temporary repository",
		Long: "Builds a throwaway git repository for an invented company (a bird detector on a porch\n" +
			"camera, a wake-word spotter on a kitchen timer; devices and models of loadline's own\n" +
			"making), commits a baseline and a retrain that breaks one budget and grows another\n" +
			"within budget, runs the check, and prints the terminal report and the markdown that\n" +
			"would be posted on the pull request. Offline; exits 0.",
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			dir, err := os.MkdirTemp("", "loadline-demo-")
			if err != nil {
				return &exitError{exitEnviron, err}
			}
			if keep {
				fmt.Fprintln(stderr, "demo repository:", dir)
			} else {
				defer os.RemoveAll(dir)
			}
			fmt.Fprintln(stdout, "== A throwaway repository for Wrenfield Labs (invented) ==")
			if err := check.DemoRepo(dir, stdout); err != nil {
				return &exitError{exitEnviron, err}
			}
			fmt.Fprintln(stdout, "\n== loadline check (branch retrain-160 against main) ==")
			// The demo repository is its own world: no CI variable (a pull
			// request's GITHUB_BASE_REF) may choose its base.
			res, _, err := check.Run(check.Options{Dir: dir, Base: "main", Detail: true, Getenv: func(string) string { return "" }, Today: check.DemoToday})
			if err != nil {
				return pipelineExit(err)
			}
			if err := report.CheckText(stdout, res, report.TextOptions{Color: report.ColorFor(stdout)}); err != nil {
				return &exitError{exitEnviron, err}
			}
			fmt.Fprintln(stdout, "\n== The markdown loadline check --post would put on the pull request ==")
			if err := report.CheckMarkdown(stdout, res, report.MarkdownOptions{Version: version}); err != nil {
				return &exitError{exitEnviron, err}
			}
			fmt.Fprintln(stdout, "\n"+check.DemoSummary(res))
			if signoff != "" {
				s, _, err := check.Signoff(check.SignoffOptions{Dir: dir, Rev: "main"})
				if err != nil {
					return pipelineExit(err)
				}
				var buf bytes.Buffer
				if err := renderSignoff(&buf, s, "html"); err != nil {
					return &exitError{exitEnviron, err}
				}
				if err := os.WriteFile(signoff, buf.Bytes(), 0o644); err != nil {
					return &exitError{exitEnviron, err}
				}
				fmt.Fprintf(stdout, "\nThe release sign-off report of main (three earlier releases, v1.0.0 to v1.2.0) is in %s; open it in a browser.\n", signoff)
			} else {
				fmt.Fprintln(stdout, "\nloadline demo --signoff report.html also writes the release sign-off report of main, with its three earlier releases.")
			}
			return nil
		},
	}
	cmd.Flags().BoolVar(&keep, "keep", false, "keep the demo repository and print its path")
	cmd.Flags().StringVar(&signoff, "signoff", "", "also write the release sign-off report (HTML) of the demo's main branch to FILE")
	return cmd
}
