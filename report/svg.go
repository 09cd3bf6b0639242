package report

import (
	"fmt"
	"html"
	"math"
	"strconv"
	"strings"

	"github.com/loadline/loadline/budget"
)

// Charts of the sign-off report, as inline SVG. They are our own small
// code rather than a charting library's: the report must be one file that
// needs no script and no network to read, print the same bytes for the
// same figures (a library's layout and fonts change between versions), and
// carry its numbers in the markup, where a screen reader (title, desc) and
// a test (data-value) can read them. Three kinds are needed, each a few
// dozen lines: lines across releases, a stacked bar of shares, and a live
// memory profile.
//
// Every mark that stands for a figure carries it in a data-value attribute
// and in words in a <title>; series differ by marker shape and dash as
// well as by colour, so the chart reads in grey.

// palette is the Okabe–Ito set of colours that colour-blind readers can
// tell apart.
var palette = []string{"#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00", "#F0E442", "#000000"}

// dashes pair with the palette so that lines differ without colour.
var dashes = []string{"", "6 3", "2 3", "8 3 2 3", "4 4", "1 2", "10 4", "3 6"}

const (
	chartW      = 640
	chartH      = 260
	marginLeft  = 78
	marginRight = 16
	marginTop   = 16
	marginBot   = 40
)

// lineChart draws one metric of several models across the trend's points,
// with the device's capacity as a limit line when there is one.
func lineChart(id, title string, labels []string, t trend) string {
	var b strings.Builder
	top := int64(0)
	var desc []string
	for _, s := range t.series {
		var vals []string
		for i, v := range s.values {
			if v != nil {
				top = max(top, *v)
				vals = append(vals, labels[i]+" "+Figure(t.metric, *v))
			}
		}
		if s.limit != nil {
			top = max(top, *s.limit)
		}
		if len(vals) == 0 {
			vals = append(vals, "no figures")
		}
		desc = append(desc, s.model+": "+strings.Join(vals, ", "))
	}
	if t.capacity != nil {
		top = max(top, *t.capacity)
		desc = append(desc, "device capacity "+Figure(t.metric, *t.capacity))
	}
	yMax, ticks := axisScale(t.metric, top)
	plotW := float64(chartW - marginLeft - marginRight)
	plotH := float64(chartH - marginTop - marginBot)
	x := func(i int) float64 {
		if len(labels) <= 1 {
			return marginLeft + plotW/2
		}
		return marginLeft + plotW*float64(i)/float64(len(labels)-1)
	}
	y := func(v int64) float64 { return marginTop + plotH*(1-float64(v)/float64(yMax)) }

	legendH := 16 * len(t.series)
	openSVGSized(&b, id, title, strings.Join(desc, "; ")+".", chartH+legendH)
	axes(&b, t.metric, ticks, yMax, plotW, plotH)
	for si, s := range t.series {
		col, dash := palette[si%len(palette)], dashes[si%len(dashes)]
		ly := float64(chartH + 16*si + 4)
		fmt.Fprintf(&b, `<line x1="%d" x2="%d" y1="%.1f" y2="%.1f" stroke="%s" stroke-width="2" stroke-dasharray="%s"/>`+"\n", marginLeft, marginLeft+24, ly, ly, col, dash)
		legendMarker(&b, si, float64(marginLeft+12), ly, col)
		label := clip(s.model, 70)
		if s.limit != nil {
			label += " (dotted line: its limit, " + Figure(t.metric, *s.limit) + ")"
		}
		fmt.Fprintf(&b, `<text x="%d" y="%.1f" class="legend">%s</text>`+"\n", marginLeft+32, ly+4, html.EscapeString(label))
	}
	for i, l := range labels {
		fmt.Fprintf(&b, `<text x="%.1f" y="%d" text-anchor="middle" class="tick">%s</text>`+"\n", x(i), chartH-marginBot+16, html.EscapeString(clip(l, 14)))
	}
	if t.capacity != nil {
		yy := y(*t.capacity)
		fmt.Fprintf(&b, `<line x1="%d" x2="%d" y1="%.1f" y2="%.1f" class="limit" data-value="%d"><title>device capacity %s</title></line>`+"\n",
			marginLeft, chartW-marginRight, yy, yy, *t.capacity, html.EscapeString(Figure(t.metric, *t.capacity)))
		fmt.Fprintf(&b, `<text x="%d" y="%.1f" text-anchor="end" class="limit-label">capacity %s</text>`+"\n", chartW-marginRight, yy-4, html.EscapeString(Figure(t.metric, *t.capacity)))
	}
	for si, s := range t.series {
		col, dash := palette[si%len(palette)], dashes[si%len(dashes)]
		if s.limit != nil {
			yy := y(*s.limit)
			fmt.Fprintf(&b, `<line x1="%d" x2="%d" y1="%.1f" y2="%.1f" stroke="%s" class="model-limit" data-value="%d"><title>%s limit %s</title></line>`+"\n",
				marginLeft, chartW-marginRight, yy, yy, col, *s.limit, html.EscapeString(s.model), html.EscapeString(Figure(t.metric, *s.limit)))
		}
		var pts []string
		flush := func() {
			if len(pts) > 1 {
				fmt.Fprintf(&b, `<polyline fill="none" stroke="%s" stroke-width="2" stroke-dasharray="%s" points="%s"/>`+"\n", col, dash, strings.Join(pts, " "))
			}
			pts = pts[:0]
		}
		for i, v := range s.values {
			if v == nil {
				flush()
				continue
			}
			pts = append(pts, fmt.Sprintf("%.1f,%.1f", x(i), y(*v)))
		}
		flush()
		for i, v := range s.values {
			if v != nil {
				marker(&b, si, x(i), y(*v), col, *v, s.model+" at "+labels[i]+": "+Figure(t.metric, *v))
			}
		}
	}
	b.WriteString("</svg>\n")
	return b.String()
}

// shareBar draws each model's part of a device's capacity as one stacked
// bar; without a capacity the bar is the models' sum.
func shareBar(id, title string, sh share) string {
	var b strings.Builder
	total := int64(0)
	for _, p := range sh.parts {
		total += p.value
	}
	whole := total
	if sh.capacity != nil && *sh.capacity > 0 {
		whole = max(whole, *sh.capacity)
	}
	var desc []string
	for _, p := range sh.parts {
		d := p.model + " " + Figure(sh.metric, p.value)
		if sh.capacity != nil && *sh.capacity > 0 {
			d += " (" + percent(p.value, *sh.capacity, false) + " of capacity)"
		}
		desc = append(desc, d)
	}
	if sh.capacity != nil {
		desc = append(desc, "capacity "+Figure(sh.metric, *sh.capacity))
	} else {
		desc = append(desc, "the device gives no capacity; the bar is the models' sum")
	}
	const h = 40
	rowH := 16
	height := h + rowH*len(sh.parts) + 8
	fmt.Fprintf(&b, `<svg xmlns="http://www.w3.org/2000/svg" role="img" id="%s" viewBox="0 0 %d %d" width="%d" height="%d" aria-labelledby="%s-t %s-d">`+"\n",
		id, chartW, height, chartW, height, id, id)
	fmt.Fprintf(&b, `<title id="%s-t">%s</title><desc id="%s-d">%s</desc>`+"\n", id, html.EscapeString(title), id, html.EscapeString(strings.Join(desc, "; ")+"."))
	barW := float64(chartW - marginLeft - marginRight)
	fmt.Fprintf(&b, `<rect x="%d" y="8" width="%.1f" height="22" class="bar-bg"/>`+"\n", marginLeft, barW)
	fmt.Fprintf(&b, `<text x="%d" y="24" text-anchor="end" class="tick">%s</text>`+"\n", marginLeft-6, html.EscapeString(sh.metric))
	xAt := float64(marginLeft)
	for i, p := range sh.parts {
		w := 0.0
		if whole > 0 {
			w = barW * float64(p.value) / float64(whole)
		}
		col := palette[i%len(palette)]
		fmt.Fprintf(&b, `<rect x="%.1f" y="8" width="%.1f" height="22" fill="%s" class="share" data-value="%d"><title>%s: %s</title></rect>`+"\n",
			xAt, w, col, p.value, html.EscapeString(p.model), html.EscapeString(Figure(sh.metric, p.value)))
		xAt += w
		ly := h + rowH*i + 4
		fmt.Fprintf(&b, `<rect x="%d" y="%d" width="10" height="10" fill="%s"/><text x="%d" y="%d" class="legend">%s — %s</text>`+"\n",
			marginLeft, ly, col, marginLeft+16, ly+9, html.EscapeString(clip(p.model, 60)), html.EscapeString(shareText(sh, p)))
	}
	if sh.capacity != nil && *sh.capacity > 0 {
		fmt.Fprintf(&b, `<line x1="%.1f" x2="%.1f" y1="4" y2="34" class="limit" data-value="%d"><title>capacity %s</title></line>`+"\n",
			marginLeft+barW*float64(*sh.capacity)/float64(whole), marginLeft+barW*float64(*sh.capacity)/float64(whole), *sh.capacity, html.EscapeString(Figure(sh.metric, *sh.capacity)))
	}
	b.WriteString("</svg>\n")
	return b.String()
}

// shareText is one model's part in words.
func shareText(sh share, p sharePart) string {
	s := Figure(sh.metric, p.value)
	if sh.capacity != nil && *sh.capacity > 0 {
		s += ", " + percent(p.value, *sh.capacity, false) + " of the device"
	}
	return s
}

// profileChart draws live activation bytes at each step of a model's
// schedule, with the peak marked and the model's limit when it has one.
func profileChart(id, title, metric string, live []int64, peak int, limit *int64) string {
	var b strings.Builder
	top := int64(0)
	for _, v := range live {
		top = max(top, v)
	}
	if limit != nil {
		top = max(top, *limit)
	}
	yMax, ticks := axisScale(budgetBytes, top)
	plotW := float64(chartW - marginLeft - marginRight)
	plotH := float64(chartH - marginTop - marginBot)
	n := len(live)
	x := func(i int) float64 {
		if n <= 1 {
			return marginLeft
		}
		return marginLeft + plotW*float64(i)/float64(n-1)
	}
	y := func(v int64) float64 { return marginTop + plotH*(1-float64(v)/float64(yMax)) }
	desc := fmt.Sprintf("%d steps; peak %s at step %d", n, Bytes(peakOf(live, peak)), peak)
	if limit != nil {
		desc += "; limit " + Figure(metric, *limit)
	}
	openSVG(&b, id, title, desc+".")
	axes(&b, budgetBytes, ticks, yMax, plotW, plotH)
	fmt.Fprintf(&b, `<text x="%.1f" y="%d" text-anchor="middle" class="tick">step (operator, in schedule order)</text>`+"\n", marginLeft+plotW/2, chartH-marginBot+30)
	var pts []string
	pts = append(pts, fmt.Sprintf("%.1f,%.1f", x(0), y(0)))
	for i, v := range live {
		pts = append(pts, fmt.Sprintf("%.1f,%.1f", x(i), y(v)))
	}
	pts = append(pts, fmt.Sprintf("%.1f,%.1f", x(n-1), y(0)))
	fmt.Fprintf(&b, `<polygon class="profile" points="%s" data-values="%s"/>`+"\n", strings.Join(pts, " "), joinInts(live))
	if peak >= 0 && peak < n {
		fmt.Fprintf(&b, `<circle cx="%.1f" cy="%.1f" r="4" class="peak" data-value="%d"><title>peak %s at step %d</title></circle>`+"\n",
			x(peak), y(live[peak]), live[peak], html.EscapeString(Bytes(live[peak])), peak)
	}
	if limit != nil {
		yy := y(*limit)
		fmt.Fprintf(&b, `<line x1="%d" x2="%d" y1="%.1f" y2="%.1f" class="limit" data-value="%d"><title>%s limit %s</title></line>`+"\n",
			marginLeft, chartW-marginRight, yy, yy, *limit, metric, html.EscapeString(Figure(metric, *limit)))
	}
	b.WriteString("</svg>\n")
	return b.String()
}

// budgetBytes labels a byte axis.
const budgetBytes = "bytes"

func peakOf(live []int64, peak int) int64 {
	if peak >= 0 && peak < len(live) {
		return live[peak]
	}
	return 0
}

func openSVG(b *strings.Builder, id, title, desc string) { openSVGSized(b, id, title, desc, chartH) }

func openSVGSized(b *strings.Builder, id, title, desc string, height int) {
	fmt.Fprintf(b, `<svg xmlns="http://www.w3.org/2000/svg" role="img" id="%s" viewBox="0 0 %d %d" width="%d" height="%d" aria-labelledby="%s-t %s-d">`+"\n",
		id, chartW, height, chartW, height, id, id)
	fmt.Fprintf(b, `<title id="%s-t">%s</title><desc id="%s-d">%s</desc>`+"\n", id, html.EscapeString(title), id, html.EscapeString(desc))
}

// axes draws the y axis with its ticks, labelled in the metric's unit.
func axes(b *strings.Builder, metric string, ticks []int64, yMax int64, plotW, plotH float64) {
	fmt.Fprintf(b, `<line x1="%d" x2="%d" y1="%.1f" y2="%.1f" class="axis"/>`+"\n", marginLeft, marginLeft, float64(marginTop), marginTop+plotH)
	fmt.Fprintf(b, `<line x1="%d" x2="%.1f" y1="%.1f" y2="%.1f" class="axis"/>`+"\n", marginLeft, marginLeft+plotW, marginTop+plotH, marginTop+plotH)
	for _, t := range ticks {
		yy := marginTop + plotH*(1-float64(t)/float64(yMax))
		label := Figure(metric, t)
		if metric == budgetBytes {
			label = Bytes(t)
		}
		fmt.Fprintf(b, `<line x1="%d" x2="%.1f" y1="%.1f" y2="%.1f" class="grid"/>`+"\n", marginLeft, marginLeft+plotW, yy, yy)
		fmt.Fprintf(b, `<text x="%d" y="%.1f" text-anchor="end" class="tick">%s</text>`+"\n", marginLeft-6, yy+4, html.EscapeString(label))
	}
}

// marker draws one point, its shape chosen by the series so that series
// differ without colour.
func marker(b *strings.Builder, si int, x, y float64, col string, v int64, title string) {
	shapeOf(b, si, x, y, fmt.Sprintf(`fill="%s" class="point" data-value="%d"`, col, v), "<title>"+html.EscapeString(title)+"</title>")
}

// shapeOf draws series si's marker shape at (x, y) with the given
// attributes and content; an empty content closes the element at once.
func shapeOf(b *strings.Builder, si int, x, y float64, attrs, content string) {
	var tag, geom string
	switch si % 4 {
	case 0:
		tag, geom = "circle", fmt.Sprintf(`cx="%.1f" cy="%.1f" r="4"`, x, y)
	case 1:
		tag, geom = "rect", fmt.Sprintf(`x="%.1f" y="%.1f" width="8" height="8"`, x-4, y-4)
	case 2:
		tag, geom = "polygon", fmt.Sprintf(`points="%.1f,%.1f %.1f,%.1f %.1f,%.1f"`, x, y-5, x-5, y+4, x+5, y+4)
	default:
		tag, geom = "polygon", fmt.Sprintf(`points="%.1f,%.1f %.1f,%.1f %.1f,%.1f %.1f,%.1f"`, x, y-5, x+5, y, x, y+5, x-5, y)
	}
	if content == "" {
		fmt.Fprintf(b, "<%s %s %s/>\n", tag, geom, attrs)
		return
	}
	fmt.Fprintf(b, "<%s %s %s>%s</%s>\n", tag, geom, attrs, content, tag)
}

// axisScale is niceScale in the metric's own unit: byte axes tick at round
// KiB or MiB, as their labels print, counts at round decimal values.
func axisScale(metric string, top int64) (int64, []int64) {
	if metric != budgetBytes && !budget.IsBytes(metric) || top < 1024 {
		return niceScale(top)
	}
	unit := int64(1024)
	for top/unit >= 1024 && unit <= 1<<50 {
		unit *= 1024
	}
	t, ticks := niceScale((top + unit - 1) / unit)
	for i := range ticks {
		ticks[i] *= unit
	}
	return t * unit, ticks
}

// legendMarker is marker's shape without a figure, for the legend.
func legendMarker(b *strings.Builder, si int, x, y float64, col string) {
	shapeOf(b, si, x, y, fmt.Sprintf(`fill="%s"`, col), "")
}

// niceScale picks the axis top and 4–5 round ticks for values up to top.
func niceScale(top int64) (int64, []int64) {
	if top <= 0 {
		return 1, []int64{0, 1}
	}
	raw := float64(top) / 4
	mag := math.Pow(10, math.Floor(math.Log10(raw)))
	step := mag
	for _, f := range []float64{1, 2, 2.5, 5, 10} {
		if f*mag >= raw {
			step = f * mag
			break
		}
	}
	s := int64(math.Ceil(step))
	if s < 1 {
		s = 1
	}
	var ticks []int64
	v := int64(0)
	for ; v < top; v += s {
		ticks = append(ticks, v)
	}
	ticks = append(ticks, v)
	return v, ticks
}

func joinInts(v []int64) string {
	s := make([]string, len(v))
	for i, x := range v {
		s[i] = strconv.FormatInt(x, 10)
	}
	return strings.Join(s, " ")
}

// clip shortens a label for an axis, keeping its end (a file's name).
func clip(s string, n int) string {
	r := []rune(s)
	if len(r) <= n {
		return s
	}
	return "…" + string(r[len(r)-n+1:])
}
