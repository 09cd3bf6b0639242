package report

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"unicode/utf8"
)

func TestColorFor(t *testing.T) {
	devNull, err := os.OpenFile(os.DevNull, os.O_WRONLY, 0)
	if err != nil {
		t.Fatal(err)
	}
	defer devNull.Close()
	plain, err := os.Create(filepath.Join(t.TempDir(), "out.txt"))
	if err != nil {
		t.Fatal(err)
	}
	defer plain.Close()

	t.Setenv("NO_COLOR", "")
	if ColorFor(&bytes.Buffer{}) {
		t.Error("colour for a buffer")
	}
	if ColorFor(plain) {
		t.Error("colour for a regular file")
	}
	// /dev/null is a character device, as a terminal is.
	if !ColorFor(devNull) {
		t.Errorf("no colour for %s, a character device", os.DevNull)
	}
	t.Setenv("NO_COLOR", "1")
	if ColorFor(devNull) {
		t.Error("colour although NO_COLOR is set")
	}
}

func TestCheckTextColorOnlyWhenAsked(t *testing.T) {
	r := mixed().r
	var plain, color bytes.Buffer
	if err := CheckText(&plain, r, TextOptions{}); err != nil {
		t.Fatal(err)
	}
	if err := CheckText(&color, r, TextOptions{Color: true}); err != nil {
		t.Fatal(err)
	}
	if bytes.ContainsRune(plain.Bytes(), '\x1b') {
		t.Error("escape codes without Color")
	}
	if !bytes.Contains(color.Bytes(), []byte("\x1b[1;31mFAIL\x1b[0m")) {
		t.Error("no red FAIL with Color")
	}
	// Every reset closes a colour: no stray codes around plain cells.
	resets := strings.Count(color.String(), ansiReset)
	if opens := strings.Count(color.String(), "\x1b[") - resets; resets != opens {
		t.Errorf("%d resets for %d colours", resets, opens)
	}
	// Taking the colour away gives the plain text back: colour never
	// moves a column.
	if got := stripANSI(color.String()); got != plain.String() {
		t.Errorf("coloured text differs from the plain text beyond its escape codes\n%s", firstDiff([]byte(got), plain.Bytes()))
	}
}

func stripANSI(s string) string {
	var b strings.Builder
	for i := 0; i < len(s); i++ {
		if s[i] == '\x1b' {
			for i < len(s) && s[i] != 'm' {
				i++
			}
			continue
		}
		b.WriteByte(s[i])
	}
	return b.String()
}

// TestCheckTextAligned checks that every row of the table puts its status
// in the column the header's "status" heads, and its head figure ending
// where "head" ends.
func TestCheckTextAligned(t *testing.T) {
	for _, f := range fixtures() {
		var b bytes.Buffer
		if err := CheckText(&b, f.r, TextOptions{}); err != nil {
			t.Fatal(err)
		}
		lines := strings.Split(b.String(), "\n")
		h := -1
		for i, l := range lines {
			if strings.HasPrefix(l, "model ") {
				h = i
				break
			}
		}
		if h < 0 {
			continue // removed only: no table
		}
		col := func(l, word string) int { return utf8.RuneCountInString(l[:strings.Index(l, word)]) }
		status := col(lines[h], "status")
		headEnd := col(lines[h], " head ") + len(" head")
		for _, l := range lines[h+1:] {
			if l == "" {
				break
			}
			r := []rune(l)
			if len(r) <= status || r[status-1] != ' ' || r[status] == ' ' {
				t.Errorf("%s: status not in column %d: %q", f.name, status, l)
			}
			if r[headEnd-1] == ' ' || r[headEnd] != ' ' {
				t.Errorf("%s: head figure does not end at column %d: %q", f.name, headEnd, l)
			}
		}
	}
}
