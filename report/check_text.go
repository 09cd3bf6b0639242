package report

import (
	"fmt"
	"io"
	"os"
	"strings"
	"unicode/utf8"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/internal/display"
)

// TextOptions choose how CheckText writes.
type TextOptions struct {
	// Color marks statuses with ANSI colours; ColorFor decides it for a
	// writer.
	Color bool
}

// ColorFor reports whether text written to w may carry colour: never when
// the NO_COLOR environment variable is set to anything but the empty string
// (no-color.org), otherwise only when w is a terminal (a character device).
// A writer with an Unwrap method (a buffered stream) is judged by the
// writer it wraps.
func ColorFor(w io.Writer) bool {
	if os.Getenv("NO_COLOR") != "" {
		return false
	}
	for range 8 { // a chain of wrappers, bounded
		u, ok := w.(interface{ Unwrap() io.Writer })
		if !ok {
			break
		}
		w = u.Unwrap()
	}
	f, ok := w.(*os.File)
	if !ok {
		return false
	}
	st, err := f.Stat()
	if err != nil {
		return false
	}
	return st.Mode()&os.ModeCharDevice != 0
}

// ANSI sequences, used only when TextOptions.Color is set.
const (
	ansiReset = "\x1b[0m"
	ansiBold  = "\x1b[1m"
	ansiDim   = "\x1b[2m"
)

func ansiFor(s budget.Status) string {
	switch s {
	case budget.Fail:
		return "\x1b[1;31m" // bold red
	case budget.Warn:
		return "\x1b[33m" // yellow
	case budget.Waived:
		return "\x1b[35m" // magenta
	}
	return "\x1b[32m" // green
}

// statusWord is a status as the terminal shows it; the two that need action
// are in capitals so they stand out without colour.
func statusWord(s budget.Status) string {
	switch s {
	case budget.Fail:
		return "FAIL"
	case budget.Warn:
		return "WARN"
	case budget.Waived:
		return "waived"
	case "":
		return "pass"
	}
	return string(s)
}

// CheckText writes the result for a terminal: a verdict line, one aligned
// row per check (worst models first), then the reasons behind every check
// that did not simply pass, budget-file changes, waivers in force and
// problems.
func CheckText(w io.Writer, r *budget.Result, opt TextOptions) error {
	r = display.Copy(r) // paths and names from outside, escaped
	p := &printer{w: w}
	paint := func(code, s string) string {
		if !opt.Color || code == "" || s == "" {
			return s
		}
		return code + s + ansiReset
	}
	v := verdict(r)
	p.printf("loadline: %s — %s\n", paint(ansiFor(v), statusWord(v)), summary(r))
	p.printf("%s\n", rangeText(r))

	models := ordered(r.Models)
	var removed []string
	tab := &textTable{right: []bool{false, false, true, true, true, true, true, false}}
	tab.add("model", "metric", "base", "head", "delta", "limit", "headroom", "status").paintAll(ansiBold)
	for _, m := range models {
		if len(m.Checks) == 0 && m.Error == "" && !m.Unbudgeted && m.Change == budget.Removed {
			removed = append(removed, m.Path)
			continue
		}
		// The model's path heads its first row; the rows below it say
		// which device it is judged for and how it changed.
		var sub []string
		if m.Device != "" {
			sub = append(sub, "on "+m.Device)
		}
		if n := changeNote(m); n != "" && !r.Audit {
			sub = append(sub, n)
		}
		var rows []*textRow
		if len(m.Checks) == 0 || m.Error != "" {
			row := tab.add("", none, none, none, none, none, none, statusWord(m.Status))
			row.note = shortNote(m) // the reasons below give it in full
			row.paint(7, ansiFor(m.Status))
			rows = append(rows, row)
		}
		for i := range m.Checks {
			c := &m.Checks[i]
			rc := cells(m, c)
			row := tab.add("", rc.metric, rc.base, rc.head, rc.delta, rc.limit, rc.headroom, judged(c, statusWord(c.Status)))
			row.paint(7, ansiFor(c.Status))
			rows = append(rows, row)
		}
		rows[0].cells[0] = m.Path
		if len(rows) <= len(sub) { // too few rows for the notes: fold them in
			rows[0].cells[0] += " (" + strings.Join(sub, ", ") + ")"
			sub = nil
		}
		for i, s := range sub {
			rows[i+1].cells[0] = "  " + s
			rows[i+1].paint(0, ansiDim)
		}
	}
	if len(tab.rows) > 1 {
		p.printf("\n")
		tab.write(p, paint)
	}
	if len(removed) > 0 {
		p.printf("\nremoved, nothing to check: %s\n", strings.Join(removed, ", "))
	}

	// Reasons, worst first, for every check a reader has to act on or know of.
	reasons := &textTable{indent: "  "}
	reason := func(s budget.Status, text string) {
		reasons.note(statusWord(s), text).paint(0, ansiFor(s))
	}
	for _, m := range models {
		if m.Error != "" {
			reason(budget.Fail, m.Path+": "+modelNote(m))
			continue
		}
		if modelLine(m) {
			reason(m.Status, m.Path+": "+modelNote(m))
		}
		for i := range m.Checks {
			c := &m.Checks[i]
			if c.Status == budget.Pass || c.Status == "" {
				continue
			}
			reason(c.Status, m.Path+": "+checkText(c))
		}
		if len(m.Checks) > 0 {
			for _, n := range m.Notes {
				reasons.note("note", m.Path+": "+oneLine(n))
			}
		}
	}
	if len(reasons.rows) > 0 {
		p.printf("\nreasons\n")
		reasons.write(p, paint)
	}

	for i := range r.Devices {
		d := &r.Devices[i]
		p.printf("\ndevice %s: %s\n", deviceHeadline(d), paint(ansiFor(d.Status), statusWord(d.Status)))
		dt := &textTable{indent: "  ", right: []bool{false, true, true, true, true, true, false}}
		dt.add("total", "base", "head", "delta", "limit", "headroom", "status").paintAll(ansiBold)
		for j := range d.Checks {
			c := &d.Checks[j]
			rc := deviceCells(d, c)
			dt.add(rc.metric, rc.base, rc.head, rc.delta, rc.limit, rc.headroom, statusWord(c.Status)).paint(6, ansiFor(c.Status))
		}
		if len(d.Checks) > 0 {
			dt.write(p, paint)
		}
		for j := range d.Checks {
			if c := &d.Checks[j]; c.Status != budget.Pass {
				p.printf("  %s  %s\n", paint(ansiFor(c.Status), statusWord(c.Status)), oneLine(c.Reason))
			}
		}
		for j := range d.Models {
			p.printf("  %s\n", deviceShareText(&d.Models[j]))
		}
		for j := range d.Shared {
			p.printf("  shared: %s\n", sharedText(&d.Shared[j]))
		}
		for _, n := range d.Notes {
			p.printf("  note: %s\n", oneLine(n))
		}
	}

	if len(r.BudgetChanges) > 0 {
		p.printf("\nbudget file changes\n")
		bc := &textTable{indent: "  "}
		for _, c := range r.BudgetChanges {
			flag := ""
			if c.Loosened {
				flag = "LOOSENED"
			}
			key := c.Key
			if c.Path != "" {
				key += " (" + c.Path + ")"
			}
			bc.add(key, orNone(c.Old)+" → "+orNone(c.New), flag).paint(2, ansiFor(budget.Warn))
		}
		bc.write(p, paint)
	}
	if len(r.Waivers) > 0 {
		p.printf("\nwaivers in force\n")
		for i := range r.Waivers {
			wv := &r.Waivers[i]
			p.printf("  %s %s%s\n", wv.Path, waiverText(wv), lineNote(wv.Line))
		}
	}
	if len(r.Notes) > 0 {
		p.printf("\nnotes\n")
		for _, n := range r.Notes {
			p.printf("  %s\n", oneLine(n))
		}
	}
	if fs := findings(r); len(fs) > 0 {
		p.printf("\nbudget file problems\n")
		pt := &textTable{indent: "  "}
		for _, f := range fs {
			pt.note(statusWord(f.level), f.text).paint(0, ansiFor(f.level))
		}
		pt.write(p, paint)
	}
	return p.err
}

func orNone(s string) string {
	if s == "" {
		return "(none)"
	}
	return s
}

func lineNote(line int) string {
	if line <= 0 {
		return ""
	}
	return fmt.Sprintf(" (budget file line %d)", line)
}

// printer keeps the first write error so renderers can write freely and
// report it once.
type printer struct {
	w   io.Writer
	err error
}

func (p *printer) printf(format string, args ...any) {
	if p.err != nil {
		return
	}
	_, p.err = fmt.Fprintf(p.w, format, args...)
}

// textTable aligns plain cells by their rune count and paints them only
// afterwards, so colour codes cannot upset the columns (text/tabwriter
// would count them as width).
type textTable struct {
	rows   []*textRow
	right  []bool // right-align column i
	indent string
}

type textRow struct {
	cells []string
	codes []string // ANSI code per cell, "" for none
	// note, when set, follows the first cell and takes no part in the
	// column widths: a sentence in place of figures.
	note string
}

func (t *textTable) add(cells ...string) *textRow {
	r := &textRow{cells: cells, codes: make([]string, len(cells))}
	t.rows = append(t.rows, r)
	return r
}

func (t *textTable) note(first, note string) *textRow {
	r := t.add(first)
	r.note = note
	return r
}

func (r *textRow) paint(i int, code string) { r.codes[i] = code }

func (r *textRow) paintAll(code string) {
	for i := range r.codes {
		r.codes[i] = code
	}
}

func (t *textTable) write(p *printer, paint func(code, s string) string) {
	var width []int
	for _, r := range t.rows {
		for i, c := range r.cells {
			n := utf8.RuneCountInString(c)
			if i >= len(width) {
				width = append(width, n)
			} else if n > width[i] {
				width[i] = n
			}
		}
	}
	for _, r := range t.rows {
		var b strings.Builder
		b.WriteString(t.indent)
		for i, c := range r.cells {
			if i > 0 {
				b.WriteString("  ")
			}
			pad := strings.Repeat(" ", width[i]-utf8.RuneCountInString(c))
			if i < len(t.right) && t.right[i] {
				b.WriteString(pad + paint(r.codes[i], c))
			} else {
				b.WriteString(paint(r.codes[i], c) + pad)
			}
		}
		if r.note != "" {
			b.WriteString("  " + r.note)
		}
		p.printf("%s\n", strings.TrimRight(b.String(), " "))
	}
}
