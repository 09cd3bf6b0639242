package report

import (
	"bytes"
	"encoding/xml"
	"errors"
	"io"
	"strings"
	"testing"

	junit "github.com/joshdk/go-junit"

	"github.com/loadline/loadline/budget"
)

// TestCheckJUnitWellFormed reads every fixture's document token by token
// with encoding/xml: it must be one well-formed element, testsuites.
func TestCheckJUnitWellFormed(t *testing.T) {
	for _, f := range fixtures() {
		t.Run(f.name, func(t *testing.T) {
			var b bytes.Buffer
			if err := CheckJUnit(&b, f.r); err != nil {
				t.Fatal(err)
			}
			dec := xml.NewDecoder(&b)
			depth, roots := 0, 0
			for {
				tok, err := dec.Token()
				if errors.Is(err, io.EOF) {
					break
				}
				if err != nil {
					t.Fatalf("not well-formed XML: %v", err)
				}
				switch tok := tok.(type) {
				case xml.StartElement:
					if depth == 0 {
						roots++
						if tok.Name.Local != "testsuites" {
							t.Errorf("root element %q, want testsuites", tok.Name.Local)
						}
					}
					depth++
				case xml.EndElement:
					depth--
				}
			}
			if roots != 1 || depth != 0 {
				t.Errorf("%d root elements, depth %d at the end; want 1 and 0", roots, depth)
			}
		})
	}
}

// TestCheckJUnitParses reads the mixed fixture back with a general-purpose
// JUnit reader, github.com/joshdk/go-junit, which recounts every suite from
// its cases: the counts, statuses and messages a CI test view would show.
func TestCheckJUnitParses(t *testing.T) {
	var b bytes.Buffer
	if err := CheckJUnit(&b, mixed().r); err != nil {
		t.Fatal(err)
	}
	suites, err := junit.Ingest(b.Bytes())
	if err != nil {
		t.Fatal(err)
	}
	byName := map[string]junit.Suite{}
	var total junit.Totals
	for _, s := range suites {
		byName[s.Name] = s
		total.Tests += s.Totals.Tests
		total.Failed += s.Totals.Failed
		total.Error += s.Totals.Error
		total.Skipped += s.Totals.Skipped
		total.Passed += s.Totals.Passed
	}

	// mixed: detector 7 checks (2 fail), v3 7 (1 fail), classifier 7 (1
	// warn), v4 7 (1 waived), tracker 7, wakeword 4, broken 1 error case,
	// tiny 1 skipped "budget rule" case, the budget file's 2 problems (the
	// expired waiver fails, the unbudgeted model warns); legacy.onnx is
	// removed and has no suite.
	want := junit.Totals{Tests: 43, Passed: 36, Failed: 4, Error: 1, Skipped: 2}
	if total != want {
		t.Errorf("totals %+v, want %+v", total, want)
	}
	if len(suites) != 9 {
		t.Errorf("%d suites, want 9 (8 models and the budget file)", len(suites))
	}
	if _, ok := byName["models/birdcam/legacy.onnx"]; ok {
		t.Error("the removed model has a suite")
	}
	// The document's own counts, read with encoding/xml (go-junit replaces
	// a suite's attributes with its <properties>), agree with the reader's.
	var doc struct {
		Tests    int `xml:"tests,attr"`
		Failures int `xml:"failures,attr"`
		Errors   int `xml:"errors,attr"`
		Skipped  int `xml:"skipped,attr"`
		Suites   []struct {
			Name     string `xml:"name,attr"`
			Tests    int    `xml:"tests,attr"`
			Failures int    `xml:"failures,attr"`
			Errors   int    `xml:"errors,attr"`
			Skipped  int    `xml:"skipped,attr"`
		} `xml:"testsuite"`
	}
	if err := xml.Unmarshal(b.Bytes(), &doc); err != nil {
		t.Fatal(err)
	}
	if doc.Tests != want.Tests || doc.Failures != want.Failed || doc.Errors != want.Error || doc.Skipped != want.Skipped {
		t.Errorf("testsuites says tests=%d failures=%d errors=%d skipped=%d, want %+v",
			doc.Tests, doc.Failures, doc.Errors, doc.Skipped, want)
	}
	for _, s := range doc.Suites {
		c := byName[s.Name].Totals
		if s.Tests != c.Tests || s.Failures != c.Failed || s.Errors != c.Error || s.Skipped != c.Skipped {
			t.Errorf("suite %s says tests=%d failures=%d errors=%d skipped=%d, its cases count %+v",
				s.Name, s.Tests, s.Failures, s.Errors, s.Skipped, c)
		}
	}

	test := func(suite, name string) junit.Test {
		t.Helper()
		for _, c := range byName[suite].Tests {
			if c.Name == name {
				if c.Classname != suite {
					t.Errorf("%s %s: classname %q, want the model path", suite, name, c.Classname)
				}
				return c
			}
		}
		t.Fatalf("no test %q in suite %q", name, suite)
		return junit.Test{}
	}
	const detector = "models/birdcam/detector.onnx"
	ram := test(detector, "ram")
	if ram.Status != junit.StatusFailed || ram.Message != "ram 498.0 KiB > limit 460.8 KiB (90% of porch-cam's 512 KiB) by 37.2 KiB" {
		t.Errorf("detector ram: %s %q", ram.Status, ram.Message)
	}
	if ram.Error == nil || !strings.Contains(ram.Error.Error(), "head 498.0 KiB, base 401.0 KiB") {
		t.Errorf("detector ram failure body: %v", ram.Error)
	}
	if g := test(detector, "ram growth"); g.Status != junit.StatusFailed || g.Message != "ram grew 24.2% (401.0 KiB → 498.0 KiB), allowed 5%" {
		t.Errorf("detector ram growth: %s %q", g.Status, g.Message)
	}
	if m := test(detector, "macs"); m.Status != junit.StatusPassed {
		t.Errorf("detector macs: %s, want passed", m.Status)
	}
	if v3 := test("models/birdcam/v3.onnx", "ram"); v3.Status != junit.StatusFailed || !strings.HasSuffix(v3.Message, "its waiver expired on 2026-11-30") {
		t.Errorf("v3 ram: %s %q", v3.Status, v3.Message)
	}

	warn := test("models/birdcam/classifier.onnx", "macs")
	if warn.Status != junit.StatusPassed || !strings.HasPrefix(warn.SystemOut, "warn: macs 55.8 M is 93.0% of limit 60.0 M, past warn_at 90%") {
		t.Errorf("classifier macs: %s, system-out %q", warn.Status, warn.SystemOut)
	}
	waived := test("models/birdcam/v4.onnx", "ram")
	if waived.Status != junit.StatusSkipped || waived.Message != "waived ram until 2027-01-31: ring buffer shrinks in firmware 4.2" {
		t.Errorf("v4 ram: %s %q", waived.Status, waived.Message)
	}
	broken := test("models/birdcam/broken.onnx", "measure")
	if broken.Status != junit.StatusError || !strings.Contains(broken.Message, "truncated field at byte 18244") {
		t.Errorf("broken: %s %q", broken.Status, broken.Message)
	}
	if stray := test("models/experiments/tiny.onnx", "budget rule"); stray.Status != junit.StatusSkipped {
		t.Errorf("unbudgeted model: %s, want skipped", stray.Status)
	}
	if p := test("budget file", "problem 1"); p.Status != junit.StatusFailed || !strings.Contains(p.Message, "expired on 2026-11-30") {
		t.Errorf("expired waiver problem: %s %q", p.Status, p.Message)
	}
	if p := test("budget file", "problem 2"); p.Status != junit.StatusPassed || !strings.HasPrefix(p.SystemOut, "warn: models/experiments/tiny.onnx is not budgeted") {
		t.Errorf("unbudgeted model problem: %s %q", p.Status, p.SystemOut)
	}
}

// TestCheckJUnitMany checks the counts over the 200-model fixture.
func TestCheckJUnitMany(t *testing.T) {
	f := many()
	var b bytes.Buffer
	if err := CheckJUnit(&b, f.r); err != nil {
		t.Fatal(err)
	}
	suites, err := junit.Ingest(b.Bytes())
	if err != nil {
		t.Fatal(err)
	}
	var want, got junit.Totals
	for _, m := range f.r.Models {
		for _, c := range m.Checks {
			want.Tests++
			if c.Status == budget.Fail {
				want.Failed++
			}
		}
	}
	for _, s := range suites {
		got.Tests += s.Totals.Tests
		got.Failed += s.Totals.Failed
	}
	if len(suites) != 200 || got != want || want.Failed != 3 {
		t.Errorf("%d suites, totals %+v; want 200 suites, %+v with 3 failures", len(suites), got, want)
	}
}

// TestCheckJUnitEscapes puts markup in a path and a reason: the reader must
// get them back unchanged, but for the line break, shown escaped as every
// control character from outside is.
func TestCheckJUnitEscapes(t *testing.T) {
	path := `models/<b>&"quoted"]]>.onnx`
	reason := "over by 5 KiB <script>alert(1)</script> & more\nsecond line"
	r := &budget.Result{Verdict: budget.Fail, Models: []budget.ModelResult{{
		Path: path, Change: budget.Added, Status: budget.Fail,
		Checks: []budget.Check{chk(budget.MetricRAM, "limit", 2048, -1, 1024, budget.Fail, reason)},
	}}}
	var b bytes.Buffer
	if err := CheckJUnit(&b, r); err != nil {
		t.Fatal(err)
	}
	suites, err := junit.Ingest(b.Bytes())
	if err != nil {
		t.Fatal(err)
	}
	if len(suites) != 1 || suites[0].Name != path || len(suites[0].Tests) != 1 {
		t.Fatalf("suites %+v", suites)
	}
	if got := suites[0].Tests[0].Message; got != `over by 5 KiB <script>alert(1)</script> & more\nsecond line` {
		t.Errorf("message %q", got)
	}
}
