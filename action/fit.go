package action

import (
	"fmt"
	"strings"
	"unicode/utf8"
)

// Size limits of the places a report is posted to.
const (
	// GitHubCommentLimit is the most characters GitHub accepts in an issue
	// or pull-request comment body (its API answers 422 "body is too long
	// (maximum is 65536 characters)").
	GitHubCommentLimit = 65536
	// GitLabNoteLimit is the most characters GitLab accepts in a note
	// (Note::MAX_NOTE_LENGTH, 1,000,000).
	GitLabNoteLimit = 1_000_000
	// StepSummaryLimit is the most bytes GitHub uploads from one step's
	// job summary file (1 MiB, per the workflow-commands documentation).
	StepSummaryLimit = 1 << 20
)

// FitBody returns body unchanged when it has at most limit characters
// (Unicode code points), and otherwise its longest head that fits once a
// note of what was left out is added: "… 37 more lines not shown: see the
// job summary". The cut falls at a line boundary, so no table row is split;
// never inside an HTML tag or comment that spans lines; a fenced code block
// left open is closed, and so is every <details> left open, so the rest of
// the page renders as it should. A limit too small for even the note gets
// the note's first limit characters.
func FitBody(body string, limit int) string {
	return fitBody(body, limit, utf8.RuneCountInString, "see the job summary")
}

// fitBody is FitBody with the measure of size (characters or bytes) and
// the place the note sends the reader to.
func fitBody(body string, limit int, size func(string) int, where string) string {
	if size(body) <= limit {
		return body
	}
	lines := strings.SplitAfter(body, "\n")
	if lines[len(lines)-1] == "" {
		lines = lines[:len(lines)-1]
	}
	var (
		st       markdownState
		kept     int // size of lines[:k]
		best     = -1
		bestTail string
	)
	for k := 0; k < len(lines); k++ {
		if k > 0 {
			st.line(lines[k-1])
			kept += size(lines[k-1])
			if kept > limit {
				break
			}
		}
		if st.inTag || st.inComment {
			continue // the line ends inside an HTML tag or comment
		}
		tail := st.closers() + omitted(len(lines)-k, where)
		if k == 0 {
			tail = strings.TrimPrefix(tail, "\n")
		}
		if kept+size(tail) <= limit {
			best, bestTail = k, tail
		}
	}
	if best < 0 {
		note := strings.TrimPrefix(omitted(len(lines), where), "\n")
		for size(note) > limit && note != "" {
			_, n := utf8.DecodeLastRuneInString(note)
			note = note[:len(note)-n]
		}
		return note
	}
	return strings.Join(lines[:best], "") + bestTail
}

// omitted is the note that ends a cut body, after a blank line so that it
// is not read as a table row or part of a paragraph.
func omitted(n int, where string) string {
	noun := "lines"
	if n == 1 {
		noun = "line"
	}
	return fmt.Sprintf("\n… %d more %s not shown: %s\n", n, noun, where)
}

// markdownState follows, line by line, what a cut would leave open: a
// fenced code block, an HTML tag or comment spanning lines, <details>
// elements.
type markdownState struct {
	fence     string // the open fence ("```", "~~~~"), if any
	inTag     bool   // inside <tag ... spanning lines
	tagName   []byte // name of the tag being read
	nameDone  bool
	quote     byte // quote character of an attribute value being read
	inComment bool // inside <!-- ... -->
	details   int  // <details> opened and not closed
}

// closers returns what closes the blocks left open.
func (s *markdownState) closers() string {
	var b strings.Builder
	if s.fence != "" {
		b.WriteString(s.fence + "\n")
	}
	if s.details > 0 {
		b.WriteString("\n") // ends a table or paragraph before the HTML
	}
	for range s.details {
		b.WriteString("</details>\n")
	}
	return b.String()
}

func (s *markdownState) line(l string) {
	if !s.inTag && !s.inComment {
		if marker, ok := fenceLine(l); ok {
			switch {
			case s.fence == "":
				s.fence = marker
				return
			case marker[0] == s.fence[0] && len(marker) >= len(s.fence) && strings.TrimSpace(strings.TrimLeft(strings.TrimSpace(l), marker[:1])) == "":
				s.fence = ""
				return
			}
		}
		if s.fence != "" {
			return
		}
	}
	inCode := false // inside an inline `code span`
	for i := 0; i < len(l); i++ {
		c := l[i]
		switch {
		case s.inComment:
			if strings.HasPrefix(l[i:], "-->") {
				s.inComment = false
				i += 2
			}
		case s.inTag:
			s.tagByte(c)
		case inCode:
			if c == '`' {
				inCode = false
			}
		case c == '`':
			inCode = true
		case c == '<' && strings.HasPrefix(l[i:], "<!--"):
			s.inComment = true
			i += 3
		case c == '<' && i+1 < len(l) && (isLetter(l[i+1]) || l[i+1] == '/'):
			s.inTag, s.tagName, s.nameDone, s.quote = true, s.tagName[:0], false, 0
		}
	}
}

// tagByte reads one byte inside a tag: its name, attribute values in
// quotes, the closing '>'.
func (s *markdownState) tagByte(c byte) {
	switch {
	case s.quote != 0:
		if c == s.quote {
			s.quote = 0
		}
	case c == '"' || c == '\'':
		s.quote = c
		s.nameDone = true
	case c == '>':
		s.inTag = false
		switch strings.ToLower(string(s.tagName)) {
		case "details":
			s.details++
		case "/details":
			if s.details > 0 {
				s.details--
			}
		}
	case !s.nameDone && (isLetter(c) || c == '/' || c == '-' || (c >= '0' && c <= '9')):
		s.tagName = append(s.tagName, c)
	default:
		s.nameDone = true
	}
}

func isLetter(c byte) bool { return c|0x20 >= 'a' && c|0x20 <= 'z' }

// fenceLine reports whether l opens or closes a fenced code block (up to
// three spaces, then three or more backticks or tildes), and the fence.
func fenceLine(l string) (string, bool) {
	t := strings.TrimRight(l, "\r\n")
	indent := len(t) - len(strings.TrimLeft(t, " "))
	if indent > 3 {
		return "", false
	}
	t = t[indent:]
	if t == "" || (t[0] != '`' && t[0] != '~') {
		return "", false
	}
	n := len(t) - len(strings.TrimLeft(t, t[:1]))
	if n < 3 {
		return "", false
	}
	return t[:n], true
}
