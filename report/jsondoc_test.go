package report

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"testing"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/internal/display"
)

// wholeCheckJSON is the check document written whole by writeJSON, as
// CheckJSON wrote it before its models were written one by one.
func wholeCheckJSON(r *budget.Result) ([]byte, error) {
	out := *r
	out.Models = make([]budget.ModelResult, len(r.Models))
	for i, m := range r.Models {
		if m.Checks == nil {
			m.Checks = []budget.Check{}
		}
		out.Models[i] = m
	}
	out.Verdict = verdict(r)
	out.BudgetChanges = orEmpty(out.BudgetChanges)
	out.Waivers = orEmpty(out.Waivers)
	out.Problems = orEmpty(out.Problems)
	out.Findings = orEmpty(out.Findings)
	out.Devices = orEmpty(out.Devices)
	doc := struct {
		Schema string `json:"schema"`
		*budget.Result
	}{CheckSchema, &out}
	var b bytes.Buffer
	err := writeJSON(&b, doc, false)
	return b.Bytes(), err
}

// TestCheckJSONModelsOneByOne: the check document written with its models
// encoded one by one (writeJSONList) is byte for byte the document
// encoded whole, for every fixture, for a result of no models, and for
// models whose paths, notes and reasons hold CI command openers, quotes,
// "<>&" and the key "models" itself.
func TestCheckJSONModelsOneByOne(t *testing.T) {
	results := map[string]*budget.Result{"empty": {Base: baseRev, Head: headRev}}
	for _, f := range fixtures() {
		results[f.name] = f.r
	}
	odd := *mixed().r
	odd.Models = append([]budget.ModelResult{}, odd.Models...)
	for i := range odd.Models {
		m := &odd.Models[i]
		m.Path = fmt.Sprintf("##[error]%d \"models\": [] ##vso[task]<&>", i)
		m.Notes = append(m.Notes, "\n  \"models\": []", "#", "##", "vso[")
		if len(m.Checks) > 0 {
			m.Checks = append([]budget.Check{}, m.Checks...)
			m.Checks[0].Reason = "##VSO[x] ram > limit"
		}
	}
	odd.Problems = []string{"##[warning] a problem"}
	results["odd"] = &odd
	for name, r := range results {
		want, err := wholeCheckJSON(r)
		if err != nil {
			t.Fatal(err)
		}
		var got bytes.Buffer
		if err := CheckJSON(&got, r); err != nil {
			t.Fatal(err)
		}
		if !bytes.Equal(got.Bytes(), want) {
			t.Errorf("%s: the models written one by one differ from the whole document\n%s", name, firstDiff(got.Bytes(), want))
		}
	}
	if !bytes.Contains(mustCheckJSON(t, &odd), []byte(`\u005berror]`)) {
		t.Error("the odd fixture's openers were not guarded")
	}
}

func mustCheckJSON(t testing.TB, r *budget.Result) []byte {
	t.Helper()
	var b bytes.Buffer
	if err := CheckJSON(&b, r); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

// TestCheckJSONUnencodableWritesNothing: a model whose figures cannot be
// encoded (a latency that is not a number) makes CheckJSON fail before it
// writes anything, as when the document was encoded whole.
func TestCheckJSONUnencodableWritesNothing(t *testing.T) {
	r := *mixed().r
	r.Models = append([]budget.ModelResult{}, r.Models...)
	last := &r.Models[len(r.Models)-1]
	head := *last.Head
	head.Target = &budget.TargetFigures{Name: "mcu", LatencyMS: math.NaN()}
	last.Head = &head
	var b bytes.Buffer
	if err := CheckJSON(&b, &r); err == nil || b.Len() > 0 {
		t.Errorf("a NaN latency: error %v, %d bytes written", err, b.Len())
	}
}

// BenchmarkCheckJSON2000 writes the check document of 2,000 models (the
// mixed fixture's models over and over).
func BenchmarkCheckJSON2000(b *testing.B) {
	src := mixed().r
	r := *src
	r.Models = nil
	for i := 0; len(r.Models) < 2000; i++ {
		m := src.Models[i%len(src.Models)]
		m.Path = fmt.Sprintf("models/m%04d.onnx", i)
		r.Models = append(r.Models, m)
	}
	var n countWriter
	if err := CheckJSON(&n, &r); err != nil {
		b.Fatal(err)
	}
	b.SetBytes(int64(n))
	b.ReportAllocs()
	for b.Loop() {
		if err := CheckJSON(&n, &r); err != nil {
			b.Fatal(err)
		}
	}
}

// countWriter counts what it is given.
type countWriter int64

func (c *countWriter) Write(p []byte) (int, error) {
	*c += countWriter(len(p))
	return len(p), nil
}

// indentAgrees fails when appendIndent and json.Indent part on the
// compact form of doc, a valid JSON document.
func indentAgrees(t *testing.T, doc []byte) {
	t.Helper()
	var compact bytes.Buffer
	if err := json.Compact(&compact, doc); err != nil {
		t.Fatal(err)
	}
	for _, prefix := range []string{"", "    "} {
		var want bytes.Buffer
		if err := json.Indent(&want, compact.Bytes(), prefix, "  "); err != nil {
			t.Fatal(err)
		}
		if got := appendIndent(nil, compact.Bytes(), prefix); !bytes.Equal(got, want.Bytes()) {
			t.Fatalf("prefix %q: appendIndent gave\n%s\njson.Indent gave\n%s", prefix, got, want.Bytes())
		}
	}
}

// TestAppendIndentAsJSONIndent: the JSON goldens (check and sign-off
// documents, nested lists and objects, empty ones, escaped strings) are
// indented exactly as encoding/json's json.Indent indents them.
func TestAppendIndentAsJSONIndent(t *testing.T) {
	paths, _ := filepath.Glob(filepath.Join("..", "testdata", "report", "*.json.golden"))
	if len(paths) < 5 {
		t.Fatalf("%d JSON goldens", len(paths))
	}
	for _, p := range paths {
		doc, err := os.ReadFile(p)
		if err != nil {
			t.Fatal(err)
		}
		indentAgrees(t, doc)
	}
	indentAgrees(t, []byte(`{"a":[],"b":{},"c":[{},[],[[]],{"d":"\"\\\u005b]}{,:"}],"e":-1.5e-7,"f":[true,false,null]}`))
}

// FuzzAppendIndent: whatever valid JSON document, in its compact form
// (the encoder's output is compact), appendIndent writes what json.Indent
// writes. Seeds: a check document and small documents of every kind of
// value.
func FuzzAppendIndent(f *testing.F) {
	f.Add(mustCheckJSON(f, mixed().r))
	for _, s := range []string{`{}`, `[]`, `[[],{}]`, `"a\"b\\"`, `{"k":{"l":[1,2,{"m":null}]}}`, `1e9`, `"\u005b##[x]"`} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, doc []byte) {
		if !json.Valid(doc) {
			return
		}
		indentAgrees(t, doc)
	})
}

// TestWriteJSONInPieces: a document many times spillSize, written in
// pieces at lines' ends, is byte for byte what encoding/json's own
// indentation gives, with CI command openers inside strings guarded as
// in one piece (display.GuardJSON over the whole).
func TestWriteJSONInPieces(t *testing.T) {
	type row struct {
		Name  string            `json:"name"`
		Sizes []int64           `json:"sizes"`
		Tags  map[string]string `json:"tags"`
		Empty []int             `json:"empty"`
	}
	var doc struct {
		Rows []row `json:"rows"`
	}
	for i := range 20000 {
		doc.Rows = append(doc.Rows, row{Name: fmt.Sprintf("##[group]%d ##vso[task] <b>", i), Sizes: []int64{int64(i), -1},
			Tags: map[string]string{"k": "[v]", "a": `q"##[`}, Empty: []int{}})
	}
	var got bytes.Buffer
	if err := writeJSON(&got, doc, true); err != nil {
		t.Fatal(err)
	}
	want, err := json.MarshalIndent(doc, "", "  ")
	if err != nil {
		t.Fatal(err)
	}
	want = display.GuardJSON(append(want, '\n'))
	if got.Len() < 4*spillSize {
		t.Fatalf("document of %d bytes: not many pieces", got.Len())
	}
	if !bytes.Equal(got.Bytes(), want) {
		t.Fatal("written in pieces, the document differs from encoding/json's indentation")
	}
}
