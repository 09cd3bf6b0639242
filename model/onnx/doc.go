// Package onnx decodes ONNX model files into loadline's format-neutral
// model types, and encodes them back for tests and the demo.
//
// The decoder is written directly on the protobuf wire format
// (google.golang.org/protobuf/encoding/protowire); field numbers follow the
// ONNX standard's onnx.proto. It is plumbing: bytes to graph, nothing else.
//
// Weights are never copied: every tensor's values are sub-slices of the
// input (model.TensorData.Segments), so decoding a file costs time and
// memory in proportion to its metadata, not its weights. External data is
// located and checked at decode time and read only when a caller asks
// (model.ExternalData.Load).
//
// Mapping notes, where the model types are narrower than onnx.proto:
//
//   - A TypeProto map becomes a model.Type of KindMap whose DType is the key
//     type and whose Elem is the value type.
//   - A sequence's DType is its element's DType when the element is a tensor.
//   - A dimension with neither dim_value nor dim_param (or an empty
//     dim_param) becomes a fresh symbol "?1", "?2", … numbered in file order
//     and unique within the model (names the file itself uses are skipped).
//     The encoder writes every symbol, fresh ones included, as a dim_param,
//     so decode(encode(m)) reproduces m exactly.
//   - Only the field an attribute's kind names is kept. When an old model
//     omits AttributeProto.type, the kind is inferred from the field set.
//   - doc_string fields, denotations, training_info, quantization
//     annotations, FunctionProto.value_info, the values of a SPARSE_TENSORS
//     attribute and other fields the model types have no place for are
//     checked (embedded messages decoded where the types know them) or
//     skipped, and dropped.
//
// Bad input gives a *DecodeError naming the file, the field path and the
// byte offset; it never panics. Memory use is bounded by a small multiple of
// the input size: every length is checked against the remaining input before
// anything is allocated, dims×dtype must agree with the stored bytes, and
// subgraph and type nesting is limited by Options.MaxDepth.
package onnx
