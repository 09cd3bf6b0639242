// Package format is the one door through which loadline opens a model file,
// whatever its format: it recognises the format by the file's content and
// hands the bytes to that format's decoder.
//
// The door is a package of its own, beside the decoders, rather than a
// function of package model: the decoders (model/onnx, model/tflite) import
// model for the graph types they produce, so model cannot import them
// without an import cycle. Registration (decoders adding themselves to a
// table in model from init functions) would break the cycle too, but every
// caller would then have to remember a blank import to get a format; here
// importing the door is enough.
package format

import (
	"bytes"
	"errors"
	"fmt"
	"path/filepath"
	"strings"

	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/onnx"
	"github.com/loadline/loadline/model/tflite"
)

// The formats loadline reads, as model.Model.Format and the JSON contract
// name them.
const (
	ONNX   = "onnx"
	TFLite = "tflite"
)

// Readable says which formats loadline reads, for messages.
const Readable = "ONNX (.onnx) and TFLite (.tflite)"

// Options tell a decoder where the data comes from.
type Options struct {
	// Dir is the folder an ONNX model's external data is resolved against;
	// by default the folder of the file's name.
	Dir string
	// ReadFile reads external data files; by default the operating
	// system's file system.
	ReadFile func(name string) ([]byte, error)
	// Passed is onnx.Options.Passed, for an ONNX model.
	Passed func(offset int)
}

// tfliteIdentifier is the FlatBuffers file identifier of a TFLite model,
// stored in bytes 4 to 7 (TensorFlow Lite schema, file_identifier "TFL3").
var tfliteIdentifier = []byte("TFL3")

// Detect names the format of a model file by its content: the TFLite
// identifier at byte 4 makes a TFLite FlatBuffer, anything else is read as
// an ONNX protobuf. The extension is only a hint: it is used to explain a
// file whose content does not match it.
func Detect(data []byte) string {
	if len(data) >= 8 && bytes.Equal(data[4:8], tfliteIdentifier) {
		return TFLite
	}
	return ONNX
}

// Hint is the format a file's extension suggests, or "" when the extension
// names none.
func Hint(name string) string {
	switch strings.ToLower(filepath.Ext(name)) {
	case ".onnx":
		return ONNX
	case ".tflite":
		return TFLite
	}
	return ""
}

// ErrUnknown is wrapped by the error of a file in no format loadline reads.
var ErrUnknown = errors.New("unknown model format")

// Open decodes the model file name held in data, choosing the decoder by
// content. data stays owned by the caller and must not change while the
// model is in use: decoders keep weights as sub-slices of it. An error
// names the file.
func Open(name string, data []byte, opts Options) (*model.Model, error) {
	hint := Hint(name)
	switch Detect(data) {
	case TFLite:
		return tflite.Decode(data, tflite.Options{Path: name})
	}
	if hint == TFLite {
		return nil, fmt.Errorf("%s: not a TFLite model: no %q identifier at byte 4 (loadline reads %s files)", name, tfliteIdentifier, Readable)
	}
	m, err := onnx.Decode(data, onnx.Options{Path: name, Dir: opts.Dir, ReadFile: opts.ReadFile, Passed: opts.Passed})
	if err != nil {
		if hint == "" {
			return nil, fmt.Errorf("%s: %w: neither a TFLite FlatBuffer nor an ONNX protobuf (loadline reads %s files): %w", name, ErrUnknown, Readable, err)
		}
		return nil, err
	}
	return m, nil
}
