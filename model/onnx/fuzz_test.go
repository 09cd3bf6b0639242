package onnx

import (
	"errors"
	"os"
	"path/filepath"
	"sort"
	"testing"

	"github.com/loadline/loadline/internal/corpus"
)

// fuzzCorpusFiles returns up to n of the smallest files matching pattern in
// the backend test suite, when it is installed; fuzzing works without it.
func fuzzCorpusFiles(pattern string, n int) [][]byte {
	dir := corpus.Dir()
	if dir == "" {
		return nil
	}
	paths, _ := filepath.Glob(filepath.Join(dir, pattern))
	type file struct {
		path string
		size int64
	}
	var files []file
	for _, p := range paths {
		if st, err := os.Stat(p); err == nil && st.Size() < 8<<10 {
			files = append(files, file{p, st.Size()})
		}
	}
	sort.Slice(files, func(i, j int) bool {
		return files[i].size < files[j].size || files[i].size == files[j].size && files[i].path < files[j].path
	})
	// Spread the picks over the size range rather than taking only the tiniest.
	var out [][]byte
	for i := 0; i < n && len(files) > 0; i++ {
		if b, err := os.ReadFile(files[i*len(files)/n].path); err == nil {
			out = append(out, b)
		}
	}
	return out
}

// FuzzDecode: whatever the bytes, Decode returns a model or a *DecodeError
// naming the file, never panics; a model it returns reads its tensors,
// encodes, and decodes to the same model. Seeds: small models of ONNX's
// backend test suite (when installed) and hand-made ones.
func FuzzDecode(f *testing.F) {
	for _, b := range fuzzCorpusFiles("*/*/model.onnx", 20) {
		f.Add(b)
	}
	scratch, err := Encode(scratchModel())
	if err != nil {
		f.Fatal(err)
	}
	f.Add(scratch)
	f.Add(deepIf(3))
	f.Add(deepSequence(3))
	f.Add(externalModel("w.bin", "offset", "4", "length", "16"))
	f.Add(initializerModel(cat(pbString(8, "w"), packedDims(3), pbVarint(2, 22), pbBytes(5, []byte{0x21, 0x03}))))
	f.Add(graphModel(pbBytes(1, cat(pbString(4, "Elu"), pbBytes(5, cat(pbString(1, "alpha"), pbFixed32(2, 0x3f000000)))))))
	f.Add([]byte{})
	f.Fuzz(func(t *testing.T, data []byte) {
		m, err := Decode(data, Options{Path: "fuzz.onnx", ReadFile: func(string) ([]byte, error) { return data, nil }})
		if err != nil {
			var de *DecodeError
			if !errors.As(err, &de) || de.Path != "fuzz.onnx" {
				t.Fatalf("error %v is not a *DecodeError naming the file", err)
			}
			return
		}
		checkDecoded(t, m)
	})
}

// FuzzDecodeTensor: the same for standalone TensorProto files.
func FuzzDecodeTensor(f *testing.F) {
	for _, b := range fuzzCorpusFiles("node/*/test_data_set_0/*.pb", 20) {
		f.Add(b)
	}
	for _, tn := range scratchModel().Graph.Initializers {
		b, err := EncodeTensor(tn)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(b)
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		tn, err := DecodeTensor(data)
		if err != nil {
			var de *DecodeError
			if !errors.As(err, &de) {
				t.Fatalf("error %v is not a *DecodeError", err)
			}
			return
		}
		tn.Float64s(64)
		tn.Int64s(64)
		tn.RawBytes()
		for _, seg := range tn.Data.Segments {
			if !inside(data, seg) {
				t.Fatal("values copied")
			}
		}
		enc, err := EncodeTensor(tn)
		if err != nil {
			t.Fatal(err)
		}
		back, err := DecodeTensor(enc)
		if err != nil {
			t.Fatalf("re-encoded tensor does not decode: %v", err)
		}
		if d := diff(tn, back); d != "" {
			t.Fatalf("round trip differs at %s", d)
		}
	})
}
