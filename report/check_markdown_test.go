package report

import (
	"bytes"
	"fmt"
	"strings"
	"testing"
	"unicode/utf8"

	"github.com/loadline/loadline/budget"
)

// TestCheckMarkdownMany: 200 models read as a short table, worst first,
// with a count of the rest.
func TestCheckMarkdownMany(t *testing.T) {
	var b bytes.Buffer
	if err := CheckMarkdown(&b, many().r, MarkdownOptions{Version: "0.1.0"}); err != nil {
		t.Fatal(err)
	}
	doc := b.String()
	if !strings.Contains(doc, "… and 182 more models within budget, each with more headroom than those listed.") {
		t.Error("no count of the models left out")
	}
	// Failures come before warnings, warnings before passes.
	fail := strings.Index(doc, "`models/birdcam/zoo/cam-013.onnx`")
	warn := strings.Index(doc, "`models/birdcam/zoo/cam-007.onnx`")
	pass := strings.Index(doc, "`models/birdcam/zoo/cam-106.onnx`") // the tightest within budget
	if fail < 0 || warn < 0 || pass < 0 || !(fail < warn && warn < pass) {
		t.Errorf("order fail %d, warn %d, pass %d; want failures, then warnings, then passes", fail, warn, pass)
	}
}

// worstCase is 200 failing models with long paths, every check failing, a
// long reason and full per-layer detail: far more than a comment holds.
func worstCase() *budget.Result {
	r := &budget.Result{Base: baseRev, Head: headRev, Verdict: budget.Fail}
	long := strings.Repeat("deeply/nested/", 8)
	for i := 0; i < 200; i++ {
		m := detectorModel()
		m.Path = fmt.Sprintf("models/birdcam/%sexperiment-%03d.onnx", long, i)
		for j := range m.Checks {
			m.Checks[j].Status = budget.Fail
			m.Checks[j].Reason = strings.Repeat("over its limit, ", 20)
		}
		m.Status = budget.Fail
		r.Models = append(r.Models, m)
		r.Findings = append(r.Findings, budget.Finding{Level: budget.Warn, Message: strings.Repeat("a problem ", 30)})
		r.Problems = append(r.Problems, r.Findings[i].Message)
		r.BudgetChanges = append(r.BudgetChanges, budget.BudgetChange{Key: fmt.Sprintf("models[%d].limits.ram", i), Old: "90%", New: "99%", Loosened: true})
		r.Waivers = append(r.Waivers, v4Waiver)
	}
	return r
}

// TestCheckMarkdownSize: however large the result, the document fits in
// MaxChars (60,000 by default), ends with its footer and says what it left
// out.
func TestCheckMarkdownSize(t *testing.T) {
	for _, max := range []int{0, 20000, 3000, 900} {
		t.Run(fmt.Sprint(max), func(t *testing.T) {
			var b bytes.Buffer
			if err := CheckMarkdown(&b, worstCase(), MarkdownOptions{Version: "0.1.0", MaxChars: max}); err != nil {
				t.Fatal(err)
			}
			limit := max
			if limit == 0 {
				limit = MarkdownLimit
			}
			doc := b.String()
			if b.Len() > limit {
				t.Errorf("%d bytes, more than %d", b.Len(), limit)
			}
			if !utf8.ValidString(doc) {
				t.Error("cut inside a character")
			}
			if !strings.HasSuffix(doc, "</sub>\n") {
				t.Error("the footer is missing")
			}
			if !strings.Contains(doc, "more models over budget") && !strings.Contains(doc, "cut to fit") {
				t.Error("no word of what was left out")
			}
			if strings.Count(doc, "<details>") != strings.Count(doc, "</details>") || strings.Count(doc, "```")%2 != 0 {
				t.Error("a collapsible section or code block left open")
			}
		})
	}
	// The default leaves out as little as it must: the worst case still
	// shows models, not just counts.
	var b bytes.Buffer
	if err := CheckMarkdown(&b, worstCase(), MarkdownOptions{}); err != nil {
		t.Fatal(err)
	}
	if n := strings.Count(b.String(), "experiment-"); n < 10 {
		t.Errorf("only %d mentions of models in the worst case's %d bytes", n, b.Len())
	}
}

func TestSpark(t *testing.T) {
	for _, tc := range []struct {
		name string
		live []int64
		peak int
		want string
	}{
		{"rise and fall", []int64{0, 1, 2, 3, 4, 5, 6, 7, 3}, 7, "▁▂▃▄▅▆▇█▄\n       ▲ peak 7 B at step 7"},
		{"flat zero", []int64{0, 0, 0}, 1, "▁▁▁\n ▲ peak 0 B at step 1"},
		{"peak out of range is found", []int64{1, 8, 2}, 99, "▂█▃\n ▲ peak 8 B at step 1"},
	} {
		if got := spark(tc.live, tc.peak); got != tc.want {
			t.Errorf("%s: got\n%s\nwant\n%s", tc.name, got, tc.want)
		}
	}

	// 1,000 steps fold into 60 columns; the peak's column is the full block
	// and the marker stands under it.
	live := make([]int64, 1000)
	for i := range live {
		live[i] = int64(i % 100)
	}
	live[734] = 5000
	lines := strings.Split(spark(live, 734), "\n")
	cols := []rune(lines[0])
	if len(cols) != sparkColumns {
		t.Fatalf("%d columns, want %d", len(cols), sparkColumns)
	}
	mark := strings.IndexRune(lines[1], '▲')
	mark = utf8.RuneCountInString(lines[1][:mark])
	if want := 734 * sparkColumns / 1000; mark != want || cols[mark] != '█' {
		t.Errorf("marker in column %d under %q, want column %d under the full block", mark, cols[mark], want)
	}
	if strings.Count(lines[0], "█") != 1 {
		t.Errorf("more than one full block: %s", lines[0])
	}
	// Near the right edge the label goes left of the marker.
	if !strings.HasSuffix(lines[1], "peak 4.88 KiB at step 734 ▲") {
		t.Errorf("marker line %q", lines[1])
	}
}

func TestMarkdownEscapes(t *testing.T) {
	for _, tc := range []struct{ in, want string }{
		{"models/a.onnx", "`models/a.onnx`"},
		{"a|b.onnx", "`a\\|b.onnx`"},
		{"we`ird.onnx", "``we`ird.onnx``"},
		{"`x`", "`` `x` ``"},
	} {
		if got := mdCode(tc.in); got != tc.want {
			t.Errorf("mdCode(%q) = %q, want %q", tc.in, got, tc.want)
		}
	}
	if got, want := mdText(`<img src=x> *bold* [link](u) a|b`), `&lt;img src=x> \*bold\* \[link\](u) a\|b`; got != want {
		t.Errorf("mdText = %q, want %q", got, want)
	}

	// A hostile path cannot open a tag (outside a code span, where it is
	// shown as written) or leave its table cell.
	r := &budget.Result{Verdict: budget.Fail, Models: []budget.ModelResult{{
		Path: "models/<script>|x.onnx", Change: budget.Added, Status: budget.Fail,
		Checks: []budget.Check{chk(budget.MetricRAM, "limit", 2048, -1, 1024, budget.Fail, "ram 2.00 KiB > limit 1.00 KiB by 1.00 KiB")},
		Detail: &budget.Detail{LiveBytes: []int64{1, 2}},
	}}}
	var b bytes.Buffer
	if err := CheckMarkdown(&b, r, MarkdownOptions{}); err != nil {
		t.Fatal(err)
	}
	if strings.Contains(strings.ReplaceAll(b.String(), "`models/<script>\\|x.onnx`", ""), "<script>") {
		t.Errorf("markup passed through:\n%s", b.String())
	}
	for _, l := range strings.Split(b.String(), "\n") {
		if strings.HasPrefix(l, "| `models/") && strings.Count(strings.ReplaceAll(l, `\|`, ""), "|") != 9 {
			t.Errorf("row does not have 8 cells: %s", l)
		}
	}
}

func TestDaysLeft(t *testing.T) {
	until := v4Waiver.Until
	for _, tc := range []struct {
		now  string
		want string
	}{
		{"2026-12-02T09:00:00Z", "60 days left"},
		{"2027-01-30T09:00:00Z", "1 day left"},
		{"2027-01-31T00:00:00Z", "expires today"},
		{"2027-02-02T00:00:00Z", "expired"},
	} {
		now, _ := timeParse(tc.now)
		if got := daysLeft(now, until); got != tc.want {
			t.Errorf("%s: %q, want %q", tc.now, got, tc.want)
		}
	}
}

// TestFooterFLOPsRule checks that the footer states the FLOPs rule as
// measure/cost.go counts it (and the README's "Conventions", FLOPs, defines
// it): one per window element per output for pooling and one per input
// element for reductions, not one per output element.
func TestFooterFLOPsRule(t *testing.T) {
	f := footer(MarkdownOptions{})
	for _, want := range []string{
		"FLOPs: 2 × MACs",
		"a 1-GMAC model is a 2-GFLOP model",
		"one per window element per output element of pooling",
		"one per input element of reductions",
	} {
		if !strings.Contains(f, want) {
			t.Errorf("footer lacks %q:\n%s", want, f)
		}
	}
	if strings.Contains(f, "pooling, normalisation and reduction layers") {
		t.Errorf("footer counts pooling and reductions per output element:\n%s", f)
	}
}
