package report

import (
	"bufio"
	"bytes"
	"encoding/json"
	"fmt"
	"io"

	"github.com/loadline/loadline/internal/display"
)

// writeJSON writes v as every JSON document of loadline is written:
// indented by two spaces, HTML characters escaped or not as escapeHTML
// says, and CI command openers in paths written in another JSON spelling
// of the same string (display.GuardJSON). The document is encoded flat and
// then indented into a buffer of spillSize, written out whenever it fills
// at a line's end: an indenting encoder grows its buffers step by step,
// and indenting a per-layer report of 100,000 nodes (80 MB flat) into one
// buffer took twice that again, most of the time the report took. A line's
// end is outside every string, and the guard looks back only within one
// string, so guarding the pieces guards the document.
func writeJSON(w io.Writer, v any, escapeHTML bool) error {
	var flat bytes.Buffer
	enc := json.NewEncoder(&flat)
	enc.SetEscapeHTML(escapeHTML)
	if err := enc.Encode(v); err != nil {
		return err
	}
	var err error
	write := func(b []byte) []byte {
		if err == nil {
			_, err = w.Write(display.GuardJSON(b))
		}
		return b[:0]
	}
	buf := indent(make([]byte, 0, min(2*flat.Len(), spillSize)+64), bytes.TrimSuffix(flat.Bytes(), []byte("\n")), "", write)
	write(append(buf, '\n'))
	return err
}

// spillSize is how much indented JSON writeJSON holds before writing it.
const spillSize = 256 << 10

// writeJSONList writes doc as writeJSON does, with the n elements that
// elem gives in place of the empty list doc holds at its top-level key:
// each element is encoded and indented on its own, at the depth it has in
// the document, into a buffer used again for the next, so that a document
// of thousands of elements (a check of 2,000 models writes 4 MB) is never
// held whole, encoded nor indented. The bytes are those writeJSON writes
// for the document with the list filled in: JSON's encoding of a value
// does not depend on where it stands, and the guard against CI command
// openers looks only inside strings, none of which crosses an element's
// bounds. Every element is encoded before the first byte is written, so an
// element that cannot be encoded writes nothing.
func writeJSONList(w io.Writer, doc any, key string, n int, elem func(i int) any, escapeHTML bool) error {
	var whole bytes.Buffer
	if err := writeJSON(&whole, doc, escapeHTML); err != nil {
		return err
	}
	// Only a top-level key starts a line with two spaces and a quote:
	// deeper lines are indented further, and strings hold no newline.
	mark := []byte("\n  \"" + key + "\": []")
	at := bytes.Index(whole.Bytes(), mark)
	if at < 0 || bytes.Contains(whole.Bytes()[at+len(mark):], mark) {
		return fmt.Errorf("report: the document has no empty top-level list %q", key)
	}
	head, tail := whole.Bytes()[:at+len(mark)-2], whole.Bytes()[at+len(mark):]
	if n == 0 {
		head = whole.Bytes()[:at+len(mark)]
	}
	// The elements, flat, each in one piece of a few blocks.
	var flat blocks
	var one bytes.Buffer
	enc := json.NewEncoder(&one)
	enc.SetEscapeHTML(escapeHTML)
	for i := range n {
		one.Reset()
		if err := enc.Encode(elem(i)); err != nil {
			return err
		}
		flat.add(one.Bytes())
	}
	bw := bufio.NewWriterSize(w, 64<<10)
	bw.Write(head)
	if n > 0 {
		const prefix = "\n    " // an element of a top-level list
		bw.WriteString("[")
		var ind []byte
		for i, e := range flat.pieces {
			ind = ind[:0]
			if i > 0 {
				ind = append(ind, ',')
			}
			ind = append(ind, prefix...)
			ind = appendIndent(ind, e[:len(e)-1], prefix[1:]) // less the encoder's newline
			bw.Write(display.GuardJSON(ind))
		}
		bw.WriteString("\n  ]")
	}
	bw.Write(tail)
	return bw.Flush()
}

// blocks keeps pieces of bytes in blocks of at least blockSize bytes, each
// piece whole: growing one buffer for a document of megabytes would copy
// it over and over.
type blocks struct {
	cur    []byte
	pieces [][]byte
}

const blockSize = 256 << 10

// add keeps a copy of p as the next piece.
func (b *blocks) add(p []byte) {
	if len(p) > cap(b.cur)-len(b.cur) {
		b.cur = make([]byte, 0, max(blockSize, len(p)))
	}
	start := len(b.cur)
	b.cur = append(b.cur, p...)
	b.pieces = append(b.pieces, b.cur[start:len(b.cur):len(b.cur)])
}

// appendIndent appends src, compact JSON as encoding/json writes it, as
// json.Indent(dst, src, prefix, "  ") would: each element of an object or
// array on its own line, beginning with prefix and two spaces per level,
// an empty object or array as {} or [], a space after each colon. It
// reads src once, copying strings whole, where json.Indent runs its
// validating scanner over every byte (three fifths of the time a check
// report of 2,000 models took); src is never anything but the encoder's
// output, whose validity the encoder guarantees.
func appendIndent(dst, src []byte, prefix string) []byte {
	return indent(dst, src, prefix, nil)
}

// indent is appendIndent, handing dst to spill (which returns what to
// append to next) at each line's end once it holds spillSize bytes.
func indent(dst, src []byte, prefix string, spill func([]byte) []byte) []byte {
	depth := 0
	newline := func() {
		if spill != nil && len(dst) >= spillSize {
			dst = spill(dst)
		}
		dst = append(dst, '\n')
		dst = append(dst, prefix...)
		for range depth {
			dst = append(dst, ' ', ' ')
		}
	}
	for i := 0; i < len(src); i++ {
		switch c := src[i]; c {
		case '"':
			j := i + 1
			for j < len(src) {
				k := bytes.IndexAny(src[j:], `"\`)
				if k < 0 {
					j = len(src)
					break
				}
				j += k
				if src[j] == '\\' {
					j += 2
					continue
				}
				j++
				break
			}
			j = min(j, len(src))
			dst = append(dst, src[i:j]...)
			i = j - 1
		case '{', '[':
			if i+1 < len(src) && (src[i+1] == '}' || src[i+1] == ']') {
				dst = append(dst, c, src[i+1])
				i++
				continue
			}
			dst = append(dst, c)
			depth++
			newline()
		case '}', ']':
			depth--
			newline()
			dst = append(dst, c)
		case ',':
			dst = append(dst, c)
			newline()
		case ':':
			dst = append(dst, ':', ' ')
		default:
			dst = append(dst, c)
		}
	}
	return dst
}
