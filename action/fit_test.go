package action

import (
	"fmt"
	"math/rand"
	"strings"
	"testing"
	"unicode/utf8"
)

func TestFitBodyUnderLimitUnchanged(t *testing.T) {
	body := "| a | b |\n|---|---|\n| 1 | 2 |\n"
	if got := FitBody(body, len(body)); got != body {
		t.Fatalf("FitBody changed a body at its limit:\n%q", got)
	}
}

// table returns a markdown table of n rows after a heading.
func table(n int) string {
	var b strings.Builder
	b.WriteString("## loadline\n\n| model | ram | flash |\n| --- | ---: | ---: |\n")
	for i := range n {
		fmt.Fprintf(&b, "| models/m%04d.onnx | %d KiB | %d KiB |\n", i, 100+i, 200+i)
	}
	return b.String()
}

func TestFitBodyCutsTableAtRowBoundary(t *testing.T) {
	body := table(1000)
	lines := strings.SplitAfter(body, "\n")
	lines = lines[:len(lines)-1]
	const limit = 2000
	got := FitBody(body, limit)
	if n := utf8.RuneCountInString(got); n > limit {
		t.Fatalf("cut body has %d characters, limit %d", n, limit)
	}
	i := strings.LastIndex(got, "\n\n… ")
	if i < 0 {
		t.Fatalf("no note of what was left out:\n%s", got)
	}
	head, note := got[:i+1], got[i+2:]
	if !strings.HasPrefix(body, head) {
		t.Fatalf("the kept part is not a head of the body")
	}
	if !strings.HasSuffix(head, "|\n") {
		t.Fatalf("cut inside a table row: kept part ends %q", head[len(head)-20:])
	}
	kept := strings.Count(head, "\n")
	want := fmt.Sprintf("… %d more lines not shown: see the job summary\n", len(lines)-kept)
	if note != want {
		t.Fatalf("note = %q, want %q", note, want)
	}
	// The longest head that fits: one more row would not.
	if extra := utf8.RuneCountInString(lines[kept]); utf8.RuneCountInString(got)+extra <= limit {
		t.Fatalf("cut too early: %d characters used, the next row has %d", utf8.RuneCountInString(got), extra)
	}
}

func TestFitBodyClosesDetails(t *testing.T) {
	body := "## loadline\n\n<details>\n<summary>models/a.onnx: top layers</summary>\n\n" + table(300)[13:] + "\n</details>\n\nfooter\n"
	got := FitBody(body, 1500)
	if utf8.RuneCountInString(got) > 1500 {
		t.Fatalf("over the limit: %d", utf8.RuneCountInString(got))
	}
	if strings.Count(got, "<details>") != strings.Count(got, "</details>") {
		t.Fatalf("a <details> is left open:\n%s", got)
	}
	// The closing tag follows a blank line, so GitHub ends the table first.
	if !strings.Contains(got, "|\n\n</details>\n\n… ") {
		t.Fatalf("details not closed after a blank line:\n%s", got[len(got)-200:])
	}
}

func TestFitBodyNestedDetailsAndFence(t *testing.T) {
	var b strings.Builder
	b.WriteString("<details><summary>outer</summary>\n\n<details>\n<summary>inner</summary>\n\n```text\n")
	for i := range 200 {
		fmt.Fprintf(&b, "step %d: live 12345 bytes\n", i)
	}
	b.WriteString("```\n\n</details>\n</details>\n")
	got := FitBody(b.String(), 600)
	want := "```\n\n</details>\n</details>\n\n… "
	if !strings.Contains(got, want) {
		t.Fatalf("fence and two details not closed in order:\n%s", got)
	}
	if utf8.RuneCountInString(got) > 600 {
		t.Fatalf("over the limit")
	}
}

func TestFitBodyNeverInsideATag(t *testing.T) {
	// An HTML tag and a comment spanning lines: no cut may fall inside.
	body := "intro\n<img src=\"chart.svg\"\n  alt=\"a > b,\n  c\">\n<!-- a comment\nover lines -->\n" + strings.Repeat("x\n", 50)
	for limit := 1; limit < len(body); limit++ {
		got := FitBody(body, limit)
		if utf8.RuneCountInString(got) > limit {
			t.Fatalf("limit %d: %d characters", limit, utf8.RuneCountInString(got))
		}
		head, _, ok := strings.Cut(got, "\n… ")
		if !ok {
			continue // only the note fits
		}
		head = strings.TrimSuffix(head, "\n")
		if strings.Count(head, "<img") > 0 && !strings.Contains(head, "c\">") {
			t.Fatalf("limit %d: cut inside the <img> tag:\n%s", limit, got)
		}
		if strings.Contains(head, "<!--") && !strings.Contains(head, "-->") {
			t.Fatalf("limit %d: cut inside the comment:\n%s", limit, got)
		}
	}
}

func TestFitBodyCountsCharactersNotBytes(t *testing.T) {
	// 100 lines of 10 two-byte characters: 1,100 characters, 2,100 bytes.
	body := strings.Repeat(strings.Repeat("é", 10)+"\n", 100)
	if got := FitBody(body, 1100); got != body {
		t.Fatalf("a body of 1100 characters was cut at a limit of 1100")
	}
	got := FitBody(body, 500)
	if !utf8.ValidString(got) || utf8.RuneCountInString(got) > 500 {
		t.Fatalf("bad cut: valid %v, %d characters", utf8.ValidString(got), utf8.RuneCountInString(got))
	}
}

func TestFitBodyTinyLimits(t *testing.T) {
	body := table(10)
	for _, limit := range []int{0, 1, 5, 20} {
		got := FitBody(body, limit)
		if utf8.RuneCountInString(got) > limit {
			t.Fatalf("limit %d: %q", limit, got)
		}
	}
	note := "… 14 more lines not shown: see the job summary\n"
	if got := FitBody(body, utf8.RuneCountInString(note)); got != note {
		t.Fatalf("only the note fits: got %q", got)
	}
	if got := FitBody("a\nb\n"+strings.Repeat("c", 100)+"\n", 60); got != "a\nb\n\n… 1 more line not shown: see the job summary\n" {
		t.Fatalf("singular note: got %q", got)
	}
}

func TestFitBodyNeverOverLimitRandom(t *testing.T) {
	rng := rand.New(rand.NewSource(6))
	pieces := []string{"| a | b |", "<details>", "</details>", "<summary>s</summary>", "```", "text é ü", "<b\nclass=x>", "", "<!--", "-->", "`<details>`"}
	for i := range 500 {
		var b strings.Builder
		for range rng.Intn(60) {
			b.WriteString(pieces[rng.Intn(len(pieces))])
			b.WriteString("\n")
		}
		body := b.String()
		limit := rng.Intn(utf8.RuneCountInString(body) + 10)
		got := FitBody(body, limit)
		if utf8.RuneCountInString(got) > limit {
			t.Fatalf("case %d: %d characters over limit %d:\n%s", i, utf8.RuneCountInString(got), limit, got)
		}
		if got != body && limit > 60 && !strings.Contains(got, "not shown: see the job summary") {
			t.Fatalf("case %d: cut without a note:\n%s", i, got)
		}
	}
}
