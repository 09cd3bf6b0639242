package report

import (
	"bytes"
	"flag"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/loadline/loadline/budget"
)

var update = flag.Bool("update", false, "rewrite the golden reports in testdata/report from the current output")

// goldenNow is the day the golden markdown counts waiver days from.
var goldenNow = time.Date(2026, 12, 2, 9, 0, 0, 0, time.UTC)

// renderers are every check format, as the goldens name them.
var renderers = []struct {
	ext    string
	render func(*bytes.Buffer, *budget.Result) error
}{
	{"txt", func(b *bytes.Buffer, r *budget.Result) error { return CheckText(b, r, TextOptions{}) }},
	{"md", func(b *bytes.Buffer, r *budget.Result) error {
		return CheckMarkdown(b, r, MarkdownOptions{Version: "0.1.0", Now: goldenNow})
	}},
	{"json", func(b *bytes.Buffer, r *budget.Result) error { return CheckJSON(b, r) }},
	{"xml", func(b *bytes.Buffer, r *budget.Result) error { return CheckJUnit(b, r) }},
}

// TestGolden renders every fixture in every format and compares with
// testdata/report/<fixture>.<format>.golden; -update rewrites them.
func TestGolden(t *testing.T) {
	for _, f := range fixtures() {
		for _, rd := range renderers {
			t.Run(f.name+"."+rd.ext, func(t *testing.T) {
				var b bytes.Buffer
				if err := rd.render(&b, f.r); err != nil {
					t.Fatal(err)
				}
				golden(t, f.name+"."+rd.ext+".golden", b.Bytes())
			})
		}
	}
	// One coloured rendering, so the escape codes are reviewed too.
	var b bytes.Buffer
	if err := CheckText(&b, mixed().r, TextOptions{Color: true}); err != nil {
		t.Fatal(err)
	}
	golden(t, "mixed.color.txt.golden", b.Bytes())
}

func golden(t *testing.T, name string, got []byte) {
	t.Helper()
	path := filepath.Join("..", "testdata", "report", name)
	if *update {
		if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(path, got, 0o644); err != nil {
			t.Fatal(err)
		}
		return
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("%v (run go test ./report -update to create it)", err)
	}
	if !bytes.Equal(got, want) {
		t.Errorf("%s differs from the golden file; run go test ./report -update and review the diff\n%s", name, firstDiff(got, want))
	}
}

// firstDiff shows the first line where got and want part.
func firstDiff(got, want []byte) string {
	g, w := strings.Split(string(got), "\n"), strings.Split(string(want), "\n")
	for i := 0; i < len(g) || i < len(w); i++ {
		var gl, wl string
		if i < len(g) {
			gl = g[i]
		}
		if i < len(w) {
			wl = w[i]
		}
		if gl != wl {
			return "line " + itoa(i+1) + ":\n got: " + gl + "\nwant: " + wl
		}
	}
	return ""
}

func itoa(i int) string { return Figure("", int64(i)) }

func timeParse(s string) (time.Time, error) { return time.Parse(time.RFC3339, s) }

// edgeCases are results evaluation can produce that the goldens do not
// show: a figure that cannot be computed, rules that disagree about a
// model, an unchanged model, empty detail, nothing at all.
func edgeCases() map[string]*budget.Result {
	unknown := budget.ModelResult{
		Path: "models/birdcam/looper.onnx", Change: budget.Modified, Device: "porch-cam", Status: budget.Fail,
		Base: porchFigs(1000, 10, 10, 5000, 2048), Head: porchFigs(1000, 10, 10, 0, 2048),
		Checks: []budget.Check{{Metric: budget.MetricMACs, Kind: "limit", Limit: i64(porchMACs), Status: budget.Fail,
			Reason: "cannot be computed: Loop trip count unknown"}},
		Detail: &budget.Detail{},
	}
	unknown.Head.Unknown = map[string]string{budget.MetricMACs: "Loop trip count unknown"}
	conflict := budget.ModelResult{
		Path: "models/birdcam/shared.onnx", Change: budget.Modified, Status: budget.Fail, Device: "porch-cam",
		Notes: []string{`rules disagree on the device: models[0] "models/birdcam/**" (loadline.yaml:10:5) says "porch-cam", models[1] "models/**/shared.onnx" (loadline.yaml:16:5) says "kitchen-timer"`},
	}
	same := trackerModel()
	same.Change = budget.Unchanged
	return map[string]*budget.Result{
		"unknown":   {Verdict: budget.Fail, Models: []budget.ModelResult{unknown}},
		"conflict":  {Verdict: budget.Fail, Models: []budget.ModelResult{conflict}},
		"unchanged": {Verdict: budget.Pass, Models: []budget.ModelResult{same}},
		"empty":     {},
	}
}

func TestEdgeCases(t *testing.T) {
	for name, r := range edgeCases() {
		for _, rd := range renderers {
			var b bytes.Buffer
			if err := rd.render(&b, r); err != nil {
				t.Fatalf("%s.%s: %v", name, rd.ext, err)
			}
			out := b.String()
			switch name + "." + rd.ext {
			case "unknown.txt":
				if !strings.Contains(out, "  unknown  ") {
					t.Errorf("unknown figure not said:\n%s", out)
				}
				if strings.Contains(out, "60.0 M (100.0%)") {
					t.Errorf("headroom computed from a figure that is not known:\n%s", out)
				}
			case "unknown.md":
				if strings.Contains(out, "<details>") {
					t.Errorf("a collapsible section for empty detail:\n%s", out)
				}
			case "conflict.txt", "conflict.md":
				if !strings.Contains(out, "not judged; see why below") || !strings.Contains(out, "shared.onnx`: rules disagree on the device") && !strings.Contains(out, "shared.onnx: rules disagree on the device") {
					t.Errorf("%s: the model's note is missing:\n%s", rd.ext, out)
				}
			case "unchanged.md":
				if strings.Contains(out, "| `models/birdcam/tracker.onnx`") || !strings.Contains(out, "1 model within budget") {
					t.Errorf("an unchanged model within budget belongs in the count, not the table:\n%s", out)
				}
			case "empty.txt":
				if !strings.HasPrefix(out, "loadline: pass — no models changed\n") {
					t.Errorf("empty result:\n%s", out)
				}
			case "empty.md":
				if !strings.HasPrefix(out, "## ✔ loadline: within budget\n\nNo models changed.") {
					t.Errorf("empty result:\n%s", out)
				}
			}
		}
	}
}
