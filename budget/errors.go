package budget

import (
	"fmt"
	"strings"
)

// Error is one finding in a budget file, with its place: the file, the
// 1-based line and column of the offending key or value (0 when unknown),
// the key path ("models[0].limits"), what is wrong, and a hint where a fix
// is likely ("did you mean \"macs\"?"). It prints as
//
//	loadline.yaml:12:5: models[0].limits: unknown metric "mac" (did you mean "macs"?)
type Error struct {
	File         string
	Line, Column int
	Key          string
	Msg          string
	Hint         string
}

func (e *Error) Error() string {
	var b strings.Builder
	b.WriteString(e.File)
	if e.Line > 0 {
		fmt.Fprintf(&b, ":%d", e.Line)
		if e.Column > 0 {
			fmt.Fprintf(&b, ":%d", e.Column)
		}
	}
	if b.Len() > 0 {
		b.WriteString(": ")
	}
	if e.Key != "" {
		b.WriteString(e.Key)
		b.WriteString(": ")
	}
	b.WriteString(e.Msg)
	if e.Hint != "" {
		b.WriteString(" (")
		b.WriteString(e.Hint)
		b.WriteString(")")
	}
	return b.String()
}

// Errors are all the findings of one budget file, in file order. Parse
// collects them rather than stopping at the first.
type Errors []*Error

func (es Errors) Error() string {
	lines := make([]string, len(es))
	for i, e := range es {
		lines[i] = e.Error()
	}
	return strings.Join(lines, "\n")
}

// Unwrap lets errors.As reach each *Error.
func (es Errors) Unwrap() []error {
	out := make([]error, len(es))
	for i, e := range es {
		out[i] = e
	}
	return out
}

// didYouMean phrases a suggestion, or returns "" when there is none.
func didYouMean(word string, candidates []string) string {
	if s := suggest(word, candidates); s != "" {
		return fmt.Sprintf("did you mean %q?", s)
	}
	return ""
}

// suggest returns the candidate closest to word: an exact match but for
// case first, else the nearest by edit distance (adjacent swaps count as
// one edit), when near enough to be a likely typo; "" otherwise.
func suggest(word string, candidates []string) string {
	for _, c := range candidates {
		if strings.EqualFold(word, c) {
			return c
		}
	}
	if len(word) > 64 {
		return ""
	}
	limit := 2
	if len([]rune(word)) <= 3 {
		limit = 1
	}
	best, bestD := "", limit+1
	for _, c := range candidates {
		d := editDistance(strings.ToLower(word), strings.ToLower(c))
		if d < bestD && d < len([]rune(c)) {
			best, bestD = c, d
		}
	}
	return best
}

// editDistance is the optimal-string-alignment distance: insertions,
// deletions, substitutions and swaps of adjacent runes each cost one.
func editDistance(a, b string) int {
	s, t := []rune(a), []rune(b)
	prev2 := make([]int, len(t)+1)
	prev := make([]int, len(t)+1)
	cur := make([]int, len(t)+1)
	for j := range prev {
		prev[j] = j
	}
	for i := 1; i <= len(s); i++ {
		cur[0] = i
		for j := 1; j <= len(t); j++ {
			cost := 1
			if s[i-1] == t[j-1] {
				cost = 0
			}
			cur[j] = min(prev[j]+1, cur[j-1]+1, prev[j-1]+cost)
			if i > 1 && j > 1 && s[i-1] == t[j-2] && s[i-2] == t[j-1] {
				cur[j] = min(cur[j], prev2[j-2]+1)
			}
		}
		prev2, prev, cur = prev, cur, prev2
	}
	return prev[len(t)]
}
