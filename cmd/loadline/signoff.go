package main

import (
	"bytes"
	"fmt"
	"io"
	"os"
	"path"

	"github.com/spf13/cobra"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/check"
	"github.com/loadline/loadline/report"
)

// renderSignoff writes a sign-off in the chosen format.
func renderSignoff(w io.Writer, s *budget.Signoff, format string) error {
	opt := report.SignoffOptions{Version: version}
	switch format {
	case "markdown":
		return report.SignoffMarkdown(w, s, opt)
	case "json":
		return report.SignoffJSON(w, s, opt)
	}
	return report.SignoffHTML(w, s, opt)
}

func newSignoffCmd(stdout, stderr io.Writer) *cobra.Command {
	var o check.SignoffOptions
	var format, out, failOn string
	cmd := &cobra.Command{
		Use:   "signoff [--rev REV] [--since REV | --releases PATTERN] [--last N] [--format html|markdown|json] [--out FILE]",
		Short: "Write the release sign-off report: every model on every device, and the trend across releases",
		Long: "Measures every model at REV (default HEAD) from git objects and judges it against REV's\n" +
			"budget file; reads the same figures at the earlier releases (tags that look like versions,\n" +
			"or those matching --releases, the newest --last of them; or the one revision --since names),\n" +
			"each judged by its own budget file, from the cache where a blob was measured before. The\n" +
			"report gives a verdict per device and overall, each model's figures, limits and headroom,\n" +
			"the waivers in force and those expiring within 30 days of REV's date, unbudgeted models,\n" +
			"what changed since the previous release, trend charts, and the memory profile of the models\n" +
			"closest to their limits. HTML is one self-contained page (no script, no network), printable\n" +
			"with a page per device; markdown and JSON (loadline.signoff/v1) carry the same facts.\n" +
			"Every fact comes from the repository (dates are commit dates), so the same REV gives the\n" +
			"same report byte for byte. Exits 1 when the overall verdict is fail (see --fail-on).\n\n" +
			checkConventions + "\n\n" + conventions,
		Example: "  loadline signoff --out signoff.html\n" +
			"  loadline signoff --rev v2.4.0 --releases 'v2.*' --format markdown\n" +
			"  loadline signoff --since v2.3.0 --format json --out signoff.json",
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			switch format {
			case "html", "markdown", "json":
			default:
				return &exitError{exitUsage, fmt.Errorf("--format %q: choose html, markdown or json", format)}
			}
			switch failOn {
			case "fail", "warn", "never":
			default:
				return &exitError{exitUsage, fmt.Errorf("--fail-on %q: choose fail, warn or never", failOn)}
			}
			if o.Since != "" && o.Releases != "" {
				return &exitError{exitUsage, fmt.Errorf("--since names one revision to compare with; it does not combine with --releases")}
			}
			if _, err := path.Match(o.Releases, ""); err != nil {
				return &exitError{exitUsage, fmt.Errorf("--releases %q: %w", o.Releases, err)}
			}
			if o.Last < 0 {
				return &exitError{exitUsage, fmt.Errorf("--last %d: give a positive number of releases", o.Last)}
			}
			o.Progress = stderr
			s, stats, err := check.Signoff(o)
			if err != nil {
				return pipelineExit(err)
			}
			fmt.Fprintf(stderr, "loadline: %d model(s) at %s and %d earlier release(s); %d measured, %d from cache\n",
				len(s.Current.Models), s.Revision.Ref, len(s.Releases), stats.Measured.Load(), stats.CacheHits.Load())
			var buf bytes.Buffer
			if err := renderSignoff(&buf, s, format); err != nil {
				return &exitError{exitEnviron, err}
			}
			if out != "" {
				if err := os.WriteFile(out, buf.Bytes(), 0o644); err != nil {
					return &exitError{exitEnviron, err}
				}
				fmt.Fprintf(stderr, "loadline: sign-off report written to %s\n", out)
			} else if _, err := stdout.Write(buf.Bytes()); err != nil {
				return &exitError{exitEnviron, err}
			}
			return verdictExit(s.Current.Verdict, failOn)
		},
	}
	f := cmd.Flags()
	f.StringVar(&o.Rev, "rev", "", "the revision signed off (default HEAD)")
	f.StringVar(&o.Since, "since", "", "compare with this one earlier revision instead of the release tags")
	f.StringVar(&o.Releases, "releases", "", "glob of the earlier release tags to compare with (default: tags that look like versions, v1.2.3)")
	f.IntVar(&o.Last, "last", check.DefaultReleases, "how many of the newest earlier releases to read")
	f.StringVar(&o.BudgetFile, "budget", "", "budget file, a path from the repository root (default loadline.yaml)")
	f.BoolVar(&o.Strict, "strict", false, "fail models that no budget rule covers (default: warn)")
	f.BoolVar(&o.NoCache, "no-cache", false, "measure everything again instead of using cached figures")
	f.StringVar(&format, "format", "html", "report format: html, markdown or json")
	f.StringVarP(&out, "out", "o", "", "write the report to FILE instead of standard output")
	f.StringVar(&failOn, "fail-on", "fail", "which overall verdict exits 1: fail, warn or never")
	return cmd
}
