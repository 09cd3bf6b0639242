package action

import (
	"fmt"
	"io"
	"os"
	"slices"
	"strings"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/internal/display"
)

// Annotation is one workflow annotation: a message GitHub shows on a file
// in the pull request's diff and on the run's page.
type Annotation struct {
	Level   string // "error" or "warning"
	File    string // path from the repository root
	Title   string
	Message string
}

// String renders the annotation as the workflow command GitHub documents:
//
//	::error file={name},title={title}::{message}
//
// with the message's %, CR and LF escaped, and the properties' also ':' and
// ','.
func (a Annotation) String() string {
	var props []string
	if a.File != "" {
		props = append(props, "file="+escapeProperty(a.File))
	}
	if a.Title != "" {
		props = append(props, "title="+escapeProperty(a.Title))
	}
	s := "::" + a.Level
	if len(props) > 0 {
		s += " " + strings.Join(props, ",")
	}
	return s + "::" + escapeData(a.Message)
}

// escapeData escapes a workflow command's message, as the Actions toolkit
// does (toolkit/packages/core/src/command.ts, escapeData).
func escapeData(s string) string {
	return strings.NewReplacer("%", "%25", "\r", "%0D", "\n", "%0A").Replace(s)
}

// escapeProperty escapes a workflow command's property value (escapeProperty
// in the same file).
func escapeProperty(s string) string {
	return strings.NewReplacer("%", "%25", "\r", "%0D", "\n", "%0A", ":", "%3A", ",", "%2C").Replace(s)
}

// Annotations returns one annotation for each model that fails or warns:
// an error for a failure or a model that could not be measured, a warning
// for a warning. One per model, not per check: GitHub shows at most ten of
// each level per step. The message lists the checks behind the verdict.
func Annotations(res *budget.Result) []Annotation {
	if res == nil {
		return nil
	}
	// The file property is the path as git names it, for GitHub to find
	// the file; the title and message are for people and show every
	// outside string escaped. A path that needs escaping (a control
	// character, "##[" or "##vso[", a leading "::") gets no file property: its
	// annotation is on the run, naming the path escaped in the message.
	shown := display.Copy(res)
	var out []Annotation
	for i := range shown.Models {
		m := &shown.Models[i]
		var level string
		switch {
		case m.Error != "" || m.Status == budget.Fail:
			level = "error"
		case m.Status == budget.Warn:
			level = "warning"
		default:
			continue
		}
		var metrics, lines []string
		if m.Error != "" {
			lines = append(lines, "cannot measure: "+m.Error)
		}
		for _, c := range m.Checks {
			if c.Status != budget.Fail && c.Status != budget.Warn {
				continue
			}
			if !slices.Contains(metrics, c.Metric) {
				metrics = append(metrics, c.Metric)
			}
			lines = append(lines, checkLine(c))
		}
		if m.Unbudgeted {
			lines = append(lines, "no rule of the budget file matches this model")
		}
		title := "loadline: " + string(m.Status)
		switch {
		case m.Error != "" && len(metrics) == 0:
			title = "loadline: cannot measure"
		case len(metrics) > 0:
			title += " (" + strings.Join(metrics, ", ") + ")"
		}
		if len(lines) == 0 {
			lines = append(lines, "budget verdict: "+string(m.Status))
		}
		file := res.Models[i].Path
		if file != m.Path {
			file = ""
			lines = append([]string{m.Path + ":"}, lines...)
		}
		out = append(out, Annotation{Level: level, File: file, Title: title, Message: strings.Join(lines, "\n")})
	}
	return out
}

// checkLine is one check in words: its reason when evaluation gave one,
// else the figures.
func checkLine(c budget.Check) string {
	s := string(c.Status) + " " + c.Metric + ": "
	if c.Reason != "" {
		return s + c.Reason
	}
	s += fmt.Sprint(c.Value)
	if c.Limit != nil {
		s += fmt.Sprintf(" (limit %d)", *c.Limit)
	}
	if c.Base != nil {
		s += fmt.Sprintf(" (base %d)", *c.Base)
	}
	return s
}

// WriteAnnotations writes the annotations for res to w, one workflow
// command a line; in a workflow w is the step's standard output.
func WriteAnnotations(w io.Writer, res *budget.Result) error {
	for _, a := range Annotations(res) {
		if _, err := io.WriteString(w, a.String()+"\n"); err != nil {
			return err
		}
	}
	return nil
}

// AppendStepSummary appends markdown to the job summary file a step's
// GITHUB_STEP_SUMMARY names, as GitHub documents: the file is appended to
// (earlier steps' summaries stay), and GitHub renders it as markdown. A
// body over the 1 MiB a step may upload is cut as FitBody cuts.
func AppendStepSummary(path, markdown string) error {
	if !strings.HasSuffix(markdown, "\n") {
		markdown += "\n"
	}
	markdown = fitBody(markdown, StepSummaryLimit, func(s string) int { return len(s) }, "see the job log")
	f, err := os.OpenFile(path, os.O_APPEND|os.O_CREATE|os.O_WRONLY, 0o644)
	if err != nil {
		return fmt.Errorf("job summary: %w", err)
	}
	if _, err := f.WriteString(markdown); err != nil {
		f.Close()
		return fmt.Errorf("job summary %s: %w", path, err)
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("job summary %s: %w", path, err)
	}
	return nil
}

// AppendOutputs appends step outputs to the file GITHUB_OUTPUT names, one
// name=value a line; a value with a line break uses the documented
// name<<DELIMITER form.
func AppendOutputs(path string, kv [][2]string) error {
	var b strings.Builder
	for _, p := range kv {
		name, value := p[0], p[1]
		if strings.ContainsAny(value, "\r\n") {
			delim := "LOADLINE_EOF"
			for strings.Contains(value, delim) {
				delim += "_"
			}
			fmt.Fprintf(&b, "%s<<%s\n%s\n%s\n", name, delim, value, delim)
			continue
		}
		fmt.Fprintf(&b, "%s=%s\n", name, value)
	}
	f, err := os.OpenFile(path, os.O_APPEND|os.O_CREATE|os.O_WRONLY, 0o644)
	if err != nil {
		return fmt.Errorf("step outputs: %w", err)
	}
	if _, err := f.WriteString(b.String()); err != nil {
		f.Close()
		return fmt.Errorf("step outputs %s: %w", path, err)
	}
	return f.Close()
}
