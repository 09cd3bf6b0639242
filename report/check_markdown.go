package report

import (
	"bytes"
	"fmt"
	"html"
	"io"
	"math"
	"sort"
	"strings"
	"time"
	"unicode/utf8"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/internal/display"
)

// MarkdownLimit is the most characters CheckMarkdown writes by default: a
// pull-request comment holds 65,536, and this leaves room for what the
// caller wraps around it.
const MarkdownLimit = 60000

// MarkdownOptions choose what CheckMarkdown writes.
type MarkdownOptions struct {
	// Version is the tool version named in the footer.
	Version string
	// MaxChars caps the document's length in bytes (so also in
	// characters); 0 means MarkdownLimit. Long results are shortened model
	// by model, with a count of what was left out.
	MaxChars int
	// Now, when set, adds the days left to each waiver's expiry.
	Now time.Time
}

// How much of a large result the markdown shows before it counts instead;
// halved until the document fits MaxChars.
const (
	mdTableModels  = 30 // models in the table
	mdPassModels   = 10 // of which within budget, when others need attention
	mdDetailModels = 10 // models with a collapsible section
	mdListItems    = 50 // rows of the budget-change, waiver and problem lists
	mdPeakRows     = 12 // rows of the tensors live at the judged view's peak
	mdTopLayers    = 5  // layers in each top-layers table
	sparkColumns   = 60 // columns of the live-memory picture
)

// CheckMarkdown writes the result for a pull request: a headline verdict,
// one table of the changed models (worst first), what needs attention,
// a collapsible section per model with its heaviest layers and its live
// memory over the schedule, the budget-file changes, the waivers in force,
// problems, and a footer on how the figures were computed. The document
// stays within opt.MaxChars however many models the result holds.
func CheckMarkdown(w io.Writer, r *budget.Result, opt MarkdownOptions) error {
	r = display.Copy(r) // paths and names from outside, escaped
	limit := opt.MaxChars
	if limit <= 0 {
		limit = MarkdownLimit
	}
	lim := mdLimits{models: mdTableModels, passes: mdPassModels, details: mdDetailModels, items: mdListItems}
	var doc []byte
	for {
		doc = renderMarkdown(r, opt, lim)
		if len(doc) <= limit || lim == (mdLimits{}) {
			break
		}
		lim = lim.halve()
	}
	if len(doc) > limit {
		doc = cutMarkdown(doc, footer(opt), limit)
	}
	_, err := w.Write(doc)
	return err
}

type mdLimits struct{ models, passes, details, items int }

func (l mdLimits) halve() mdLimits {
	return mdLimits{l.models / 2, l.passes / 2, l.details / 2, l.items / 2}
}

// cutMarkdown is the last resort when even the shortest rendering is too
// long (thousands of budget problems, say): keep whole lines up to the
// limit, then say so, then the footer.
func cutMarkdown(doc []byte, foot string, limit int) []byte {
	const note = "\n\n… the rest of this report was cut to fit a comment; run `loadline check` for all of it.\n"
	keep := limit - len(note) - len(foot) - 32 // room to close a fence and a section
	if keep < 0 {
		keep = 0
	}
	if keep > len(doc) {
		keep = len(doc)
	}
	body := doc[:keep]
	if i := bytes.LastIndexByte(body, '\n'); i >= 0 {
		body = body[:i]
	} else {
		body = body[:0]
	}
	// Close a code span or collapsible section the cut left open.
	var b bytes.Buffer
	b.Write(body)
	if bytes.Count(body, []byte("```"))%2 == 1 {
		b.WriteString("\n```")
	}
	if open := bytes.Count(body, []byte("<details>")) - bytes.Count(body, []byte("</details>")); open > 0 {
		b.WriteString("\n</details>")
	}
	b.WriteString(note)
	b.WriteString(foot)
	out := b.Bytes()
	if len(out) > limit { // only if the footer alone does not fit
		out = out[:limit]
		for !utf8.Valid(out) {
			out = out[:len(out)-1]
		}
	}
	return out
}

func renderMarkdown(r *budget.Result, opt MarkdownOptions, lim mdLimits) []byte {
	var b bytes.Buffer
	v := verdict(r)

	headline := map[budget.Status]string{
		budget.Fail: "✖ loadline: over budget",
		budget.Warn: "▲ loadline: within budget, close to a limit",
	}[v]
	if headline == "" {
		headline = "✔ loadline: within budget"
	}
	fmt.Fprintf(&b, "## %s\n\n", headline)
	if r.Audit {
		fmt.Fprintf(&b, "%s. Every model at %s.\n", capitalise(summary(r)), mdCode(revisionText(r.Head)))
	} else {
		fmt.Fprintf(&b, "%s. Head %s against base %s.\n",
			capitalise(summary(r)), mdCode(revisionText(r.Head)), mdCode(revisionText(r.Base)))
	}

	// The table: models that changed or need attention, worst first.
	var shown, removed []*budget.ModelResult
	var hidden tally
	passes := 0 // models within budget in the table
	models := ordered(r.Models)
	// Within budget, the tightest first: when only some fit, those are
	// the ones a reviewer wants to see.
	sort.SliceStable(models, func(i, j int) bool {
		ri, rj := rank(models[i].Status), rank(models[j].Status)
		if ri != rj || ri != rank(budget.Pass) {
			return ri < rj
		}
		return tightness(models[i]) < tightness(models[j])
	})
	for _, m := range models {
		pass := m.Status == budget.Pass || m.Status == ""
		switch {
		case m.Change == budget.Unchanged && pass && !r.Audit:
			continue // counted in the headline, not news for this change
		case m.Change == budget.Removed && len(m.Checks) == 0 && m.Error == "":
			removed = append(removed, m)
		case len(shown) < lim.models && (!pass || passes < lim.passes || passes == len(shown)):
			// Models within budget take few places when others need the
			// reader's attention, all there are when none does.
			shown = append(shown, m)
			if pass {
				passes++
			}
		default:
			hidden.add(m)
		}
	}
	if len(shown) > 0 {
		b.WriteString("\n| model | figure | base | head | delta | limit | headroom | status |\n")
		b.WriteString("| :--- | :--- | ---: | ---: | ---: | ---: | ---: | :--- |\n")
		for _, m := range shown {
			name := mdCode(m.Path)
			var sub []string
			if m.Device != "" {
				sub = append(sub, mdText(m.Device))
			}
			if n := changeNote(m); n != "" && !r.Audit {
				sub = append(sub, mdText(n))
			}
			if len(sub) > 0 {
				name += "<br><sub>" + strings.Join(sub, " · ") + "</sub>"
			}
			if len(m.Checks) == 0 || m.Error != "" {
				fmt.Fprintf(&b, "| %s | %s | | | | | | %s |\n", name, mdText(shortNote(m)), mdStatus(m.Status))
				continue
			}
			for i := range m.Checks {
				c := &m.Checks[i]
				rc := cells(m, c)
				cell := ""
				if i == 0 {
					cell = name
				}
				fmt.Fprintf(&b, "| %s | %s | %s | %s | %s | %s | %s | %s |\n", cell,
					rc.metric, rc.base, rc.head, rc.delta, rc.limit, rc.headroom, judged(c, mdStatus(c.Status)))
			}
		}
	}
	switch {
	case hidden.total > 0 && hidden.total == hidden.pass:
		fmt.Fprintf(&b, "\n… and %s, each with more headroom than those listed.\n", strings.Join(hidden.more(), ", "))
	case hidden.total > 0:
		fmt.Fprintf(&b, "\n… and %s, not listed here.\n", strings.Join(hidden.more(), ", "))
	}
	if len(removed) > 0 {
		names := make([]string, 0, len(removed))
		for i, m := range removed {
			if i == lim.items {
				names = append(names, fmt.Sprintf("and %d more", len(removed)-i))
				break
			}
			names = append(names, mdCode(m.Path))
		}
		fmt.Fprintf(&b, "\nRemoved, so nothing to check: %s.\n", strings.Join(names, ", "))
	}

	// What needs attention: the reason behind every check that did not
	// simply pass, for the models in the table.
	var notes []string
	for _, m := range shown {
		if modelLine(m) {
			notes = append(notes, fmt.Sprintf("- %s %s: %s", mdStatus(m.Status), mdCode(m.Path), mdText(modelNote(m))))
			if m.Error != "" {
				continue
			}
		}
		for i := range m.Checks {
			c := &m.Checks[i]
			if c.Status == budget.Pass || c.Status == "" {
				continue
			}
			notes = append(notes, fmt.Sprintf("- %s %s: %s", mdStatus(c.Status), mdCode(m.Path), mdText(checkText(c))))
		}
		if len(m.Checks) > 0 {
			for _, n := range m.Notes {
				notes = append(notes, fmt.Sprintf("- note on %s: %s", mdCode(m.Path), mdText(oneLine(n))))
			}
		}
	}
	if len(notes) > 0 {
		b.WriteString("\n### What needs attention\n\n")
		writeCapped(&b, notes, lim.items)
	}

	if len(r.Devices) > 0 {
		b.WriteString("\n### Devices as a whole\n")
		for i := range r.Devices {
			writeDeviceMarkdown(&b, &r.Devices[i], lim.items)
		}
	}

	// One collapsible section per model that brought per-layer detail.
	details := 0
	for _, m := range shown {
		if m.Detail == nil || details == lim.details {
			continue
		}
		if s := detailSection(m); s != "" {
			if details == 0 {
				b.WriteString("\n### Where the compute and memory go\n")
			}
			b.WriteString("\n" + s)
			details++
		}
	}

	if len(r.BudgetChanges) > 0 {
		b.WriteString("\n### Budget file changes\n\n")
		loosened := 0
		for _, c := range r.BudgetChanges {
			if c.Loosened {
				loosened++
			}
		}
		if loosened > 0 {
			fmt.Fprintf(&b, "This change loosens %s of the budget file; a looser budget deserves the same review as the model change itself.\n\n",
				plural(loosened, "entry", "entries"))
		}
		b.WriteString("| key | base | head | gate |\n| :--- | :--- | :--- | :--- |\n")
		var rows []string
		for _, c := range r.BudgetChanges {
			flag := "not loosened"
			if c.Loosened {
				flag = "**loosened**"
			}
			key := mdCode(c.Key)
			if c.Path != "" {
				key += "<br><sub>" + mdCode(c.Path) + "</sub>"
			}
			rows = append(rows, fmt.Sprintf("| %s | %s | %s | %s |", key, mdText(orNone(c.Old)), mdText(orNone(c.New)), flag))
		}
		writeCapped(&b, rows, lim.items)
	}

	if len(r.Waivers) > 0 {
		b.WriteString("\n### Waivers in force\n\n| model | metric | until | reason |\n| :--- | :--- | :--- | :--- |\n")
		var rows []string
		for i := range r.Waivers {
			wv := &r.Waivers[i]
			until := wv.Until.Format("2006-01-02")
			if !opt.Now.IsZero() {
				until += " (" + daysLeft(opt.Now, wv.Until) + ")"
			}
			rows = append(rows, fmt.Sprintf("| %s | %s | %s | %s |", mdCode(wv.Path), mdText(wv.Scope()), until, mdText(oneLine(wv.Reason))))
		}
		writeCapped(&b, rows, lim.items)
	}

	if len(r.Notes) > 0 {
		b.WriteString("\n### Notes\n\n")
		var rows []string
		for _, n := range r.Notes {
			rows = append(rows, "- "+mdText(oneLine(n)))
		}
		writeCapped(&b, rows, lim.items)
	}

	if fs := findings(r); len(fs) > 0 {
		b.WriteString("\n### Problems in the budget file\n\n")
		var rows []string
		for _, f := range fs {
			rows = append(rows, "- "+mdStatus(f.level)+" "+mdText(f.text))
		}
		writeCapped(&b, rows, lim.items)
	}

	b.WriteString("\n" + footer(opt))
	return b.Bytes()
}

// more says what a truncation left out: "2 more models over budget,
// 143 more models within budget".
func (t tally) more() []string {
	var out []string
	add := func(n int, what string) {
		if n > 0 {
			out = append(out, plural(n, "more model", "more models")+" "+what)
		}
	}
	add(t.unmeasured, "that could not be measured")
	add(t.fail, "over budget")
	add(t.unbudgeted, "matched by no budget rule")
	add(t.warn, "near a limit")
	add(t.waived, "over budget but waived")
	add(t.pass, "within budget")
	return out
}

// tightness is the smallest share of an allowance a model has left, over
// its checks with a known figure: headroom over the limit for a limit
// check, over the allowed growth for a growth check (whose headroom is
// always a small share of its limit). +Inf when no check has a limit.
func tightness(m *budget.ModelResult) float64 {
	t := math.Inf(1)
	for i := range m.Checks {
		c := &m.Checks[i]
		if c.Limit == nil {
			continue
		}
		if m.Head != nil {
			if _, unknown := m.Head.Unknown[c.Metric]; unknown {
				continue
			}
		}
		allowance := *c.Limit
		if c.Kind == "growth" && c.Base != nil {
			allowance -= *c.Base
		}
		if allowance > 0 {
			t = math.Min(t, float64(*c.Limit-c.Value)/float64(allowance))
		}
	}
	return t
}

// writeCapped writes lines, at most limit of them, then a count of the rest.
func writeCapped(b *bytes.Buffer, lines []string, limit int) {
	for i, l := range lines {
		if i == limit {
			fmt.Fprintf(b, "\n… and %d more, not listed here.\n", len(lines)-i)
			return
		}
		b.WriteString(l + "\n")
	}
}

func footer(opt MarkdownOptions) string {
	v := "loadline (development build)"
	if opt.Version != "" {
		v = "loadline " + opt.Version
	}
	return "---\n<sub>" + html.EscapeString(v) + ". " +
		"Figures are static estimates from the model file, not measurements on the device. " +
		"MACs: multiply-accumulates of convolution, matrix-product and recurrent layers. " +
		"FLOPs: 2 × MACs (a 1-GMAC model is a 2-GFLOP model), plus one per output element of elementwise, activation and normalisation layers, " +
		"one per window element per output element of pooling, one per input element of reductions. " +
		"Arena: activation memory as an embedded runtime allocates it, planned greedy-by-size over tensor lifetimes after fusing activations and batch norm, aliasing views and folding quantize/dequantize pairs. " +
		"Headroom: limit minus head figure (with its share of an absolute limit); a growth check's limit is the largest head figure its growth allows.</sub>\n"
}

func daysLeft(now, until time.Time) string {
	d := int(math.Ceil(until.Sub(now).Hours() / 24))
	switch {
	case d < 0:
		return "expired"
	case d == 0:
		return "expires today"
	case d == 1:
		return "1 day left"
	}
	return fmt.Sprintf("%d days left", d)
}

// detailSection is one model's collapsible section: its heaviest layers by
// MACs and by memory, and a one-line picture of live memory over the steps.
func detailSection(m *budget.ModelResult) string {
	d := m.Detail
	var b strings.Builder
	if m.Head != nil && m.Head.Target != nil && len(m.Head.Target.Slowest) > 0 {
		tg := m.Head.Target
		total := int64(math.Round(tg.LatencyMS * 1e6))
		fmt.Fprintf(&b, "Where the time goes on %s (estimated), of %s in all:\n\n", mdText(tg.Name), Figure(budget.MetricLatency, total))
		b.WriteString("| node | op | latency | share |\n| :--- | :--- | ---: | ---: |\n")
		for i, l := range tg.Slowest {
			if i == mdTopLayers {
				break
			}
			share := none
			if total > 0 {
				share = percent(l.Value, total, false)
			}
			fmt.Fprintf(&b, "| %s | %s | %s | %s |\n", mdCode(l.Node), mdText(l.Op), Figure(budget.MetricLatency, l.Value), share)
		}
		b.WriteString("\n")
	}
	if len(d.TopMACs) > 0 {
		total := int64(0)
		if m.Head != nil {
			total = m.Head.MACs
		}
		if total > 0 {
			fmt.Fprintf(&b, "Heaviest layers by MACs, of %s in all:\n\n", Count(total))
		} else {
			b.WriteString("Heaviest layers by MACs:\n\n")
		}
		b.WriteString("| node | op | MACs | share |\n| :--- | :--- | ---: | ---: |\n")
		for i, l := range d.TopMACs {
			if i == mdTopLayers {
				break
			}
			share := none
			if total > 0 {
				share = percent(l.Value, total, false)
			}
			fmt.Fprintf(&b, "| %s | %s | %s | %s |\n", mdCode(l.Node), mdText(l.Op), Count(l.Value), share)
		}
	}
	if len(d.TopMemory) > 0 {
		if b.Len() > 0 {
			b.WriteString("\n")
		}
		b.WriteString("Largest activations (the tensors each node writes, by their own bytes):\n\n| node | op | bytes |\n| :--- | :--- | ---: |\n")
		for i, l := range d.TopMemory {
			if i == mdTopLayers {
				break
			}
			fmt.Fprintf(&b, "| %s | %s | %s |\n", mdCode(l.Node), mdText(l.Op), Bytes(l.Value))
		}
	}
	views := d.Views
	if len(views) == 0 && len(d.LiveBytes) > 0 {
		views = []budget.DetailView{{Name: "graph", LiveBytes: d.LiveBytes, PeakStep: d.PeakStep}}
	}
	for _, v := range views {
		pic := spark(v.LiveBytes, v.PeakStep)
		if pic == "" {
			continue
		}
		if b.Len() > 0 {
			b.WriteString("\n")
		}
		n := len(v.LiveBytes)
		per := ""
		if n > sparkColumns {
			per = fmt.Sprintf(", each column the largest of about %d steps", (n+sparkColumns-1)/sparkColumns)
		}
		judged := ""
		if v.Judged {
			judged = ", the view ram is judged on"
		}
		fmt.Fprintf(&b, "Live activation memory over the %d steps of the schedule (%s view%s%s):\n\n```text\n%s\n```\n", n, mdText(v.Name), judged, per, pic)
		if v.Judged && len(v.AtPeak) > 0 {
			fmt.Fprintf(&b, "\nLive at the %s peak (step %d, %s):\n\n| tensor | bytes | offset |\n| :--- | ---: | ---: |\n", mdText(v.Name), v.PeakStep, Bytes(v.PeakBytes))
			for i, t := range v.AtPeak {
				if i == mdPeakRows {
					fmt.Fprintf(&b, "| … %d more | | |\n", len(v.AtPeak)-i)
					break
				}
				off := none
				if t.Offset >= 0 {
					off = fmt.Sprint(t.Offset)
				}
				fmt.Fprintf(&b, "| %s | %s | %s |\n", mdCode(t.Name), Bytes(t.Bytes), off)
			}
		}
	}
	if b.Len() == 0 {
		return ""
	}
	what := "heaviest layers"
	if len(d.TopMACs) == 0 && len(d.TopMemory) == 0 {
		what = "live memory"
	} else if len(views) > 0 {
		what += " and live memory"
	}
	return "<details><summary><code>" + html.EscapeString(m.Path) + "</code>: " + what + "</summary>\n\n" + b.String() + "\n</details>\n"
}

// spark draws live bytes per step as one line of block characters, at most
// sparkColumns wide (each column the largest value of its steps, so the
// peak survives), with a second line marking the peak's column.
func spark(live []int64, peak int) string {
	n := len(live)
	if n == 0 {
		return ""
	}
	// Trust the given peak step only if it holds the largest value.
	top := int64(0)
	for _, v := range live {
		top = max(top, v)
	}
	if peak < 0 || peak >= n || live[peak] != top {
		peak = 0
		for i, v := range live {
			if v > live[peak] {
				peak = i
			}
		}
	}
	cols := n
	if cols > sparkColumns {
		cols = sparkColumns
	}
	levels := []rune("▁▂▃▄▅▆▇█")
	var line []rune
	mark := 0
	for c := 0; c < cols; c++ {
		lo, hi := c*n/cols, (c+1)*n/cols
		var v int64
		for _, x := range live[lo:hi] {
			v = max(v, x)
		}
		if lo <= peak && peak < hi {
			mark = c
		}
		lvl := 0
		if top > 0 {
			lvl = int(math.Round(float64(v) * float64(len(levels)-1) / float64(top)))
		}
		line = append(line, levels[max(lvl, 0)])
	}
	label := fmt.Sprintf("peak %s at step %d", Bytes(live[peak]), peak)
	marker := strings.Repeat(" ", mark) + "▲ " + label
	if mark+2+len(label) > sparkColumns && mark >= len(label)+1 {
		marker = strings.Repeat(" ", mark-len(label)-1) + label + " ▲"
	}
	return string(line) + "\n" + marker
}

// mdStatus is a status as the pull request shows it; the ones that need
// action are bold.
func mdStatus(s budget.Status) string {
	switch s {
	case budget.Fail:
		return "**✖ fail**"
	case budget.Warn:
		return "**▲ warn**"
	case budget.Waived:
		return "◇ waived"
	}
	return "✔ pass"
}

// mdCode is s as an inline code span that cannot break out of a table
// cell: pipes escaped (GitHub reads \| inside a span in a table), the
// fence longer than any run of backticks inside.
func mdCode(s string) string {
	s = strings.ReplaceAll(oneLine(s), "|", `\|`)
	fence := "`"
	for strings.Contains(s, fence) {
		fence += "`"
	}
	if strings.HasPrefix(s, "`") || strings.HasSuffix(s, "`") {
		s = " " + s + " "
	}
	return fence + s + fence
}

// mdText is s as plain text in a table cell or list: markdown and HTML
// punctuation escaped, so a file name or a reason cannot start a link,
// emphasis or tag.
func mdText(s string) string {
	var b strings.Builder
	for _, r := range oneLine(s) {
		switch r {
		case '\\', '`', '*', '_', '[', ']', '|', '#', '~':
			b.WriteByte('\\')
			b.WriteRune(r)
		case '<': // '>' alone opens nothing mid-line, and every line starts with our own text
			b.WriteString("&lt;")
		case '&':
			b.WriteString("&amp;")
		default:
			b.WriteRune(r)
		}
	}
	return b.String()
}

func capitalise(s string) string {
	r, n := utf8.DecodeRuneInString(s)
	if r >= 'a' && r <= 'z' {
		return string(r-'a'+'A') + s[n:]
	}
	return s
}
