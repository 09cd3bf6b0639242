package onnx

import (
	"fmt"
	"strings"
)

// DecodeError is a decoding failure: which file, where in it, and why.
// Its message reads like
//
//	model.onnx: graph.node[12].attribute[3]: truncated length-delimited field at byte 4711
//
// Field is a path of onnx.proto field names, with indexes into repeated
// fields; Offset is the byte offset of the offending field in the input.
type DecodeError struct {
	Path   string // the file, as given in Options.Path; may be empty
	Field  string // e.g. "graph.node[12].attribute[3]"; empty for the top-level message
	Offset int
	Err    error
}

// Error formats the error as "path: field: problem at byte offset".
func (e *DecodeError) Error() string {
	var b strings.Builder
	if e.Path != "" {
		b.WriteString(e.Path)
		b.WriteString(": ")
	}
	if e.Field != "" {
		b.WriteString(e.Field)
		b.WriteString(": ")
	}
	if e.Err != nil {
		b.WriteString(e.Err.Error())
	} else {
		b.WriteString("decoding failed")
	}
	fmt.Fprintf(&b, " at byte %d", e.Offset)
	if e.Field == "" && e.Offset < 16 && !strings.Contains(b.String(), "truncated") {
		// A failure in the first bytes of the top-level message usually
		// means the file is not an ONNX model at all.
		b.WriteString(" (the file does not start like an ONNX ModelProto: is it an ONNX model?)")
	}
	return b.String()
}

// Unwrap returns the underlying problem.
func (e *DecodeError) Unwrap() error { return e.Err }

// within prefixes the field path of a *DecodeError with component, as the
// error travels up from a nested message to its parent.
func within(err error, component string) error {
	if de, ok := err.(*DecodeError); ok {
		switch {
		case de.Field == "":
			de.Field = component
		case strings.HasPrefix(de.Field, "["):
			de.Field = component + de.Field
		default:
			de.Field = component + "." + de.Field
		}
	}
	return err
}

// withinAt is within(err, indexed(field, i)), the index formatted only
// for an error: decoding a large graph passes here for every element.
func withinAt(err error, field string, i int) error {
	if err == nil {
		return nil
	}
	return within(err, indexed(field, i))
}

// indexed names element i of a repeated field.
func indexed(name string, i int) string {
	return fmt.Sprintf("%s[%d]", name, i)
}
