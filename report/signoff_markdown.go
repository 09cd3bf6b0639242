package report

import (
	"fmt"
	"io"
	"strconv"
	"strings"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/internal/display"
)

// SignoffMarkdown writes the release sign-off report as markdown: the same
// facts as the HTML page, with the trends as tables instead of charts.
func SignoffMarkdown(w io.Writer, s *budget.Signoff, opt SignoffOptions) error {
	s = display.Copy(s) // paths and names from outside, escaped
	v := newSignoffView(s)
	var b strings.Builder
	rev := revisionText(s.Revision)
	fmt.Fprintf(&b, "# Release sign-off: %s\n\n", mdText(rev))
	fmt.Fprintf(&b, "**Overall verdict: %s** — %s\n\n", statusWord(v.verdict), mdText(signoffSummary(v)))
	b.WriteString("| | |\n| --- | --- |\n")
	fmt.Fprintf(&b, "| Revision | %s |\n", mdText(rev))
	fmt.Fprintf(&b, "| Commit | %s |\n", mdCode(orDash(s.Revision.Commit)))
	fmt.Fprintf(&b, "| Commit date | %s |\n", signoffDate(s.Date))
	fmt.Fprintf(&b, "| Budget file | %s (blob %s) |\n", mdCode(s.BudgetFile), mdCode(orDash(s.BudgetBlob)))
	fmt.Fprintf(&b, "| Analyzer version | %s |\n", mdCode(orDash(s.AnalyzerVersion)))
	fmt.Fprintf(&b, "| Tool | %s |\n", mdText(toolName(opt.Version)))
	fmt.Fprintf(&b, "| Releases compared | %s |\n\n", mdText(releasesText(s)))
	if len(s.Missing) > 0 {
		fmt.Fprintf(&b, "> **Not in this report:** %s\n\n", mdText(missingLine(s)))
	}

	b.WriteString("## Devices\n\n| Device | RAM | Flash | Weights in | Models | Verdict |\n| --- | ---: | ---: | --- | --- | --- |\n")
	for _, d := range v.devices {
		fmt.Fprintf(&b, "| %s | %s | %s | %s | %s | %s |\n", mdText(d.cap.Name), capacityText(d.cap.RAM, budget.MetricRAM),
			capacityText(d.cap.Flash, budget.MetricFlash), mdText(d.cap.Weights), deviceSummary(d), mdStatus(d.verdict))
	}
	if len(v.devices) == 0 {
		b.WriteString("| the budget file names no device | | | | | |\n")
	}
	b.WriteString("\n")

	for _, d := range v.devices {
		fmt.Fprintf(&b, "## Device %s: %s\n\n", mdText(d.cap.Name), statusWord(d.verdict))
		fmt.Fprintf(&b, "Capacity: RAM %s, flash %s; weights in %s. %s.\n\n", capacityText(d.cap.RAM, budget.MetricRAM),
			capacityText(d.cap.Flash, budget.MetricFlash), mdText(d.cap.Weights), capitalise(deviceSummary(d)))
		if len(d.models) == 0 {
			b.WriteString("No model at this revision is budgeted for this device.\n\n")
			continue
		}
		b.WriteString("| Model | Status | RAM | limit | Flash | limit | MACs | limit | Params | Headroom |\n| --- | --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: | --- |\n")
		var reasons []string
		for _, m := range d.models {
			r := rowOf(m)
			fmt.Fprintf(&b, "| %s | %s | %s | %s | %s | %s | %s | %s | %s | %s |\n", mdCode(r.path), mdStatus(m.Status),
				r.ram, r.ramLimit, r.flash, r.flashLimit, r.macs, r.macsLimit, r.params, r.headroom)
			if r.reason != "" && m.Status != budget.Pass {
				reasons = append(reasons, "- "+mdCode(r.path)+": "+mdText(r.reason))
			}
		}
		b.WriteString("\n")
		if len(reasons) > 0 {
			b.WriteString(strings.Join(reasons, "\n") + "\n\n")
		}
		if rows := timeRows(d); len(rows) > 0 {
			b.WriteString("Time and energy on the device's target (estimates from a calibrated cost model; measure on the device before release):\n\n| Model | Target | Latency | Energy | Operators the runtime lacks |\n| --- | --- | ---: | ---: | --- |\n")
			for _, r := range rows {
				fmt.Fprintf(&b, "| %s | %s | %s | %s | %s |\n", mdCode(r[0]), mdText(r[1]), r[2], r[3], mdText(r[4]))
			}
			b.WriteString("\n")
		}
		if t := d.totals; t != nil {
			fmt.Fprintf(&b, "The device as a whole: **%s** — %s.\n\n", statusWord(t.Status), mdText(deviceHeadline(t)))
			if rows := totalsRows(t); len(rows) > 0 {
				b.WriteString("| Total | Value | Limit | Headroom | Status | Reason |\n| --- | ---: | ---: | ---: | --- | --- |\n")
				for _, r := range rows {
					fmt.Fprintf(&b, "| %s | %s | %s | %s | %s | %s |\n", mdText(r[0]), r[1], r[2], r[3], r[4], mdText(r[5]))
				}
				b.WriteString("\n")
			}
			for _, l := range totalsLines(t) {
				b.WriteString("- " + mdText(l) + "\n")
			}
			b.WriteString("\n")
		}
		for _, t := range d.trends {
			writeTrendTable(&b, v.labels, t)
		}
		for _, sh := range d.shares {
			var parts []string
			for _, p := range sh.parts {
				parts = append(parts, mdCode(p.model)+" "+shareText(sh, p))
			}
			fmt.Fprintf(&b, "Share of the device's %s (capacity %s): %s.\n\n", sh.metric, capacityText(sh.capacity, sh.metric), orDash(strings.Join(parts, "; ")))
		}
	}

	b.WriteString("## Waivers in force\n\n")
	if len(v.waivers) == 0 {
		b.WriteString("No waiver is in force.\n\n")
	} else {
		fmt.Fprintf(&b, "Counted from the revision's date; those expiring within %d days are in bold.\n\n", expirySoonDays)
		b.WriteString("| Model | Metric | Until | Expiry | Reason |\n| --- | --- | --- | --- | --- |\n")
		for _, w := range v.waivers {
			when := w.when()
			if w.soon || w.days < 0 {
				when = "**" + when + "**"
			}
			fmt.Fprintf(&b, "| %s | %s | %s | %s | %s |\n", mdCode(w.w.Path), mdText(w.w.Metric), w.w.Until.Format("2006-01-02"), when, mdText(w.w.Reason))
		}
		b.WriteString("\n")
	}

	others := func(title, why string, ms []*budget.ModelResult) {
		if len(ms) == 0 {
			return
		}
		fmt.Fprintf(&b, "### %s\n\n%s\n\n", title, why)
		for _, m := range ms {
			fmt.Fprintf(&b, "- %s: %s\n", mdCode(m.Path), mdText(modelNote(m)))
		}
		b.WriteString("\n")
	}
	if len(v.unbudgeted)+len(v.unmeasured)+len(v.unassigned) > 0 {
		b.WriteString("## Models outside the device budgets\n\n")
		others("Not measured", "These models could not be measured; nothing about them is signed off.", v.unmeasured)
		others("Unbudgeted", "No rule of the budget file matches these models.", v.unbudgeted)
		others("Budgeted without a device", "Their rule names no device, so no capacity applies to them.", v.unassigned)
	}

	if v.previous == "" {
		b.WriteString("## Changes since the previous release\n\nNo earlier release could be read, so there is nothing to compare with.\n\n")
	} else {
		fmt.Fprintf(&b, "## Changes since %s\n\n| Model | Change | Figures that moved |\n| --- | --- | --- |\n", mdText(v.previous))
		for _, c := range v.changes {
			var ds []string
			for _, d := range c.deltas {
				ds = append(ds, deltaText(d))
			}
			fmt.Fprintf(&b, "| %s | %s | %s |\n", mdCode(c.path), c.kind, orDash(strings.Join(ds, "; ")))
		}
		b.WriteString("\n")
	}

	if len(v.profiles) > 0 {
		b.WriteString("## Memory profiles of the models closest to their limits\n\nLive activation bytes at each step of the schedule (graph view); ▲ marks the peak.\n\n")
		for _, m := range v.profiles {
			fmt.Fprintf(&b, "%s (%s):\n\n```\n%s\n```\n\n", mdCode(m.Path), rowOf(m).headroom, spark(m.Detail.LiveBytes, m.Detail.PeakStep))
		}
	}

	b.WriteString("## Releases compared\n\n")
	if len(s.Releases) == 0 {
		b.WriteString("No earlier release was found.\n\n")
	} else {
		b.WriteString("| Release | Commit | Date | Verdict then | Models |\n| --- | --- | --- | --- | ---: |\n")
		for _, r := range s.Releases {
			vd, models := "not read: "+mdText(r.Error), none
			if r.Result != nil && r.Error == "" {
				vd, models = statusWord(verdict(r.Result)), strconv.Itoa(len(r.Result.Models))
			}
			fmt.Fprintf(&b, "| %s | %s | %s | %s | %s |\n", mdText(r.Tag), mdCode(shortCommit(r.Commit)), signoffDate(r.Date), vd, models)
		}
		b.WriteString("\n")
	}
	if len(v.problems) > 0 {
		b.WriteString("## Problems in the budget file\n\n")
		for _, f := range v.problems {
			fmt.Fprintf(&b, "- %s %s\n", statusWord(f.level), mdText(f.text))
		}
		b.WriteString("\n")
	}
	b.WriteString("## Sign-off\n\n| Role | Name | Date | Signature |\n| --- | --- | --- | --- |\n| Model owner | | | |\n| Firmware owner | | | |\n| Release manager | | | |\n\n")
	fmt.Fprintf(&b, "---\n<sub>%s</sub>\n", mdText(signoffCaution(opt.Version)))
	_, err := io.WriteString(w, b.String())
	return err
}

// writeTrendTable is a trend as a table: a row per model, a column per
// release.
func writeTrendTable(b *strings.Builder, labels []string, t trend) {
	fmt.Fprintf(b, "%s by release", metricTitle(t.metric))
	if t.capacity != nil {
		fmt.Fprintf(b, " (device capacity %s)", Figure(t.metric, *t.capacity))
	}
	b.WriteString(":\n\n| Model |")
	for _, l := range labels {
		b.WriteString(" " + mdText(l) + " |")
	}
	b.WriteString(" limit |\n| --- |" + strings.Repeat(" ---: |", len(labels)+1) + "\n")
	for _, s := range t.series {
		b.WriteString("| " + mdCode(s.model) + " |")
		for _, v := range s.values {
			if v == nil {
				b.WriteString(" " + none + " |")
			} else {
				b.WriteString(" " + Figure(t.metric, *v) + " |")
			}
		}
		if s.limit != nil {
			b.WriteString(" " + Figure(t.metric, *s.limit) + " |\n")
		} else {
			b.WriteString(" " + none + " |\n")
		}
	}
	b.WriteString("\n")
}
