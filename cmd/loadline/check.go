package main

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"github.com/loadline/loadline/action"
	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/check"
	"github.com/loadline/loadline/internal/display"
	"github.com/loadline/loadline/report"
)

// version names this build in reports.
const version = "0.1.0"

const checkConventions = `Verdicts: each limit in the budget file is a check of the head's figure
(fail above the limit, warn above warn_at of it, default 90%); each growth
rule a check against the base's figure plus its allowed growth. A waiver
turns a failure into "waived" until its date. headroom = limit − head
figure (a growth check's limit is the base plus the growth allowed); the
sign-off states a model's headroom as the smallest share of an allowance
left: (limit − figure) ÷ limit, or ÷ (limit − base) for growth. ram =
deployed activation arena, or for a TFLite model the runtime arena plus
the persistent bytes of its variable tensors (+ weight bytes when the
device keeps weights in RAM, else + the weight bytes computed at load
time, generated_param_bytes, which are in RAM either way); flash = the model file's bytes plus its
external data.
Device totals, for a device that lists the models it runs: flash = the sum
of their flash (identical constants of 256 B or more, parameters or not,
counted once with shared_weights: true, else reported as a possible saving;
flash_shared = each such constant's bytes × (models storing it − 1)); ram =
the largest arena (one-at-a-time) or the sum of the arenas (concurrent),
plus every model's persistent bytes and weights kept in RAM (a shared
constant that is a parameter once with shared_weights: true; one that is
not was never in RAM) or computed at load time; load = Σ latency ÷ period, the share of the core's
time (needs a target). Each total is judged against the device's limits
(default: its capacities), and each model's latency against its period.
Exit codes: 0 within budget (warnings allowed), 1 a budget is broken or a
changed model cannot be measured, 2 usage or budget-file error, 3
environment error (missing git objects, unreachable API when
--post-required).`

// renderFlags are the output choices shared by check and compare.
type renderFlags struct {
	format string
	out    string
	failOn string
}

func (r *renderFlags) register(cmd *cobra.Command) {
	cmd.Flags().StringVar(&r.format, "format", "text", "report format: text, markdown, json or junit")
	cmd.Flags().StringVarP(&r.out, "out", "o", "", "write the report to FILE instead of standard output")
	cmd.Flags().StringVar(&r.failOn, "fail-on", "fail", "which verdict exits 1: fail, warn or never")
}

func (r *renderFlags) validate() error {
	switch r.format {
	case "text", "markdown", "json", "junit":
	default:
		return fmt.Errorf("--format %q: choose text, markdown, json or junit", r.format)
	}
	switch r.failOn {
	case "fail", "warn", "never":
	default:
		return fmt.Errorf("--fail-on %q: choose fail, warn or never", r.failOn)
	}
	return nil
}

// render writes the result in the chosen format.
func render(w io.Writer, res *budget.Result, format string) error {
	switch format {
	case "markdown":
		return report.CheckMarkdown(w, res, report.MarkdownOptions{Version: version, Now: time.Now()})
	case "json":
		return report.CheckJSON(w, res)
	case "junit":
		return report.CheckJUnit(w, res)
	}
	return report.CheckText(w, res, report.TextOptions{Color: report.ColorFor(w)})
}

// emit renders to --out or the given writer, then turns the verdict into
// the exit error.
func (r *renderFlags) emit(w io.Writer, res *budget.Result) error {
	if r.out != "" {
		var buf bytes.Buffer
		if err := render(&buf, res, r.format); err != nil {
			return &exitError{exitEnviron, err}
		}
		if err := os.WriteFile(r.out, buf.Bytes(), 0o644); err != nil {
			return &exitError{exitEnviron, err}
		}
	} else if err := render(w, res, r.format); err != nil {
		return &exitError{exitEnviron, err}
	}
	return verdictExit(res.Verdict, r.failOn)
}

func verdictExit(v budget.Status, failOn string) error {
	switch {
	case failOn == "never":
		return nil
	case v == budget.Fail:
		return &exitError{exitBudget, errors.New("")}
	case v == budget.Warn && failOn == "warn":
		return &exitError{exitBudget, errors.New("")}
	}
	return nil
}

// pipelineExit maps pipeline errors to exit codes.
func pipelineExit(err error) error {
	var bf *check.BudgetFileError
	var env *check.EnvError
	switch {
	case errors.As(err, &bf):
		return &exitError{exitUsage, err}
	case errors.As(err, &env):
		return &exitError{exitEnviron, err}
	}
	return &exitError{exitBudget, err}
}

func newCheckCmd(stdin io.Reader, stdout, stderr io.Writer) *cobra.Command {
	var o check.Options
	var rf renderFlags
	var bind bindFlags
	var prePush, post, postRequired bool
	cmd := &cobra.Command{
		Use:   "check [--base REV] [--head REV | --staged | --pre-push] [--all] [--budget FILE] [--format text|markdown|json|junit] [--out FILE]",
		Short: "Judge the models a change touches against the budget file",
		Long: "Finds the models that changed between base and head, measures both sides from git\n" +
			"objects (never the working tree), and judges them against the budget file in force:\n" +
			"each limit is the stricter of the base's and the head's, so that a change can tighten\n" +
			"its own gate but not loosen it (--trust-head-budget is the explicit way out). A change\n" +
			"to the budget file judges again every model its changed rules concern. Base by\n" +
			"default: the pull request's base from the CI environment, else the merge-base of HEAD\n" +
			"with the default branch. --all judges every model at one revision instead.\n\n" + checkConventions + "\n\n" + conventions,
		Example: "  loadline check                       # this branch against the default branch\n" +
			"  loadline check --staged              # what git commit would record (pre-commit hook)\n" +
			"  loadline check --all --head v1.4     # every model at a release tag\n" +
			"  loadline check --base origin/main --format markdown --out report.md",
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			if err := rf.validate(); err != nil {
				return &exitError{exitUsage, err}
			}
			if post && (rf.format == "json" || rf.format == "junit") && rf.out == "" {
				// Annotations are workflow commands on standard output; a
				// machine-readable report there would be mixed with them.
				return &exitError{exitUsage, fmt.Errorf("--post writes annotations to standard output: give --out FILE for the %s report", rf.format)}
			}
			if o.Staged && (prePush || o.Head != "") {
				return &exitError{exitUsage, errors.New("--staged compares the index with HEAD; it does not combine with --head or --pre-push")}
			}
			if prePush && (o.Base != "" || o.Head != "") {
				return &exitError{exitUsage, errors.New("--pre-push takes base and head from git's pre-push input; it does not combine with --base or --head")}
			}
			if o.All && (o.Staged || prePush || o.Base != "") {
				return &exitError{exitUsage, errors.New("--all judges every model at one revision (--head, default HEAD); it does not combine with --base, --staged or --pre-push")}
			}
			if prePush {
				o.PrePush = stdin
			}
			var err error
			if o.Bindings, err = bind.parse(); err != nil {
				return &exitError{exitUsage, err}
			}
			o.Progress = stderr
			// Only the markdown report (which --post posts) shows the
			// per-layer detail.
			o.Detail = rf.format == "markdown" || post
			res, stats, err := check.Run(o)
			if err != nil {
				return pipelineExit(err)
			}
			what := "changed"
			if o.All {
				what = "judged"
			}
			fmt.Fprintln(stderr, "loadline: "+stats.Line(len(res.Models), what))
			var postErr error
			if post {
				postErr = postResult(res, stdout, stderr) // its messages are on stderr already
			}
			verdict := rf.emit(stdout, res)
			if postErr != nil && postRequired {
				// The report is written; the exit says the posting failed.
				return &exitError{exitEnviron, errors.New("")}
			}
			return verdict
		},
	}
	f := cmd.Flags()
	f.StringVar(&o.Base, "base", "", "base revision (default: the pull request's base, else the merge-base with the default branch)")
	f.StringVar(&o.Head, "head", "", "head revision (default HEAD)")
	f.BoolVar(&o.All, "all", false, "judge every model at the head revision (--head, default HEAD) against that revision's budget file, not only the changed ones")
	f.BoolVar(&o.Staged, "staged", false, "compare the staged files (the index) with HEAD, for a pre-commit hook")
	f.BoolVar(&prePush, "pre-push", false, "check the commits being pushed, read from standard input as git's pre-push hook gives them")
	f.StringVar(&o.BudgetFile, "budget", "", "budget file, a path from the repository root (default loadline.yaml)")
	f.BoolVar(&o.TrustHeadBudget, "trust-head-budget", false, "judge by the head's budget file instead of the base's")
	f.BoolVar(&o.Strict, "strict", false, "fail models that no budget rule covers (default: warn)")
	f.BoolVar(&o.NoCache, "no-cache", false, "measure everything again instead of using cached figures")
	f.BoolVar(&post, "post", false, "post the report where reviewers look (pull-request comment, job summary, annotations), detected from the CI environment")
	bind.register(cmd)
	f.BoolVar(&postRequired, "post-required", false, "with --post, exit 3 when posting fails or nothing could be posted: no CI platform detected, no token and no job summary file (default: warn and keep the verdict)")
	rf.register(cmd)
	return cmd
}

// postResult publishes the markdown report on the platform the environment
// names. Posting never changes the verdict; failures are returned for the
// caller to report.
func postResult(res *budget.Result, stdout, stderr io.Writer) error {
	poster, ok := action.DetectTo(os.Getenv, stdout)
	if !ok {
		err := errors.New("--post: no supported CI platform in the environment (GITHUB_ACTIONS or GITLAB_CI); nothing posted")
		fmt.Fprintln(stderr, "loadline:", err)
		return err
	}
	var body strings.Builder
	if err := report.CheckMarkdown(&body, res, report.MarkdownOptions{Version: version, Now: time.Now()}); err != nil {
		return err
	}
	warnings, err := poster.Post(context.Background(), body.String(), res)
	for _, w := range warnings {
		fmt.Fprintln(stderr, "loadline: warning:", display.Escape(w))
	}
	switch {
	case errors.Is(err, action.ErrNothingPosted):
		sayError(stderr, "loadline: ", err)
	case err != nil:
		sayError(stderr, "loadline: posting the report failed (the verdict stands): ", err)
	}
	return err
}

func newCompareCmd(stdout io.Writer) *cobra.Command {
	var o check.CompareOptions
	var rf renderFlags
	var bind bindFlags
	cmd := &cobra.Command{
		Use:   "compare OLD NEW [--budget FILE] [--as PATH] [--format text|markdown|json|junit]",
		Short: "Judge two model files outside git, OLD as the base and NEW as the head",
		Long:  "Measures both files and judges NEW, and its growth over OLD, by the budget rule that\nmatches PATH (--as; default NEW's path).\n\n" + checkConventions,
		Args:  cobra.ExactArgs(2),
		RunE: func(cmd *cobra.Command, args []string) error {
			if err := rf.validate(); err != nil {
				return &exitError{exitUsage, err}
			}
			o.Old, o.New = args[0], args[1]
			var err error
			if o.Bindings, err = bind.parse(); err != nil {
				return &exitError{exitUsage, err}
			}
			res, err := check.Compare(o)
			if err != nil {
				return pipelineExit(err)
			}
			return rf.emit(stdout, res)
		},
	}
	cmd.Flags().StringVar(&o.BudgetFile, "budget", "", "budget file (default ./loadline.yaml)")
	cmd.Flags().StringVar(&o.As, "as", "", "the repository path whose budget rule applies (default NEW's path)")
	cmd.Flags().BoolVar(&o.Strict, "strict", false, "fail when no budget rule covers the model")
	bind.register(cmd)
	rf.register(cmd)
	return cmd
}

func newInitCmd(stdout, stderr io.Writer) *cobra.Command {
	var headroom float64
	var force, toStdout bool
	cmd := &cobra.Command{
		Use:   "init [--headroom PCT] [--force] [--stdout]",
		Short: "Write a starter loadline.yaml for the models under the current folder",
		Long: "Finds the model files under the current folder, measures them (each with its own\n" +
			"symbolic dims bound to 1, marked to be set), and writes loadline.yaml that today's models\n" +
			"pass without a warning: each limit is today's figure plus the headroom, raised so that\n" +
			"this stays below warn_at (90%) of it. One rule per folder where its models share their\n" +
			"dims, else one per model, so that every model is covered once; a figure that needs an\n" +
			"input's value gets a commented-out limit naming it. The device's capacities are\n" +
			"commented-out placeholders to fill in, and no limit is a share of them until you do.",
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			if headroom < 0 || headroom > 1000 {
				return &exitError{exitUsage, fmt.Errorf("--headroom %g: give a percentage, e.g. 10", headroom)}
			}
			text, ms, err := check.StarterBudget(check.InitOptions{Dir: ".", Headroom: headroom / 100})
			if err != nil {
				return &exitError{exitUsage, err}
			}
			if _, err := budget.Parse("loadline.yaml", []byte(text)); err != nil {
				return &exitError{exitEnviron, fmt.Errorf("the starter budget does not parse (a loadline bug): %w", err)}
			}
			if toStdout {
				_, err := io.WriteString(stdout, text)
				return err
			}
			if _, err := os.Stat(check.DefaultBudgetFile); err == nil && !force {
				return &exitError{exitUsage, fmt.Errorf("%s exists; use --force to replace it or --stdout to print the starter", check.DefaultBudgetFile)}
			}
			if err := os.WriteFile(check.DefaultBudgetFile, []byte(text), 0o644); err != nil {
				return &exitError{exitEnviron, err}
			}
			fmt.Fprintf(stderr, "wrote %s for %d model(s); set the device capacities, then commit it\n", check.DefaultBudgetFile, len(ms))
			return nil
		},
	}
	cmd.Flags().Float64Var(&headroom, "headroom", 10, "percent added to today's figures for the starter limits")
	cmd.Flags().BoolVar(&force, "force", false, "replace an existing loadline.yaml")
	cmd.Flags().BoolVar(&toStdout, "stdout", false, "print the starter instead of writing loadline.yaml")
	return cmd
}

// hookBinary is how the hook names loadline: "loadline", looked up on
// PATH when the hook runs, when the running binary is the one PATH finds
// (so an upgrade or a move keeps the hook working); else the running
// binary's absolute path.
func hookBinary() string {
	self, err := os.Executable()
	if err != nil {
		return "loadline"
	}
	onPath, err := exec.LookPath("loadline")
	if err != nil {
		return self
	}
	a, aerr := os.Stat(self)
	b, berr := os.Stat(onPath)
	if aerr == nil && berr == nil && os.SameFile(a, b) {
		return "loadline"
	}
	return self
}

// hookExit maps hook install and uninstall errors to exit codes: the
// environment's (a hooks folder that cannot be made or written) exit 3,
// the rest (a foreign hook in the way, an unknown stage) are usage errors.
func hookExit(err error) error {
	var env *check.EnvError
	if errors.As(err, &env) {
		return &exitError{exitEnviron, err}
	}
	return &exitError{exitUsage, err}
}

func newHookCmd(stdout io.Writer) *cobra.Command {
	hook := &cobra.Command{
		Use:   "hook install|uninstall [--stage pre-commit|pre-push]",
		Short: "Install or remove the git hook that runs loadline check",
	}
	var o check.HookOptions
	install := &cobra.Command{
		Use:   "install [--stage pre-commit|pre-push] [--chain | --force]",
		Short: "Install the hook (honours core.hooksPath)",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			r, err := check.OpenRepo(".")
			if err != nil {
				return pipelineExit(err)
			}
			o.Binary = hookBinary()
			p, err := r.InstallHook(o)
			if err != nil {
				return hookExit(err)
			}
			fmt.Fprintln(stdout, "installed", display.Escape(p))
			return nil
		},
	}
	install.Flags().StringVar(&o.Stage, "stage", "pre-commit", "pre-commit (checks staged changes) or pre-push (checks the pushed commits)")
	install.Flags().BoolVar(&o.Chain, "chain", false, "keep an existing hook and run it before loadline")
	install.Flags().BoolVar(&o.Force, "force", false, "replace an existing hook loadline did not write, or install into a hooks folder that core.hooksPath in the global or system git config shares with every repository")
	var stage string
	uninstall := &cobra.Command{
		Use:   "uninstall [--stage pre-commit|pre-push]",
		Short: "Remove loadline's hook, restoring a chained one",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			r, err := check.OpenRepo(".")
			if err != nil {
				return pipelineExit(err)
			}
			p, err := r.UninstallHook(stage)
			if err != nil {
				return hookExit(err)
			}
			fmt.Fprintln(stdout, "removed", display.Escape(p))
			return nil
		},
	}
	uninstall.Flags().StringVar(&stage, "stage", "pre-commit", "pre-commit or pre-push")
	hook.AddCommand(install, uninstall)
	return hook
}
