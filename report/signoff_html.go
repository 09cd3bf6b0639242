package report

import (
	"fmt"
	"html"
	"io"
	"strconv"
	"strings"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/internal/display"
)

// SignoffOptions choose what the sign-off renderers write.
type SignoffOptions struct {
	// Version is the tool version named in the header and footer.
	Version string
}

// signoffCSS styles the page for screen and print: one device per printed
// page, status always in words (colour only repeats it), and charts that
// keep their lines when printed in grey.
const signoffCSS = `
body{font:14px/1.45 system-ui,-apple-system,"Segoe UI",Roboto,sans-serif;color:#1a1a1a;max-width:980px;margin:24px auto;padding:0 16px}
h1{font-size:24px;margin:0 0 4px}h2{font-size:19px;margin:28px 0 8px;border-bottom:1px solid #bbb}h3{font-size:15px;margin:18px 0 6px}
table{border-collapse:collapse;margin:6px 0 12px;width:100%}th,td{border:1px solid #ccc;padding:3px 6px;text-align:left;vertical-align:top}
th{background:#f2f2f2}td.num{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
.meta th{width:210px}
.status{font-weight:700;white-space:nowrap}.s-fail{color:#a40000}.s-warn{color:#8a5a00}.s-waived{color:#444}.s-pass{color:#1b6e20}
.verdict{font-size:18px;padding:8px 12px;border:2px solid #888;display:inline-block;margin:8px 0}
.soon{background:#fff3cd}.expired{background:#f8d7da}
.missing{border-left:4px solid #888;padding:4px 10px;background:#f6f6f6}
.caution{font-size:12px;color:#444}
code{font:12px ui-monospace,SFMono-Regular,Menlo,monospace;word-break:break-all}
svg{max-width:100%;height:auto;display:block;margin:6px 0}figure{margin:10px 0 18px;break-inside:avoid}figcaption{font-weight:600;font-size:13px}
svg .axis{stroke:#333}svg .grid{stroke:#ddd}svg .tick,svg .legend{font:11px sans-serif;fill:#333}
svg .limit{stroke:#a40000;stroke-width:2;stroke-dasharray:8 4}svg .limit-label{font:11px sans-serif;fill:#a40000}
svg .model-limit{stroke-width:1;stroke-dasharray:2 2;opacity:.8}svg .bar-bg{fill:#f2f2f2;stroke:#999}
svg .profile{fill:#0072B2;fill-opacity:.35;stroke:#0072B2}svg .peak{fill:#a40000}
.sign td{height:36px}
@media print{body{max-width:none;margin:0}section.device,section.break{break-before:page}.verdict{border-width:1px}}
`

// SignoffHTML writes the release sign-off report as one self-contained
// HTML page: no script, no request at view time, charts as inline SVG with
// their figures in words, a printed page per device.
func SignoffHTML(w io.Writer, s *budget.Signoff, opt SignoffOptions) error {
	s = display.Copy(s) // paths and names from outside, escaped
	v := newSignoffView(s)
	var b strings.Builder
	e := html.EscapeString
	rev := revisionText(s.Revision)
	b.WriteString("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n")
	b.WriteString(`<meta name="viewport" content="width=device-width, initial-scale=1">` + "\n")
	fmt.Fprintf(&b, "<title>Release sign-off: %s</title>\n<style>%s</style>\n</head>\n<body>\n", e(rev), signoffCSS)

	// Header: enough to reproduce the report.
	fmt.Fprintf(&b, "<header>\n<h1>Release sign-off: %s</h1>\n", e(rev))
	fmt.Fprintf(&b, "<p class=\"verdict\">Overall verdict: <span class=\"status %s\">%s</span> — %s</p>\n",
		statusClass(v.verdict), statusWord(v.verdict), e(signoffSummary(v)))
	b.WriteString("<table class=\"meta\">\n")
	meta := [][2]string{
		{"Revision", rev},
		{"Commit", s.Revision.Commit},
		{"Commit date", signoffDate(s.Date)},
		{"Budget file", s.BudgetFile + " (blob " + orDash(s.BudgetBlob) + ")"},
		{"Analyzer version", orDash(s.AnalyzerVersion)},
		{"Tool", toolName(opt.Version)},
		{"Releases compared", releasesText(s)},
	}
	for _, kv := range meta {
		fmt.Fprintf(&b, "<tr><th scope=\"row\">%s</th><td><code>%s</code></td></tr>\n", e(kv[0]), e(kv[1]))
	}
	b.WriteString("</table>\n")
	if len(s.Missing) > 0 {
		fmt.Fprintf(&b, "<p class=\"missing\"><strong>Not in this report:</strong> %s</p>\n", e(missingLine(s)))
	}
	b.WriteString("</header>\n")

	// Devices at a glance.
	b.WriteString("<section>\n<h2>Devices</h2>\n<table>\n<thead><tr><th>Device</th><th>RAM</th><th>Flash</th><th>Weights in</th><th>Models</th><th>Verdict</th></tr></thead>\n<tbody>\n")
	for _, d := range v.devices {
		fmt.Fprintf(&b, "<tr><td><a href=\"#device-%s\">%s</a></td><td class=\"num\">%s</td><td class=\"num\">%s</td><td>%s</td><td>%s</td><td class=\"status %s\">%s</td></tr>\n",
			e(anchor(d.cap.Name)), e(d.cap.Name), e(capacityText(d.cap.RAM, budget.MetricRAM)), e(capacityText(d.cap.Flash, budget.MetricFlash)),
			e(d.cap.Weights), e(deviceSummary(d)), statusClass(d.verdict), statusWord(d.verdict))
	}
	if len(v.devices) == 0 {
		b.WriteString("<tr><td colspan=\"6\">The budget file names no device.</td></tr>\n")
	}
	b.WriteString("</tbody>\n</table>\n</section>\n")

	for di, d := range v.devices {
		writeDeviceHTML(&b, v, di, d)
	}

	writeWaiversHTML(&b, v)
	writeOthersHTML(&b, v)
	writeChangesHTML(&b, v)
	writeProfilesHTML(&b, v)
	writeReleasesHTML(&b, v)
	if len(v.problems) > 0 {
		b.WriteString("<section>\n<h2>Problems in the budget file</h2>\n<ul>\n")
		for _, f := range v.problems {
			fmt.Fprintf(&b, "<li><span class=\"status %s\">%s</span> %s</li>\n", statusClass(f.level), statusWord(f.level), e(f.text))
		}
		b.WriteString("</ul>\n</section>\n")
	}

	b.WriteString("<section class=\"break\">\n<h2>Sign-off</h2>\n<p>By signing, each person states that they have read this report for the revision above.</p>\n")
	b.WriteString("<table class=\"sign\">\n<thead><tr><th>Role</th><th>Name</th><th>Date</th><th>Signature</th></tr></thead>\n<tbody>\n")
	for _, role := range []string{"Model owner", "Firmware owner", "Release manager"} {
		fmt.Fprintf(&b, "<tr><td>%s</td><td></td><td></td><td></td></tr>\n", role)
	}
	b.WriteString("</tbody>\n</table>\n</section>\n")
	fmt.Fprintf(&b, "<footer>\n<p class=\"caution\">%s</p>\n</footer>\n</body>\n</html>\n", e(signoffCaution(opt.Version)))
	_, err := io.WriteString(w, b.String())
	return err
}

func writeDeviceHTML(b *strings.Builder, v *signoffView, di int, d deviceView) {
	e := html.EscapeString
	fmt.Fprintf(b, "<section class=\"device\" id=\"device-%s\">\n<h2>Device %s: <span class=\"status %s\">%s</span></h2>\n",
		e(anchor(d.cap.Name)), e(d.cap.Name), statusClass(d.verdict), statusWord(d.verdict))
	fmt.Fprintf(b, "<p>Capacity: RAM %s, flash %s; weights in %s. %s.</p>\n",
		e(capacityText(d.cap.RAM, budget.MetricRAM)), e(capacityText(d.cap.Flash, budget.MetricFlash)), e(d.cap.Weights), e(capitalise(deviceSummary(d))))
	if len(d.models) == 0 {
		b.WriteString("<p>No model at this revision is budgeted for this device.</p>\n</section>\n")
		return
	}
	b.WriteString("<table>\n<thead><tr><th>Model</th><th>Status</th><th>RAM</th><th>limit</th><th>Flash</th><th>limit</th><th>MACs</th><th>limit</th><th>Params</th><th>Headroom</th></tr></thead>\n<tbody>\n")
	for _, m := range d.models {
		r := rowOf(m)
		fmt.Fprintf(b, "<tr><td><code>%s</code></td><td class=\"status %s\">%s</td><td class=\"num\">%s</td><td class=\"num\">%s</td><td class=\"num\">%s</td><td class=\"num\">%s</td><td class=\"num\">%s</td><td class=\"num\">%s</td><td class=\"num\">%s</td><td>%s</td></tr>\n",
			e(r.path), statusClass(m.Status), r.status, e(r.ram), e(r.ramLimit), e(r.flash), e(r.flashLimit), e(r.macs), e(r.macsLimit), e(r.params), e(r.headroom))
		if r.reason != "" && m.Status != budget.Pass {
			fmt.Fprintf(b, "<tr><td></td><td colspan=\"9\">%s</td></tr>\n", e(r.reason))
		}
	}
	b.WriteString("</tbody>\n</table>\n")
	if rows := timeRows(d); len(rows) > 0 {
		b.WriteString("<h3>Time and energy on the device's target</h3>\n<table>\n<thead><tr><th>Model</th><th>Target</th><th>Latency</th><th>Energy</th><th>Operators the runtime lacks</th></tr></thead>\n<tbody>\n")
		for _, r := range rows {
			fmt.Fprintf(b, "<tr><td><code>%s</code></td><td>%s</td><td class=\"num\">%s</td><td class=\"num\">%s</td><td>%s</td></tr>\n", e(r[0]), e(r[1]), e(r[2]), e(r[3]), e(r[4]))
		}
		b.WriteString("</tbody>\n</table>\n<p class=\"caution\">Estimates from a calibrated cost model, not measurements; measure on the device before release.</p>\n")
	}
	if t := d.totals; t != nil {
		fmt.Fprintf(b, "<h3>The device as a whole: <span class=\"status %s\">%s</span></h3>\n<p>%s.</p>\n", statusClass(t.Status), statusWord(t.Status), e(deviceHeadline(t)))
		if rows := totalsRows(t); len(rows) > 0 {
			b.WriteString("<table>\n<thead><tr><th>Total</th><th>Value</th><th>Limit</th><th>Headroom</th><th>Status</th><th>Reason</th></tr></thead>\n<tbody>\n")
			for _, r := range rows {
				fmt.Fprintf(b, "<tr><td>%s</td><td class=\"num\">%s</td><td class=\"num\">%s</td><td class=\"num\">%s</td><td class=\"status %s\">%s</td><td>%s</td></tr>\n",
					e(r[0]), e(r[1]), e(r[2]), e(r[3]), statusClass(budget.Status(strings.ToLower(r[4]))), e(r[4]), e(r[5]))
			}
			b.WriteString("</tbody>\n</table>\n")
		}
		b.WriteString("<ul>\n")
		for _, l := range totalsLines(t) {
			fmt.Fprintf(b, "<li>%s</li>\n", e(l))
		}
		b.WriteString("</ul>\n")
	}
	b.WriteString("<h3>Across releases</h3>\n")
	for ti, t := range d.trends {
		id := fmt.Sprintf("trend-%d-%d", di, ti)
		title := fmt.Sprintf("%s of each model on %s, by release", metricTitle(t.metric), d.cap.Name)
		fmt.Fprintf(b, "<figure>\n<figcaption>%s</figcaption>\n%s</figure>\n", e(title), lineChart(id, title, v.labels, t))
	}
	b.WriteString("<h3>Share of the device</h3>\n")
	for si, sh := range d.shares {
		id := fmt.Sprintf("share-%d-%d", di, si)
		title := fmt.Sprintf("%s of %s by model", metricTitle(sh.metric), d.cap.Name)
		fmt.Fprintf(b, "<figure>\n<figcaption>%s</figcaption>\n%s</figure>\n", e(title), shareBar(id, title, sh))
	}
	b.WriteString("</section>\n")
}

func writeWaiversHTML(b *strings.Builder, v *signoffView) {
	e := html.EscapeString
	b.WriteString("<section class=\"break\">\n<h2>Waivers in force</h2>\n")
	if len(v.waivers) == 0 {
		b.WriteString("<p>No waiver is in force.</p>\n</section>\n")
		return
	}
	fmt.Fprintf(b, "<p>Counted from the revision's date; those expiring within %d days are marked.</p>\n", expirySoonDays)
	b.WriteString("<table>\n<thead><tr><th>Model</th><th>Metric</th><th>Until</th><th>Expiry</th><th>Reason</th></tr></thead>\n<tbody>\n")
	for _, w := range v.waivers {
		class := ""
		switch {
		case w.days < 0:
			class = ` class="expired"`
		case w.soon:
			class = ` class="soon"`
		}
		fmt.Fprintf(b, "<tr%s><td><code>%s</code></td><td>%s</td><td>%s</td><td>%s</td><td>%s</td></tr>\n",
			class, e(w.w.Path), e(w.w.Metric), w.w.Until.Format("2006-01-02"), e(w.when()), e(w.w.Reason))
	}
	b.WriteString("</tbody>\n</table>\n</section>\n")
}

func writeOthersHTML(b *strings.Builder, v *signoffView) {
	e := html.EscapeString
	list := func(title, why string, ms []*budget.ModelResult) {
		if len(ms) == 0 {
			return
		}
		fmt.Fprintf(b, "<h3>%s</h3>\n<p>%s</p>\n<ul>\n", e(title), e(why))
		for _, m := range ms {
			fmt.Fprintf(b, "<li><code>%s</code>: %s</li>\n", e(m.Path), e(modelNote(m)))
		}
		b.WriteString("</ul>\n")
	}
	if len(v.unbudgeted)+len(v.unmeasured)+len(v.unassigned) == 0 {
		return
	}
	b.WriteString("<section>\n<h2>Models outside the device budgets</h2>\n")
	list("Not measured", "These models could not be measured; nothing about them is signed off.", v.unmeasured)
	list("Unbudgeted", "No rule of the budget file matches these models.", v.unbudgeted)
	list("Budgeted without a device", "Their rule names no device, so no capacity applies to them.", v.unassigned)
	b.WriteString("</section>\n")
}

func writeChangesHTML(b *strings.Builder, v *signoffView) {
	e := html.EscapeString
	b.WriteString("<section>\n")
	if v.previous == "" {
		b.WriteString("<h2>Changes since the previous release</h2>\n<p>No earlier release could be read, so there is nothing to compare with.</p>\n</section>\n")
		return
	}
	fmt.Fprintf(b, "<h2>Changes since %s</h2>\n", e(v.previous))
	b.WriteString("<table>\n<thead><tr><th>Model</th><th>Change</th><th>Figures that moved</th></tr></thead>\n<tbody>\n")
	for _, c := range v.changes {
		var ds []string
		for _, d := range c.deltas {
			ds = append(ds, deltaText(d))
		}
		fmt.Fprintf(b, "<tr><td><code>%s</code></td><td>%s</td><td>%s</td></tr>\n", e(c.path), c.kind, e(orDash(strings.Join(ds, "; "))))
	}
	b.WriteString("</tbody>\n</table>\n</section>\n")
}

func writeProfilesHTML(b *strings.Builder, v *signoffView) {
	e := html.EscapeString
	if len(v.profiles) == 0 {
		return
	}
	b.WriteString("<section class=\"break\">\n<h2>Memory profiles of the models closest to their limits</h2>\n")
	b.WriteString("<p>Live activation bytes at each step of the schedule (graph view), the peak marked.</p>\n")
	for i, m := range v.profiles {
		fmt.Fprintf(b, "<h3><code>%s</code> (%s)</h3>\n", e(m.Path), e(rowOf(m).headroom))
		var limit *int64
		if c := limitCheck(m, budget.MetricArena); c != nil {
			limit = c.Limit
		}
		b.WriteString(profileChart(fmt.Sprintf("profile-%d", i), "Live activation memory of "+m.Path+" by step", budget.MetricArena, m.Detail.LiveBytes, m.Detail.PeakStep, limit))
	}
	b.WriteString("</section>\n")
}

func writeReleasesHTML(b *strings.Builder, v *signoffView) {
	e := html.EscapeString
	b.WriteString("<section>\n<h2>Releases compared</h2>\n")
	if len(v.s.Releases) == 0 {
		b.WriteString("<p>No earlier release was found.</p>\n</section>\n")
		return
	}
	b.WriteString("<table>\n<thead><tr><th>Release</th><th>Commit</th><th>Date</th><th>Verdict then</th><th>Models</th></tr></thead>\n<tbody>\n")
	for _, r := range v.s.Releases {
		verdictCell, models := "not read: "+r.Error, none
		class := ""
		if r.Result != nil && r.Error == "" {
			vd := verdict(r.Result)
			verdictCell, class = statusWord(vd), " class=\"status "+statusClass(vd)+"\""
			models = strconv.Itoa(len(r.Result.Models))
		}
		fmt.Fprintf(b, "<tr><td>%s</td><td><code>%s</code></td><td>%s</td><td%s>%s</td><td class=\"num\">%s</td></tr>\n",
			e(r.Tag), e(shortCommit(r.Commit)), e(signoffDate(r.Date)), class, e(verdictCell), models)
	}
	b.WriteString("</tbody>\n</table>\n</section>\n")
}

// statusClass is the CSS class that colours a status; the word is always
// printed too.
func statusClass(s budget.Status) string {
	switch s {
	case budget.Fail:
		return "s-fail"
	case budget.Warn:
		return "s-warn"
	case budget.Waived:
		return "s-waived"
	}
	return "s-pass"
}

// anchor makes a device name safe as a fragment identifier.
func anchor(name string) string {
	var b strings.Builder
	for _, r := range name {
		if r >= 'a' && r <= 'z' || r >= 'A' && r <= 'Z' || r >= '0' && r <= '9' || r == '-' || r == '_' {
			b.WriteRune(r)
		} else {
			b.WriteByte('_')
		}
	}
	return b.String()
}

// signoffSummary is the verdict's sentence.
func signoffSummary(v *signoffView) string {
	cur := v.s.Current
	if cur == nil {
		return "no models were judged"
	}
	s := summary(cur)
	var failing []string
	for _, d := range v.devices {
		if d.verdict == budget.Fail {
			failing = append(failing, d.cap.Name)
		}
	}
	if len(failing) > 0 {
		s += "; devices over budget: " + strings.Join(failing, ", ")
	}
	return s
}

// releasesText lists the releases compared, oldest first.
func releasesText(s *budget.Signoff) string {
	if len(s.Releases) == 0 {
		return "none"
	}
	tags := make([]string, len(s.Releases))
	for i, r := range s.Releases {
		tags[i] = r.Tag
	}
	return strings.Join(tags, ", ")
}

func toolName(version string) string {
	if version == "" {
		return "loadline (development build)"
	}
	return "loadline " + version
}

func orDash(s string) string {
	if s == "" {
		return none
	}
	return s
}

// signoffCaution is the report's closing caution, the same in every form.
func signoffCaution(version string) string {
	return toolName(version) + ". Figures are static estimates from the model files at the revision above, " +
		"judged against the budget file at that revision; they are no substitute for measuring on the device, " +
		"with its runtime, before release. Where a device is part of a medical, automotive or otherwise " +
		"safety-related product, the team's own verification rules and the applicable regulations decide. " +
		"Each figure (ram, flash, MACs, headroom, …) is defined in loadline's README, section Conventions, and in loadline --help."
}
