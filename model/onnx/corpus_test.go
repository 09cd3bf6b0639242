package onnx

import (
	"errors"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"testing"

	"github.com/loadline/loadline/internal/corpus"
	"github.com/loadline/loadline/model"
)

// corpusModels is the number of model.onnx files in Debian's
// libonnx-testdata 1.12 (`dpkg -L libonnx-testdata | grep -c model.onnx`).
const corpusModels = 1072

var pbName = regexp.MustCompile(`^(input|output)_(\d+)\.pb$`)

// TestCorpusDecodes decodes every model of ONNX's backend test suite
// (Debian libonnx-testdata) and every test_data_set_*/input_N.pb and
// output_N.pb whose graph input or output N is a tensor (the suite's own
// runner, onnx/backend/test/runner, picks TensorProto, SequenceProto,
// MapProto or OptionalProto the same way, by the declared type). Every
// tensor's values must be sub-slices of the file's bytes.
func TestCorpusDecodes(t *testing.T) {
	paths := corpus.Models(t)
	if len(paths) != corpusModels {
		t.Errorf("found %d corpus models, libonnx-testdata ships %d", len(paths), corpusModels)
	}
	var tensors, nonTensor int
	for _, p := range paths {
		data, err := os.ReadFile(p)
		if err != nil {
			t.Fatal(err)
		}
		m, err := Decode(data, Options{Path: p})
		if err != nil {
			t.Errorf("%v", err)
			continue
		}
		forEachTensor(m, func(where string, tn *model.Tensor) {
			for _, seg := range tn.Data.Segments {
				if !inside(data, seg) {
					t.Errorf("%s: %s %q: values were copied, not sub-sliced", p, where, tn.Name)
				}
			}
		})
		sets, _ := filepath.Glob(filepath.Join(filepath.Dir(p), "test_data_set_*", "*.pb"))
		for _, pb := range sets {
			match := pbName.FindStringSubmatch(filepath.Base(pb))
			if match == nil {
				continue
			}
			i, _ := strconv.Atoi(match[2])
			vis := m.Graph.Inputs
			if match[1] == "output" {
				vis = m.Graph.Outputs
			}
			if i >= len(vis) {
				t.Errorf("%s: graph has no %s %d", pb, match[1], i)
				continue
			}
			if vis[i].Type.Kind != model.KindTensor {
				nonTensor++ // a SequenceProto, MapProto or OptionalProto
				continue
			}
			b, err := os.ReadFile(pb)
			if err != nil {
				t.Fatal(err)
			}
			tn, err := DecodeTensor(b)
			if err != nil {
				t.Errorf("%s: %v", pb, err)
				continue
			}
			tensors++
			for _, seg := range tn.Data.Segments {
				if !inside(b, seg) {
					t.Errorf("%s: values were copied, not sub-sliced", pb)
				}
			}
			// The declared dtype must match the stored one, except that the
			// suite stores bfloat16 test data as UINT16 (numpy has no
			// bfloat16; onnx/backend/test/case/node/cast.py).
			want := vis[i].Type.DType
			if want == model.BFloat16 && tn.DType == model.Uint16 {
				want = model.Uint16
			}
			if want != tn.DType {
				t.Errorf("%s: dtype %s, graph declares %s", pb, tn.DType, want)
			}
		}
	}
	t.Logf("%d models, %d tensor .pb files decoded; %d .pb files hold sequences, maps or optionals (not TensorProto)", len(paths), tensors, nonTensor)
}

// TestCorpusRoundTrip encodes every corpus model and decodes it again: the
// result must equal the first decode, field by field.
func TestCorpusRoundTrip(t *testing.T) {
	for _, p := range corpus.Models(t) {
		m1, err := DecodeFile(p, Options{})
		if err != nil {
			t.Errorf("%v", err)
			continue
		}
		enc, err := Encode(m1)
		if err != nil {
			t.Errorf("%s: encode: %v", p, err)
			continue
		}
		m2, err := Decode(enc, Options{Path: p + " (re-encoded)"})
		if err != nil {
			t.Errorf("%s: decode of re-encoded model: %v", p, err)
			continue
		}
		if d := diff(m1, m2); d != "" {
			t.Errorf("%s: round trip differs at %s", p, d)
		}
	}
}

// TestCorpusTensorRoundTrip does the same for the suite's tensor files.
func TestCorpusTensorRoundTrip(t *testing.T) {
	dir := corpus.Require(t)
	pbs, _ := filepath.Glob(filepath.Join(dir, "node", "*", "test_data_set_0", "*.pb"))
	n := 0
	for _, pb := range pbs {
		b, err := os.ReadFile(pb)
		if err != nil {
			t.Fatal(err)
		}
		t1, err := DecodeTensor(b)
		if err != nil {
			continue // sequences and optionals; TestCorpusDecodes covers which
		}
		enc, err := EncodeTensor(t1)
		if err != nil {
			t.Errorf("%s: %v", pb, err)
			continue
		}
		t2, err := DecodeTensor(enc)
		if err != nil {
			t.Errorf("%s: decode of re-encoded tensor: %v", pb, err)
			continue
		}
		if d := diff(t1, t2); d != "" {
			t.Errorf("%s: round trip differs at %s", pb, d)
		}
		n++
	}
	if n == 0 {
		t.Fatal("no tensor files found")
	}
}

// TestCorpusOneFileError checks the error of a corpus model made invalid
// names the file.
func TestCorpusErrorNamesFile(t *testing.T) {
	paths := corpus.Models(t)
	data, err := os.ReadFile(paths[0])
	if err != nil {
		t.Fatal(err)
	}
	_, err = Decode(data[:len(data)-1], Options{Path: paths[0]})
	var de *DecodeError
	if !errors.As(err, &de) || de.Path != paths[0] {
		t.Fatalf("error %v does not name %s", err, paths[0])
	}
}
