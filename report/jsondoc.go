package report

import (
	"bytes"
	"encoding/json"
	"io"

	"github.com/loadline/loadline/internal/display"
)

// writeJSON writes v as every JSON document of loadline is written:
// indented by two spaces, HTML characters escaped or not as escapeHTML
// says, and CI command openers in paths written in another JSON spelling
// of the same string (display.GuardJSON). The document is encoded flat and
// then indented into a buffer sized once: an indenting encoder grows its
// buffers step by step, which on a per-layer report of 100,000 nodes (80
// MB) was most of the time the report took.
func writeJSON(w io.Writer, v any, escapeHTML bool) error {
	var flat bytes.Buffer
	enc := json.NewEncoder(&flat)
	enc.SetEscapeHTML(escapeHTML)
	if err := enc.Encode(v); err != nil {
		return err
	}
	var buf bytes.Buffer
	buf.Grow(2*flat.Len() + 64)
	if err := json.Indent(&buf, flat.Bytes(), "", "  "); err != nil {
		return err
	}
	_, err := w.Write(display.GuardJSON(buf.Bytes()))
	return err
}
