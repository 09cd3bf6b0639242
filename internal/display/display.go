// Package display is the one place where text from outside loadline (file
// paths, names read from model and budget files, messages built from them,
// answers of code hosts) is made safe to show: in a terminal, a CI log, a
// report or an annotation.
//
// A CI runner reads commands from a job's output: GitHub Actions runs a line
// that starts with "::" (after leading white space) and one that holds "##["
// anywhere (the legacy form); the Azure Pipelines agent runs a line that
// holds "##vso[" anywhere (its Command.TryParse finds the opener with
// IndexOf); GitLab CI reads section markers made of escape sequences and
// carriage returns. A file named "x\n::error title=INJECTED::pwned.onnx"
// would otherwise write such a line. The same reports are printed under
// any CI, supported by loadline's posting or not, so every opener is
// escaped wherever loadline runs.
package display

import (
	"bytes"
	"reflect"
	"strings"
	"sync"
	"unicode"
	"unicode/utf8"
)

// Escape returns s as it may be shown to a person: every control
// character, invalid UTF-8 byte and Unicode format or separator character
// (bidirectional overrides, zero-width characters, line separators) is
// written as a Go escape (\n, \t, \x1b, \u202e), so s stays on one line and
// cannot move the cursor or reorder text; the command openers "##[" and
// "##vso[" (any case) become "##\x5b" and "##vso\x5b"; and a leading "::"
// (after spaces) becomes "\x3a:". Printable text, spaces and backslashes
// are kept as they are.
//
// What Escape returns stays safe when text is written right after it,
// another escaped string or a literal "[": a '#' that could join with
// what follows into an opener (a last '#', or the second '#' of a
// trailing "##v", "##vs", "##vso") becomes "\x23", and a lone ':' after
// spaces, which a following ':' would make a leading "::", becomes "\x3a".
func Escape(s string) string {
	if safe(s) {
		return s
	}
	var b strings.Builder
	b.Grow(len(s) + 8)
	lead := true // still in the leading spaces
	hash := joinHash(s)
	for i := 0; i < len(s); {
		r, n := utf8.DecodeRuneInString(s[i:])
		switch {
		case r == utf8.RuneError && n == 1:
			hex(&b, "\\x", uint32(s[i]), 2)
		case r == '\n':
			b.WriteString(`\n`)
		case r == '\r':
			b.WriteString(`\r`)
		case r == '\t':
			b.WriteString(`\t`)
		case r == ':' && lead && (strings.HasPrefix(s[i:], "::") || i == len(s)-1):
			b.WriteString(`\x3a`)
		case r == '[' && opener(s, i):
			b.WriteString(`\x5b`)
		case i == hash:
			b.WriteString(`\x23`)
		case r == ' ' || unicode.IsPrint(r):
			b.WriteRune(r)
		case r < 0x80:
			hex(&b, `\x`, uint32(r), 2)
		case r <= 0xFFFF:
			hex(&b, `\u`, uint32(r), 4)
		default:
			hex(&b, `\U`, uint32(r), 8)
		}
		if r != ' ' {
			lead = false
		}
		i += n
	}
	return b.String()
}

// safe reports whether Escape would return s unchanged, without allocating:
// the common case of a plain path.
func safe(s string) bool {
	for i := 0; i < len(s); i++ {
		c := s[i]
		if c < 0x20 || c >= 0x7f || c == '[' && opener(s, i) {
			return false
		}
	}
	t := strings.TrimLeft(s, " ")
	return !strings.HasPrefix(t, "::") && t != ":" && joinHash(s) < 0
}

// opener reports whether the '[' at s[i] closes a CI command opener:
// GitHub's legacy "##[" or Azure Pipelines' "##vso[" (in any case: the
// agent's match is case-sensitive, but nothing is lost by escaping more).
func opener(s string, i int) bool {
	return i >= 2 && s[i-2:i] == "##" ||
		i >= 5 && s[i-5:i-3] == "##" && strings.EqualFold(s[i-3:i], "vso")
}

// joinHash returns the index of the '#' at the end of s that text written
// right after s could join into an opener — s's last byte when it is '#'
// (followed by "#[" or "#vso["), or the second '#' of a trailing "##v",
// "##vs" or "##vso" (followed by the rest of "vso[") — or -1.
func joinHash(s string) int {
	n := len(s)
	if n > 0 && s[n-1] == '#' {
		return n - 1
	}
	for k := 1; k <= 3 && k+2 <= n; k++ {
		if s[n-k-2:n-k] == "##" && strings.EqualFold(s[n-k:], "vso"[:k]) {
			return n - k - 1
		}
	}
	return -1
}

func hex(b *strings.Builder, prefix string, v uint32, digits int) {
	const hexdigits = "0123456789abcdef"
	b.WriteString(prefix)
	for i := digits - 1; i >= 0; i-- {
		b.WriteByte(hexdigits[(v>>(4*uint(i)))&0xF])
	}
}

// GuardJSON makes an encoded JSON document safe on a CI log without
// changing what it decodes to: the '[' of "##[" or "##vso[" (any case)
// inside a string is written "\u005b". (encoding/json already escapes
// control characters, an encoded line never starts with "::", and strings
// are never written next to each other without a quote between them.)
func GuardJSON(doc []byte) []byte {
	if !bytes.Contains(doc, []byte("##")) {
		return doc
	}
	out := make([]byte, 0, len(doc)+16)
	for i, c := range doc {
		if c == '[' && opener(string(doc[max(0, i-5):i+1]), min(i, 5)) {
			out = append(out, `\u005b`...)
			continue
		}
		out = append(out, c)
	}
	return out
}

// Copy returns a deep copy of v with Escape applied to every string it
// holds: struct fields, slice and array elements, map keys and values,
// what pointers and interfaces point at. Renderers for people take their
// input through it, so a field added later is escaped too. Unexported
// fields are copied as they are.
func Copy[T any](v T) T {
	rv := reflect.ValueOf(&v).Elem()
	out := reflect.New(rv.Type()).Elem()
	copyValue(out, rv, 0)
	return out.Interface().(T)
}

// maxDepth bounds the recursion (a cycle of pointers ends there, copied
// as is).
const maxDepth = 64

func copyValue(dst, src reflect.Value, depth int) {
	if depth > maxDepth || !holdsString(src.Type()) {
		dst.Set(src)
		return
	}
	switch src.Kind() {
	case reflect.String:
		dst.SetString(Escape(src.String()))
	case reflect.Pointer:
		if src.IsNil() {
			dst.Set(src)
			return
		}
		p := reflect.New(src.Type().Elem())
		copyValue(p.Elem(), src.Elem(), depth+1)
		dst.Set(p)
	case reflect.Interface:
		if src.IsNil() {
			dst.Set(src)
			return
		}
		e := src.Elem()
		c := reflect.New(e.Type()).Elem()
		copyValue(c, e, depth+1)
		dst.Set(c)
	case reflect.Struct:
		dst.Set(src) // unexported fields as they are
		t := src.Type()
		for i := range t.NumField() {
			if t.Field(i).IsExported() {
				copyValue(dst.Field(i), src.Field(i), depth+1)
			}
		}
	case reflect.Slice:
		if src.IsNil() {
			dst.Set(src)
			return
		}
		s := reflect.MakeSlice(src.Type(), src.Len(), src.Len())
		for i := range src.Len() {
			copyValue(s.Index(i), src.Index(i), depth+1)
		}
		dst.Set(s)
	case reflect.Array:
		for i := range src.Len() {
			copyValue(dst.Index(i), src.Index(i), depth+1)
		}
	case reflect.Map:
		if src.IsNil() {
			dst.Set(src)
			return
		}
		m := reflect.MakeMapWithSize(src.Type(), src.Len())
		it := src.MapRange()
		for it.Next() {
			k := reflect.New(src.Type().Key()).Elem()
			copyValue(k, it.Key(), depth+1)
			val := reflect.New(src.Type().Elem()).Elem()
			copyValue(val, it.Value(), depth+1)
			m.SetMapIndex(k, val)
		}
		dst.Set(m)
	default:
		dst.Set(src)
	}
}

// holdsString reports whether a value of type t can hold a string anywhere
// (an interface can hold anything); types that cannot are copied whole.
func holdsString(t reflect.Type) bool {
	if v, ok := holdsCache.Load(t); ok {
		return v.(bool)
	}
	h := holds(t, map[reflect.Type]bool{})
	holdsCache.Store(t, h)
	return h
}

var holdsCache sync.Map // reflect.Type → bool

func holds(t reflect.Type, seen map[reflect.Type]bool) bool {
	if seen[t] {
		return false // a recursive type: its strings are found elsewhere on the path
	}
	seen[t] = true
	switch t.Kind() {
	case reflect.String, reflect.Interface:
		return true
	case reflect.Pointer, reflect.Slice, reflect.Array:
		return holds(t.Elem(), seen)
	case reflect.Map:
		return holds(t.Key(), seen) || holds(t.Elem(), seen)
	case reflect.Struct:
		for i := range t.NumField() {
			if f := t.Field(i); f.IsExported() && holds(f.Type, seen) {
				return true
			}
		}
	}
	return false
}
