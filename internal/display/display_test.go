package display

import (
	"encoding/json"
	"strings"
	"testing"
	"time"
)

func TestEscape(t *testing.T) {
	for _, tc := range []struct{ in, want string }{
		{"models/kws.onnx", "models/kws.onnx"},
		{"models/vögel 1.onnx", "models/vögel 1.onnx"},
		{`C:\models\a.onnx`, `C:\models\a.onnx`},
		{"models/x\n::add-mask::abc\n::error title=INJECTED::pwned.onnx", `models/x\n::add-mask::abc\n::error title=INJECTED::pwned.onnx`},
		{"::error::x.onnx", `\x3a:error::x.onnx`},
		{"  ::warning::x", `  \x3a:warning::x`},
		{"a::b", "a::b"},
		{":a", ":a"},
		{"x ##[error]y ##[warning]z", `x ##\x5berror]y ##\x5bwarning]z`},
		{"###[x", `###\x5bx`},
		// Azure Pipelines' logging command, anywhere on the line.
		{"models/a\n##vso[task.setvariable variable=x]1.onnx", `models/a\n##vso\x5btask.setvariable variable=x]1.onnx`},
		{"a ##VSO[task.complete]b ##Vso[c", `a ##VSO\x5btask.complete]b ##Vso\x5bc`},
		{"#vso[ ##vs[ ##v[ vso[", "#vso[ ##vs[ ##v[ vso["},
		// An end that text written after it could join into an opener.
		{"models/x##", `models/x#\x23`},
		{"a#", `a\x23`},
		{"a##v", `a#\x23v`},
		{"a##VS", `a#\x23VS`},
		{"a##vso", `a#\x23vso`},
		{"a#vso", "a#vso"},
		{"a##x", "a##x"},
		{"#", `\x23`},
		{":", `\x3a`},
		{"  :", `  \x3a`},
		{"a:", "a:"},
		{"#[a] ##", `#[a] #\x23`},
		{"tab\there\r", `tab\there\r`},
		{"\x1b[31mred\x1b[0m", `\x1b[31mred\x1b[0m`},
		{"\x00\x7f", `\x00\x7f`},
		{"bad\xffutf8", `bad\xffutf8`},
		{"rtl\u202efdp.onnx", `rtl\u202efdp.onnx`},
		{"line\u2028sep\u0085nel", `line\u2028sep\u0085nel`},
		{"zero\u200bwidth", `zero\u200bwidth`},
		{"nbsp\u00a0", `nbsp\u00a0`},
		{"tag\U000E0041", `tag\U000e0041`},
		{"", ""},
	} {
		if got := Escape(tc.in); got != tc.want {
			t.Errorf("Escape(%q) = %q, want %q", tc.in, got, tc.want)
		}
	}
}

// FuzzEscape: whatever the input, the result is one line of
// printable characters that no runner takes for a command.
func FuzzEscape(f *testing.F) {
	for _, s := range []string{"a\nb", "::x::y", "##[error]", "\xff\xfe", "\u202e", " \t::a"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		e := Escape(s)
		if strings.ContainsAny(e, "\n\r\x1b\x00") {
			t.Fatalf("%q escapes to %q", s, e)
		}
		if opens(e) {
			t.Fatalf("%q escapes to a command opener %q", s, e)
		}
		for _, r := range e {
			if r != ' ' && !isPrint(r) {
				t.Fatalf("%q escapes to %q, which holds %U", s, e, r)
			}
		}
		if Escape(s) != e {
			t.Fatal("not deterministic")
		}
	})
}

// isPrint reports whether Escape keeps r as it is, between letters (a lone
// ':' or a last '#' is escaped for what may follow it).
func isPrint(r rune) bool { s := "a" + string(r) + "a"; return Escape(s) == s }

// opens reports whether a line holds a command opener of a CI runner: a
// leading "::" (GitHub Actions), "##[" (GitHub's legacy form, and Azure
// Pipelines' formatting) or "##vso[" (Azure Pipelines) anywhere.
func opens(line string) bool {
	return strings.HasPrefix(strings.TrimLeft(line, " "), "::") || strings.Contains(line, "##[") ||
		strings.Contains(strings.ToLower(line), "##vso[")
}

// FuzzEscapeJoin: two escaped strings written one after the other, or an
// escaped string followed by a literal "[" (as in name[3]), still hold no
// command opener: a message built by joining escaped parts is as safe as
// its parts.
func FuzzEscapeJoin(f *testing.F) {
	for _, p := range [][2]string{{"a#", "#[x"}, {"x##", "vso[y"}, {"##v", "so[z"}, {":", ":error::x"}, {"  :", ":w"}, {"", "##[a"}} {
		f.Add(p[0], p[1])
	}
	f.Fuzz(func(t *testing.T, a, b string) {
		for _, joined := range []string{Escape(a) + Escape(b), Escape(a) + "[" + Escape(b), Escape(a) + Escape(b) + "["} {
			if opens(joined) {
				t.Fatalf("%q and %q join into a command opener: %q", a, b, joined)
			}
		}
	})
}

type inner struct {
	Name  string
	Count int
	Tags  map[string]string
}

type outer struct {
	Path    string
	Items   []inner
	Ptr     *inner
	Any     []any
	When    time.Time
	Numbers []int64
	private string
}

func TestCopyEscapesEveryString(t *testing.T) {
	when := time.Date(2027, 1, 31, 0, 0, 0, 0, time.UTC)
	in := &outer{
		Path:    "a\nb",
		Items:   []inner{{Name: "::x", Count: 3, Tags: map[string]string{"k\n": "v\r"}}},
		Ptr:     &inner{Name: "##[y"},
		Any:     []any{int64(1), "sym\x1b"},
		When:    when,
		Numbers: []int64{1, 2},
		private: "p\n",
	}
	out := Copy(in)
	if out == in || out.Ptr == in.Ptr {
		t.Fatal("not a copy")
	}
	if out.Path != `a\nb` || out.Items[0].Name != `\x3a:x` || out.Items[0].Count != 3 ||
		out.Items[0].Tags[`k\n`] != `v\r` || out.Ptr.Name != `##\x5by` ||
		out.Any[0] != int64(1) || out.Any[1] != `sym\x1b` || !out.When.Equal(when) || len(out.Numbers) != 2 {
		t.Fatalf("copy %+v", out)
	}
	if out.private != "p\n" {
		t.Fatal("unexported field changed")
	}
	// The original is untouched.
	if in.Path != "a\nb" || in.Items[0].Name != "::x" || in.Ptr.Name != "##[y" {
		t.Fatalf("original changed: %+v", in)
	}
	var nilPtr *outer
	if Copy(nilPtr) != nil {
		t.Fatal("nil pointer")
	}
}

func TestGuardJSON(t *testing.T) {
	v := map[string]string{"path": "x ##[error]pwned \n::add-mask::y", "az": "a\n##vso[task.setvariable variable=x]1 ##VSO[b ##vs[ #[", "list": "##"}
	doc, _ := json.Marshal(v)
	g := GuardJSON(doc)
	for _, line := range strings.Split(string(g), "\n") {
		if opens(line) {
			t.Fatalf("%s", g)
		}
	}
	if !strings.Contains(string(g), `##vs[ #[`) {
		t.Fatalf("GuardJSON changed more than the openers: %s", g)
	}
	var back map[string]string
	if err := json.Unmarshal(g, &back); err != nil || back["path"] != v["path"] {
		t.Fatalf("decodes to %q (%v)", back, err)
	}
}
