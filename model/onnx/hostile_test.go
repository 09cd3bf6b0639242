package onnx

import (
	"errors"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"runtime"
	"strings"
	"testing"

	"github.com/loadline/loadline/internal/corpus"
	"github.com/loadline/loadline/model"
	"google.golang.org/protobuf/encoding/protowire"
)

// allocLimit is what a hostile input may make the decoder allocate in all.
const allocLimit = 64 << 20

// allocated returns the bytes fn allocated.
func allocated(fn func()) uint64 {
	var before, after runtime.MemStats
	runtime.ReadMemStats(&before)
	fn()
	runtime.ReadMemStats(&after)
	return after.TotalAlloc - before.TotalAlloc
}

// wantDecodeError checks that err is a *DecodeError naming path, whose
// message contains every one of want.
func wantDecodeError(t *testing.T, err error, path string, want ...string) *DecodeError {
	t.Helper()
	var de *DecodeError
	if !errors.As(err, &de) {
		t.Fatalf("got %v, want a *DecodeError", err)
	}
	msg := err.Error()
	if de.Path != path || !strings.HasPrefix(msg, path+": ") {
		t.Errorf("error %q does not name the file %q", msg, path)
	}
	for _, w := range want {
		if !strings.Contains(msg, w) {
			t.Errorf("error %q does not mention %q", msg, w)
		}
	}
	return de
}

// corpusModel reads one model of the backend test suite by folder name.
func corpusModel(t *testing.T, name string) (string, []byte) {
	t.Helper()
	p := filepath.Join(corpus.Require(t), name, "model.onnx")
	data, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	return p, data
}

// graphRange returns the payload range of ModelProto.graph (field 7).
func graphRange(t *testing.T, data []byte) (lo, hi int) {
	for pos := 0; pos < len(data); {
		num, typ, n := protowire.ConsumeTag(data[pos:])
		if n < 0 {
			t.Fatal("bad model")
		}
		if num == 7 && typ == protowire.BytesType {
			l, k := protowire.ConsumeVarint(data[pos+n:])
			return pos + n + k, pos + n + k + int(l)
		}
		m := protowire.ConsumeFieldValue(num, typ, data[pos+n:])
		pos += n + m
	}
	t.Fatal("model has no graph")
	return 0, 0
}

// TestTruncated cuts a corpus model (ONNX backend test suite) at 16 points
// inside its graph: each must fail with an error naming the file and
// saying it is truncated.
func TestTruncated(t *testing.T) {
	path, data := corpusModel(t, "node/test_layer_normalization_2d_axis0_expanded")
	lo, hi := graphRange(t, data)
	for k := 1; k <= 16; k++ {
		cut := lo + (hi-lo)*k/17
		_, err := Decode(data[:cut], Options{Path: path})
		wantDecodeError(t, err, path, "truncated", "graph", "the file may be truncated")
	}
}

// TestInnerLengthCorrupt breaks one length deep inside a model: the error
// names the field path of the message that holds the broken field, and the
// byte offset of that field.
func TestInnerLengthCorrupt(t *testing.T) {
	attr := cat(pbString(1, "alpha"), pbVarint(20, 1))
	bad := cat(pbString(1, "alpha"), []byte{0x22, 0x7f, 'x'}) // s: length 127, 1 byte there
	node := func(a []byte) []byte { return cat(pbString(4, "LeakyRelu"), pbBytes(5, a)) }
	graph := cat(pbBytes(1, node(attr)), pbBytes(1, node(attr)), pbBytes(1, cat(pbString(4, "Elu"), pbBytes(5, attr), pbBytes(5, attr), pbBytes(5, bad))))
	data := cat(pbVarint(1, 8), pbBytes(7, graph))
	_, err := Decode(data, Options{Path: "model.onnx"})
	de := wantDecodeError(t, err, "model.onnx", "truncated length-delimited field 4 (s): length 127, 1 bytes left")
	if de.Field != "graph.node[2].attribute[2]" {
		t.Errorf("field path %q, want graph.node[2].attribute[2]", de.Field)
	}
	if want := len(data) - 3; de.Offset != want {
		t.Errorf("offset %d, want %d", de.Offset, want)
	}
	if strings.Contains(err.Error(), "file may be truncated") {
		t.Errorf("%v: an inner length is not a truncated file", err)
	}
}

// TestByteFlips flips random bytes of corpus models (ONNX backend test
// suite): decoding may fail or succeed, but never panics, and every error
// names the file. What decodes must encode and decode to the same model.
func TestByteFlips(t *testing.T) {
	for _, c := range []struct {
		name  string
		flips int
	}{
		{"node/test_layer_normalization_2d_axis0_expanded", 2000},
		{"node/test_range_float_type_positive_delta_expanded", 1000}, // a Loop with a body
	} {
		path, data := corpusModel(t, c.name)
		rng := rand.New(rand.NewPCG(1, uint64(len(data))))
		var ok, failed int
		for range c.flips {
			b := append([]byte(nil), data...)
			for range 1 + rng.IntN(3) {
				b[rng.IntN(len(b))] = byte(rng.UintN(256))
			}
			m, err := Decode(b, Options{Path: path, ReadFile: func(string) ([]byte, error) { return b, nil }})
			if err != nil {
				var de *DecodeError
				if !errors.As(err, &de) || de.Path != path {
					t.Fatalf("error %v is not a *DecodeError naming %s", err, path)
				}
				failed++
				continue
			}
			ok++
			checkDecoded(t, m)
		}
		t.Logf("%s: %d flipped copies decoded, %d were refused", c.name, ok, failed)
	}
}

// checkDecoded exercises what a caller does with a decoded model: read
// tensor values and re-encode it. Nothing may panic, and the round trip
// must hold.
func checkDecoded(t testing.TB, m *model.Model) {
	forEachTensor(m, func(where string, tn *model.Tensor) {
		tn.Float64s(64)
		tn.Int64s(64)
		tn.RawBytes()
	})
	enc, err := Encode(m)
	if err != nil {
		t.Fatalf("decoded model does not encode: %v", err)
	}
	back, err := Decode(enc, Options{Path: "re-encoded"})
	if err != nil {
		t.Fatalf("re-encoded model does not decode: %v", err)
	}
	if d := diff(m, back); d != "" {
		t.Fatalf("round trip differs at %s", d)
	}
}

// initializerModel wraps one hand-made TensorProto as a model's initializer.
func initializerModel(tensor []byte) []byte {
	return cat(pbVarint(1, 8), pbBytes(7, cat(pbString(2, "g"), pbBytes(5, tensor))))
}

func packedDims(dims ...int64) []byte {
	var b []byte
	for _, d := range dims {
		b = protowire.AppendVarint(b, uint64(d))
	}
	return pbBytes(1, b)
}

// TestHugeDims feeds initializers whose dims no storage can match: each is
// refused with a clear error, and refusing them allocates next to nothing.
func TestHugeDims(t *testing.T) {
	const e62 = int64(1) << 62
	cases := []struct {
		name   string
		tensor []byte
		want   string
	}{
		{"2^62 float32, no data", cat(packedDims(e62), pbVarint(2, 1), pbString(8, "w")),
			"dims [4611686018427387904] of float32 need more than 2^63-1 bytes"},
		{"2^62 int8, no data", cat(packedDims(e62), pbVarint(2, 3), pbString(8, "w")),
			"stores no values, but dims [4611686018427387904] of int8 need 4611686018427387904 bytes"},
		{"2^62 int8, 16 raw bytes", cat(packedDims(e62), pbVarint(2, 3), pbString(8, "w"), pbBytes(9, make([]byte, 16))),
			"raw_data holds 16 bytes, but dims [4611686018427387904] of int8 need 4611686018427387904 bytes"},
		{"2^62 int4, no data", cat(packedDims(e62), pbVarint(2, 22), pbString(8, "w")),
			"need 2305843009213693952 bytes"},
		{"2^59 int64, 3 int64_data", cat(packedDims(1<<59), pbVarint(2, 7), pbString(8, "w"), pbBytes(7, []byte{1, 2, 3})),
			"int64_data holds 3 values, but dims [576460752303423488] of int64 need 576460752303423488"},
		{"2^62 float32, external", cat(packedDims(e62), pbVarint(2, 1), pbString(8, "w"), pbBytes(13, cat(pbString(1, "location"), pbString(2, "w.bin"))), pbVarint(14, 1)),
			"need more than 2^63-1 bytes"},
		{"[2^32,2^32,4] overflows int64", cat(packedDims(1<<32, 1<<32, 4), pbVarint(2, 1), pbString(8, "w")),
			"dims [4294967296 4294967296 4] hold more than 2^63-1 elements"},
		{"negative dim", cat(packedDims(3, -1), pbVarint(2, 1), pbString(8, "w")),
			`dims[1]: tensor "w": dimension -1 is negative`},
		{"2^62 strings, 2 given", cat(packedDims(e62), pbVarint(2, 8), pbString(8, "w"), pbString(6, "a"), pbString(6, "b")),
			"string_data holds 2 values, but dims [4611686018427387904] of string need 4611686018427387904"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			data := initializerModel(c.tensor)
			var err error
			n := allocated(func() { _, err = Decode(data, Options{Path: "huge.onnx"}) })
			de := wantDecodeError(t, err, "huge.onnx", c.want, `tensor "w"`)
			if !strings.HasPrefix(de.Field, "graph.initializer[0]") {
				t.Errorf("field path %q does not lead to the initializer", de.Field)
			}
			if n > allocLimit {
				t.Errorf("allocated %d bytes refusing it", n)
			}
		})
	}
}

// nested builds a model of depth nested messages without quadratic copying:
// level i is header(i) followed by level i-1, the nested message being the
// last field of each level. head(i, innerLen) returns level i's bytes
// before its nested message; wrap(level) puts the outermost level in a model.
func nested(depth int, leaf []byte, head func(innerLen int) []byte, wrap func(levelLen int) []byte) []byte {
	heads := make([][]byte, depth)
	size := len(leaf)
	for i := range heads {
		heads[i] = head(size)
		size += len(heads[i])
	}
	out := make([]byte, 0, size+64)
	out = append(out, wrap(size)...)
	for i := depth - 1; i >= 0; i-- {
		out = append(out, heads[i]...)
	}
	return append(out, leaf...)
}

// tag appends a field tag and the length of a message of n bytes.
func tag(b []byte, num protowire.Number, n int) []byte {
	b = protowire.AppendTag(b, num, protowire.BytesType)
	return protowire.AppendVarint(b, uint64(n))
}

// deepIf is a model whose graph holds an If whose then_branch holds an If…
// depth levels down.
func deepIf(depth int) []byte {
	attrHead := cat(pbString(1, "then_branch"), pbVarint(20, 5))
	nodeHead := cat(pbString(1, "c"), pbString(2, "y"), pbString(4, "If"))
	leaf := pbString(2, "leaf") // the innermost graph: just a name
	return nested(depth, leaf, func(g int) []byte {
		attr := len(attrHead) + protowire.SizeTag(6) + protowire.SizeVarint(uint64(g)) + g
		node := len(nodeHead) + protowire.SizeTag(5) + protowire.SizeVarint(uint64(attr)) + attr
		// graph{ node{ ...; attribute{ ...; g: <inner graph> } } }
		b := tag(nil, 1, node)
		b = append(b, nodeHead...)
		b = tag(b, 5, attr)
		b = append(b, attrHead...)
		return tag(b, 6, g)
	}, func(g int) []byte {
		return tag(pbVarint(1, 8), 7, g)
	})
}

// deepSequence is a model whose graph input is a sequence of sequences of…
func deepSequence(depth int) []byte {
	leaf := pbBytes(1, pbVarint(1, 1)) // TypeProto{tensor_type{elem_type: FLOAT}}
	return nested(depth, leaf, func(inner int) []byte {
		seq := protowire.SizeTag(1) + protowire.SizeVarint(uint64(inner)) + inner
		return tag(tag(nil, 4, seq), 1, inner) // TypeProto{sequence_type{elem_type: inner}}
	}, func(typ int) []byte {
		vi := len(pbString(1, "x")) + protowire.SizeTag(2) + protowire.SizeVarint(uint64(typ)) + typ
		graph := protowire.SizeTag(11) + protowire.SizeVarint(uint64(vi)) + vi
		b := tag(pbVarint(1, 8), 7, graph)
		b = tag(b, 11, vi)
		b = append(b, pbString(1, "x")...)
		return tag(b, 2, typ)
	})
}

// TestDeepNesting nests subgraphs (and type protos) 10,000 deep: the
// decoder stops at Options.MaxDepth with an error, without deep recursion
// or much allocation. Depths within the limit decode.
func TestDeepNesting(t *testing.T) {
	for _, c := range []struct {
		name string
		gen  func(int) []byte
		want string
	}{
		{"If", deepIf, "subgraphs nested more than 64 deep"},
		{"sequence", deepSequence, "type protos nested more than 64 deep"},
	} {
		t.Run(c.name, func(t *testing.T) {
			data := c.gen(10000)
			var err error
			n := allocated(func() { _, err = Decode(data, Options{Path: "deep.onnx"}) })
			de := wantDecodeError(t, err, "deep.onnx", c.want)
			if !strings.HasPrefix(de.Field, "graph.") {
				t.Errorf("field path %q", de.Field)
			}
			if n > allocLimit {
				t.Errorf("allocated %d bytes refusing a %d-byte model", n, len(data))
			}
			if _, err := Decode(c.gen(DefaultMaxDepth), Options{Path: "ok.onnx"}); err != nil {
				t.Errorf("nesting of exactly %d: %v", DefaultMaxDepth, err)
			}
			if _, err := Decode(c.gen(5), Options{Path: "d.onnx", MaxDepth: 4}); err == nil || !strings.Contains(err.Error(), "more than 4 deep") {
				t.Errorf("MaxDepth 4 let 5 levels through: %v", err)
			}
		})
	}
}

// externalModel is a model with one float32[4] initializer "w" stored
// externally at location, with the given external_data entries.
func externalModel(location string, entries ...string) []byte {
	tensor := cat(packedDims(4), pbVarint(2, 1), pbString(8, "w"),
		pbBytes(13, cat(pbString(1, "location"), pbString(2, location))))
	for i := 0; i+1 < len(entries); i += 2 {
		tensor = cat(tensor, pbBytes(13, cat(pbString(1, entries[i]), pbString(2, entries[i+1]))))
	}
	return initializerModel(cat(tensor, pbVarint(14, 1)))
}

// TestExternalPathsLeavingFolder: external data may only name files inside
// the model's folder.
func TestExternalPathsLeavingFolder(t *testing.T) {
	for _, loc := range []string{"../secret.bin", "/etc/passwd", "a/../../secret.bin", `..\secret.bin`, `C:\secret.bin`, "..", "."} {
		_, err := Decode(externalModel(loc), Options{Path: "models/m.onnx"})
		if err == nil {
			t.Errorf("location %q accepted", loc)
			continue
		}
		wantDecodeError(t, err, "models/m.onnx", `tensor "w"`, fmt.Sprintf("location %q", loc))
	}
	for _, loc := range []string{"w.bin", "sub/w.bin", "./w.bin", "sub/../w.bin"} {
		m, err := Decode(externalModel(loc), Options{Path: "models/m.onnx"})
		if err != nil {
			t.Errorf("location %q: %v", loc, err)
			continue
		}
		x := m.Graph.Initializers[0].Data.External
		if x.Location != loc || !strings.HasPrefix(x.Path, "models/") {
			t.Errorf("location %q resolved to %q", loc, x.Path)
		}
	}
}

// TestExternalData reads external data lazily, through the file system and
// through Options.ReadFile, and checks the range against the file.
func TestExternalData(t *testing.T) {
	dir := t.TempDir()
	payload := make([]byte, 24)
	for i := range payload {
		payload[i] = byte(i)
	}
	if err := os.WriteFile(filepath.Join(dir, "w.bin"), payload, 0o644); err != nil {
		t.Fatal(err)
	}
	modelPath := filepath.Join(dir, "m.onnx")
	var asked []string
	served := func(name string) ([]byte, error) {
		asked = append(asked, name)
		if name != filepath.Join(dir, "w.bin") {
			return nil, os.ErrNotExist
		}
		return payload, nil
	}
	for _, c := range []struct {
		name    string
		entries []string
		want    string // error of Load; "" for success
	}{
		{"whole range", []string{"offset", "8", "length", "16"}, ""},
		{"rest of file", []string{"offset", "8"}, ""},
		{"past the end", []string{"offset", "16", "length", "16"}, "offset 16 + length 16 is past the end of"},
		{"offset past the end", []string{"offset", "100", "length", "16"}, "offset 100 is past the end of"},
		{"rest of file too short", []string{"offset", "12"}, "12 bytes from offset 12, but the tensor's dims and dtype need 16"},
	} {
		for _, read := range []struct {
			name string
			fn   func(string) ([]byte, error)
		}{{"os", nil}, {"ReadFile", served}} {
			t.Run(c.name+"/"+read.name, func(t *testing.T) {
				m, err := Decode(externalModel("w.bin", c.entries...), Options{Path: modelPath, ReadFile: read.fn})
				if err != nil {
					t.Fatal(err)
				}
				w := m.Graph.Initializers[0]
				if w.Data.Encoding != model.EncodingExternal {
					t.Fatalf("encoding %d", w.Data.Encoding)
				}
				b, err := w.RawBytes()
				if c.want == "" {
					if err != nil {
						t.Fatal(err)
					}
					if string(b) != string(payload[8:24]) {
						t.Errorf("read % x", b)
					}
					return
				}
				if err == nil {
					t.Fatalf("read past the file: % x", b)
				}
				for _, s := range []string{modelPath, `tensor "w"`, `external data "w.bin"`, c.want} {
					if !strings.Contains(err.Error(), s) {
						t.Errorf("error %q does not mention %q", err, s)
					}
				}
			})
		}
	}
	if len(asked) == 0 {
		t.Error("Options.ReadFile was never called")
	}
	// A length that disagrees with the dims is refused at decode time.
	_, err := Decode(externalModel("w.bin", "length", "12"), Options{Path: modelPath})
	wantDecodeError(t, err, modelPath, "length 12, but dims [4] of float32 need 16 bytes")
	_, err = Decode(externalModel("w.bin", "offset", "-4"), Options{Path: modelPath})
	wantDecodeError(t, err, modelPath, `bad offset "-4"`)
	// A missing file is the caller's error, reported when read.
	m, err := Decode(externalModel("missing.bin"), Options{Path: modelPath})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := m.Graph.Initializers[0].RawBytes(); err == nil || !strings.Contains(err.Error(), "missing.bin") {
		t.Errorf("missing file: %v", err)
	}
}
