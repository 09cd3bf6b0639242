package report

import (
	"bytes"
	"fmt"
	"strings"

	"github.com/loadline/loadline/budget"
)

// What every renderer says of a device judged as a whole (budget's
// totals.go defines the totals): its headline, one row per total or period
// check in the same cells as a model's checks, each model's part, and the
// constants stored in more than one model.

// deviceHeadline names a device and how it runs its models: "doorbell
// (one-at-a-time, 3 models)".
func deviceHeadline(d *budget.DeviceResult) string {
	return fmt.Sprintf("%s (%s, %s)", d.Name, d.Runs, plural(len(d.Models), "model", "models"))
}

// deviceCells puts one device check into the cells of a check row; a
// total that could not be computed reads "unknown".
func deviceCells(d *budget.DeviceResult, c *budget.Check) row {
	m := &budget.ModelResult{Change: budget.Modified}
	if why, unknown := d.Unknown[c.Metric]; unknown && c.Kind == "total" {
		m.Head = &budget.Figures{Unknown: map[string]string{c.Metric: why}}
	}
	return cells(m, c)
}

// shareText is one model's part of its device's totals in words.
func deviceShareText(s *budget.DeviceShare) string {
	if s.Error != "" {
		return s.Path + ": could not be measured: " + oneLine(s.Error)
	}
	parts := []string{"flash " + Bytes(s.Flash), "arena " + Bytes(s.Arena)}
	if s.Persist > 0 {
		parts = append(parts, "persistent "+Bytes(s.Persist))
	}
	if s.Weights > 0 {
		parts = append(parts, "weights in RAM "+Bytes(s.Weights))
	}
	if s.EveryMS > 0 {
		every := fmt.Sprintf("every %s ms", trimFloat(s.EveryMS))
		if s.Latency > 0 {
			every += fmt.Sprintf(", latency %.1f ms = %s of the core", s.Latency, budget.FormatValue(budget.MetricLoad, int64(s.LoadPart*budget.PercentScale+0.5)))
		}
		parts = append(parts, every)
	}
	return s.Path + ": " + strings.Join(parts, ", ")
}

// sharedText is one constant stored in several models.
func sharedText(s *budget.SharedConstant) string {
	names := map[string]bool{}
	var ns []string
	for _, n := range s.Names {
		if !names[n] {
			names[n] = true
			ns = append(ns, n)
		}
	}
	return fmt.Sprintf("%s (%s) in %s", strings.Join(ns, ", "), Bytes(s.Bytes), strings.Join(s.Models, ", "))
}

func trimFloat(f float64) string {
	s := fmt.Sprintf("%.3f", f)
	s = strings.TrimRight(s, "0")
	return strings.TrimSuffix(s, ".")
}

// devicePhrase counts the devices that fail or warn, for the headline.
func devicePhrase(r *budget.Result) string {
	var fail, warn int
	for i := range r.Devices {
		switch r.Devices[i].Status {
		case budget.Fail:
			fail++
		case budget.Warn:
			warn++
		}
	}
	var out []string
	if fail > 0 {
		out = append(out, plural(fail, "device", "devices")+" over its totals")
	}
	if warn > 0 {
		out = append(out, plural(warn, "device", "devices")+" near its totals")
	}
	return strings.Join(out, ", ")
}

// writeDeviceMarkdown is one device's section of the pull-request comment:
// its totals in the table's cells, the reasons, and each model's part.
func writeDeviceMarkdown(b *bytes.Buffer, d *budget.DeviceResult, items int) {
	fmt.Fprintf(b, "\n**%s** %s\n\n", mdText(deviceHeadline(d)), mdStatus(d.Status))
	if len(d.Checks) > 0 {
		b.WriteString("| total | base | head | delta | limit | headroom | status |\n| :--- | ---: | ---: | ---: | ---: | ---: | :--- |\n")
		for i := range d.Checks {
			c := &d.Checks[i]
			rc := deviceCells(d, c)
			fmt.Fprintf(b, "| %s | %s | %s | %s | %s | %s | %s |\n", mdText(rc.metric), rc.base, rc.head, rc.delta, rc.limit, rc.headroom, mdStatus(c.Status))
		}
		b.WriteString("\n")
	}
	var lines []string
	for i := range d.Checks {
		if c := &d.Checks[i]; c.Status != budget.Pass {
			lines = append(lines, "- "+mdStatus(c.Status)+" "+mdText(oneLine(c.Reason)))
		}
	}
	for i := range d.Models {
		lines = append(lines, "- "+mdText(deviceShareText(&d.Models[i])))
	}
	for i := range d.Shared {
		lines = append(lines, "- shared: "+mdText(sharedText(&d.Shared[i])))
	}
	for _, n := range d.Notes {
		lines = append(lines, "- note: "+mdText(oneLine(n)))
	}
	writeCapped(b, lines, items)
}
