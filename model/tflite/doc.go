// Package tflite decodes TFLite model files (FlatBuffers with the
// TensorFlow Lite schema) into loadline's format-neutral model types, and
// encodes them, for tests and the demo.
//
// The FlatBuffers are read by hand-written, bounded accessors (flat.go)
// rather than the Go FlatBuffers runtime (github.com/google/flatbuffers/go):
// the runtime's generated accessors trust the buffer — an offset or a
// vector length pointing outside it panics with an index error, and
// nothing bounds how often a shared table is decoded — so every access
// would need checking around it anyway, and its code generator would put
// the schema file into the repository. Field ids and enum values are the
// published schema's (TensorFlow Lite schema.fbs, version 3), written in
// schema.go as facts.
//
// Parse reads the file into the schema's own tables (Model, Subgraph,
// Tensor, Operator, …): every field loadline or its tests need, the
// quantization parameters, sparsity, signature defs and metadata
// included. Convert maps that onto model types:
//
//   - the main subgraph (index 0) is model.Model.Graph; the subgraphs of
//     WHILE, IF and CALL_ONCE are graph attributes of their operators
//     (cond and body, then_branch and else_branch, init), beside the index
//     options;
//   - a builtin operator is a model.Node with Domain "tflite" and Op the
//     BuiltinOperator enum's name (CONV_2D, DEPTHWISE_CONV_2D, …), read
//     from the larger of deprecated_builtin_code and builtin_code; a custom
//     operator has Domain "tflite.custom" and Op its custom_code; builtin
//     options become attributes of the schema's field names (enums as
//     their names: padding "SAME", fused_activation_function "RELU6");
//   - tensors keep their names, made unique where a file repeats or omits
//     them ("name#12", "tensor#12"); buffer-backed tensors that are not
//     variable are initializers whose values are sub-slices of the file;
//     variable tensors are Graph.State; the others are Graph.ValueInfo;
//     Graph.TensorOrder keeps the tensor table's order;
//   - a -1 in shape_signature becomes a symbolic dim ("batch" at axis 0,
//     "dim<k>" at axis k), with the stored size as its default
//     (Model.DimDefaults), so --dim can bind it;
//   - a sparse tensor is an initializer with its dense dims and no values;
//   - buffers stored after the FlatBuffer (files over 2 GiB: offset and
//     size) are sub-slices of the file too;
//   - metadata: min_runtime_version is kept as text,
//     OfflineMemoryAllocation becomes Graph.PlannedOffsets, others are
//     listed by size.
//
// Bad input gives a *DecodeError naming the file, the table path
// (subgraphs[0].tensors[12].quantization.scale) and the byte offset; it
// never panics. Memory is bounded by a small multiple of the input: every
// offset and vector length is checked against the buffer before use, the
// elements decoded in all are limited to a few times the file's size
// (spendLimit: tables shared many times cannot multiply), and subgraph
// nesting is limited by MaxDepth, with cycles refused.
package tflite
