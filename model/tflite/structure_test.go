package tflite

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	"github.com/loadline/loadline/internal/corpus"
)

// The shared models' structure/*.json files are an independent decoding of
// each file: `flatc --json --raw-binary --strict-json --defaults-json` with
// the TFLite schema (FlatBuffers compiler 2.0.8), buffer bytes replaced by
// their count (../shared/models/tflite/README.md). Every field our decoder
// reads must agree with them.

type jsonModel struct {
	Version       uint32 `json:"version"`
	OperatorCodes []struct {
		Deprecated int8   `json:"deprecated_builtin_code"`
		Version    int32  `json:"version"`
		Builtin    string `json:"builtin_code"`
		Custom     string `json:"custom_code"`
	} `json:"operator_codes"`
	Subgraphs []struct {
		Tensors []struct {
			Shape        []int32 `json:"shape"`
			Type         string  `json:"type"`
			Buffer       uint32  `json:"buffer"`
			Name         string  `json:"name"`
			IsVariable   bool    `json:"is_variable"`
			Signature    []int32 `json:"shape_signature"`
			HasRank      bool    `json:"has_rank"`
			Quantization *struct {
				Min       []float64 `json:"min"`
				Max       []float64 `json:"max"`
				Scale     []float64 `json:"scale"`
				ZeroPoint []int64   `json:"zero_point"`
				Dim       int32     `json:"quantized_dimension"`
				Details   string    `json:"details_type"`
			} `json:"quantization"`
			Sparsity any `json:"sparsity"`
		} `json:"tensors"`
		Inputs    []int32 `json:"inputs"`
		Outputs   []int32 `json:"outputs"`
		Name      string  `json:"name"`
		Operators []struct {
			Opcode        uint32         `json:"opcode_index"`
			Inputs        []int32        `json:"inputs"`
			Outputs       []int32        `json:"outputs"`
			OptionsType   string         `json:"builtin_options_type"`
			Options       map[string]any `json:"builtin_options"`
			Intermediates []int32        `json:"intermediates"`
			CustomOptions []byte         `json:"custom_options"`
		} `json:"operators"`
	} `json:"subgraphs"`
	Description string `json:"description"`
	Buffers     []struct {
		DataBytes int    `json:"data_bytes"`
		Offset    uint64 `json:"offset"`
		Size      uint64 `json:"size"`
	} `json:"buffers"`
	Metadata []struct {
		Name   string `json:"name"`
		Buffer uint32 `json:"buffer"`
	} `json:"metadata"`
	SignatureDefs []struct {
		Inputs []struct {
			Name  string `json:"name"`
			Index uint32 `json:"tensor_index"`
		} `json:"inputs"`
		Outputs []struct {
			Name  string `json:"name"`
			Index uint32 `json:"tensor_index"`
		} `json:"outputs"`
		Key      string `json:"signature_key"`
		Subgraph uint32 `json:"subgraph_index"`
	} `json:"signature_defs"`
}

// floatsAgree compares our float32s with flatc's printing of them, which
// rounds to 6 decimal places (0.00014736385 prints as 0.000147).
func floatsAgree(ours []float32, theirs []float64) bool {
	if len(ours) != len(theirs) {
		return false
	}
	for i := range ours {
		a, b := float64(ours[i]), theirs[i]
		if math.Abs(a-b) > 5.01e-7+1e-6*math.Abs(b) {
			return false
		}
	}
	return true
}

func nilIfEmpty[T any](s []T) []T {
	if len(s) == 0 {
		return nil
	}
	return s
}

// TestSharedStructure decodes every shared model and compares it, field by
// field, with flatc's decoding of the same file.
func TestSharedStructure(t *testing.T) {
	dir := corpus.TFLiteDir(t)
	paths := corpus.TFLiteModels(t)
	if len(paths) != 13 { // the README's table lists 13 files
		t.Errorf("%d shared models, the README lists 13", len(paths))
	}
	for _, p := range paths {
		base := strings.TrimSuffix(filepath.Base(p), ".tflite")
		t.Run(base, func(t *testing.T) {
			data, err := os.ReadFile(p)
			if err != nil {
				t.Fatal(err)
			}
			js, err := os.ReadFile(filepath.Join(dir, "structure", base+".json"))
			if err != nil {
				t.Fatal(err)
			}
			var want jsonModel
			if err := json.Unmarshal(js, &want); err != nil {
				t.Fatal(err)
			}
			got, err := Parse(data, p)
			if err != nil {
				t.Fatal(err)
			}
			compareStructure(t, got, &want)
			if _, err := got.Convert(p); err != nil {
				t.Errorf("convert: %v", err)
			}
		})
	}
}

func compareStructure(t *testing.T, got *Model, want *jsonModel) {
	t.Helper()
	errs := 0
	check := func(ok bool, path string, g, w any) {
		if !ok && errs < 20 {
			errs++
			t.Errorf("%s: got %v, flatc %v", path, g, w)
		}
	}
	check(got.Version == want.Version, "version", got.Version, want.Version)
	check(got.Description == want.Description, "description", got.Description, want.Description)
	check(len(got.OperatorCodes) == len(want.OperatorCodes), "operator_codes", len(got.OperatorCodes), len(want.OperatorCodes))
	for i := range min(len(got.OperatorCodes), len(want.OperatorCodes)) {
		g, w := got.OperatorCodes[i], want.OperatorCodes[i]
		path := fmt.Sprintf("operator_codes[%d]", i)
		check(g.DeprecatedBuiltinCode == w.Deprecated, path+".deprecated_builtin_code", g.DeprecatedBuiltinCode, w.Deprecated)
		check(BuiltinOperator(g.BuiltinCode).String() == w.Builtin, path+".builtin_code", BuiltinOperator(g.BuiltinCode), w.Builtin)
		check(g.Version == w.Version, path+".version", g.Version, w.Version)
		check(g.CustomCode == w.Custom, path+".custom_code", g.CustomCode, w.Custom)
	}
	check(len(got.Buffers) == len(want.Buffers), "buffers", len(got.Buffers), len(want.Buffers))
	for i := range min(len(got.Buffers), len(want.Buffers)) {
		g, w := got.Buffers[i], want.Buffers[i]
		path := fmt.Sprintf("buffers[%d]", i)
		check(len(g.Data) == w.DataBytes, path+".data", len(g.Data), w.DataBytes)
		check(g.Offset == w.Offset && g.Size == w.Size, path+".offset/size", [2]uint64{g.Offset, g.Size}, [2]uint64{w.Offset, w.Size})
	}
	check(len(got.Metadata) == len(want.Metadata), "metadata", len(got.Metadata), len(want.Metadata))
	for i := range min(len(got.Metadata), len(want.Metadata)) {
		check(got.Metadata[i].Name == want.Metadata[i].Name && got.Metadata[i].Buffer == want.Metadata[i].Buffer,
			fmt.Sprintf("metadata[%d]", i), got.Metadata[i], want.Metadata[i])
	}
	check(len(got.SignatureDefs) == len(want.SignatureDefs), "signature_defs", len(got.SignatureDefs), len(want.SignatureDefs))
	for i := range min(len(got.SignatureDefs), len(want.SignatureDefs)) {
		g, w := got.SignatureDefs[i], want.SignatureDefs[i]
		path := fmt.Sprintf("signature_defs[%d]", i)
		check(g.SignatureKey == w.Key && g.SubgraphIndex == w.Subgraph, path, g, w)
		check(len(g.Inputs) == len(w.Inputs) && len(g.Outputs) == len(w.Outputs), path+".inputs/outputs", g, w)
		for j := range min(len(g.Inputs), len(w.Inputs)) {
			check(g.Inputs[j].Name == w.Inputs[j].Name && g.Inputs[j].TensorIndex == w.Inputs[j].Index, fmt.Sprintf("%s.inputs[%d]", path, j), g.Inputs[j], w.Inputs[j])
		}
		for j := range min(len(g.Outputs), len(w.Outputs)) {
			check(g.Outputs[j].Name == w.Outputs[j].Name && g.Outputs[j].TensorIndex == w.Outputs[j].Index, fmt.Sprintf("%s.outputs[%d]", path, j), g.Outputs[j], w.Outputs[j])
		}
	}
	check(len(got.Subgraphs) == len(want.Subgraphs), "subgraphs", len(got.Subgraphs), len(want.Subgraphs))
	for s := range min(len(got.Subgraphs), len(want.Subgraphs)) {
		g, w := &got.Subgraphs[s], &want.Subgraphs[s]
		sp := fmt.Sprintf("subgraphs[%d]", s)
		check(g.Name == w.Name, sp+".name", g.Name, w.Name)
		check(reflect.DeepEqual(nilIfEmpty(g.Inputs), nilIfEmpty(w.Inputs)), sp+".inputs", g.Inputs, w.Inputs)
		check(reflect.DeepEqual(nilIfEmpty(g.Outputs), nilIfEmpty(w.Outputs)), sp+".outputs", g.Outputs, w.Outputs)
		check(len(g.Tensors) == len(w.Tensors), sp+".tensors", len(g.Tensors), len(w.Tensors))
		for i := range min(len(g.Tensors), len(w.Tensors)) {
			gt, wt := &g.Tensors[i], &w.Tensors[i]
			tp := fmt.Sprintf("%s.tensors[%d]", sp, i)
			check(reflect.DeepEqual(nilIfEmpty(gt.Shape), nilIfEmpty(wt.Shape)), tp+".shape", gt.Shape, wt.Shape)
			check(gt.Type.String() == wt.Type, tp+".type", gt.Type, wt.Type)
			check(gt.Buffer == wt.Buffer, tp+".buffer", gt.Buffer, wt.Buffer)
			check(gt.Name == wt.Name, tp+".name", gt.Name, wt.Name)
			check(gt.IsVariable == wt.IsVariable, tp+".is_variable", gt.IsVariable, wt.IsVariable)
			check(gt.HasRank == wt.HasRank, tp+".has_rank", gt.HasRank, wt.HasRank)
			check(reflect.DeepEqual(gt.ShapeSignature, wt.Signature), tp+".shape_signature", gt.ShapeSignature, wt.Signature)
			check((gt.Sparsity != nil) == (wt.Sparsity != nil), tp+".sparsity", gt.Sparsity, wt.Sparsity)
			check((gt.Quantization != nil) == (wt.Quantization != nil), tp+".quantization", gt.Quantization, wt.Quantization)
			if gq, wq := gt.Quantization, wt.Quantization; gq != nil && wq != nil {
				check(floatsAgree(gq.Scale, wq.Scale), tp+".quantization.scale", gq.Scale, wq.Scale)
				check(floatsAgree(gq.Min, wq.Min), tp+".quantization.min", gq.Min, wq.Min)
				check(floatsAgree(gq.Max, wq.Max), tp+".quantization.max", gq.Max, wq.Max)
				check(reflect.DeepEqual(nilIfEmpty(gq.ZeroPoint), nilIfEmpty(wq.ZeroPoint)), tp+".quantization.zero_point", gq.ZeroPoint, wq.ZeroPoint)
				check(gq.QuantizedDimension == wq.Dim, tp+".quantization.quantized_dimension", gq.QuantizedDimension, wq.Dim)
				check((gq.DetailsType == 0) == (wq.Details == "NONE"), tp+".quantization.details_type", gq.DetailsType, wq.Details)
			}
		}
		check(len(g.Operators) == len(w.Operators), sp+".operators", len(g.Operators), len(w.Operators))
		for i := range min(len(g.Operators), len(w.Operators)) {
			gop, wop := &g.Operators[i], &w.Operators[i]
			op := fmt.Sprintf("%s.operators[%d]", sp, i)
			check(gop.OpcodeIndex == wop.Opcode, op+".opcode_index", gop.OpcodeIndex, wop.Opcode)
			check(reflect.DeepEqual(nilIfEmpty(gop.Inputs), nilIfEmpty(wop.Inputs)), op+".inputs", gop.Inputs, wop.Inputs)
			check(reflect.DeepEqual(nilIfEmpty(gop.Outputs), nilIfEmpty(wop.Outputs)), op+".outputs", gop.Outputs, wop.Outputs)
			check(reflect.DeepEqual(nilIfEmpty(gop.Intermediates), nilIfEmpty(wop.Intermediates)), op+".intermediates", gop.Intermediates, wop.Intermediates)
			check(gop.OptionsName() == wop.OptionsType, op+".builtin_options_type", gop.OptionsName(), wop.OptionsType)
			// Every option we decode agrees with flatc's value.
			for _, o := range gop.Options {
				wv, ok := wop.Options[o.Name]
				if !ok {
					check(false, op+".builtin_options."+o.Name, o, "absent")
					continue
				}
				var same bool
				switch o.Kind {
				case OptEnum:
					same = wv == o.Enum
				case OptBool:
					same = wv == (o.Int != 0)
				case OptInt:
					f, isNum := wv.(float64)
					same = isNum && int64(f) == o.Int
					if s, isStr := wv.(string); isStr && o.Name == "weights_format" {
						same = (s == "DEFAULT") == (o.Int == 0)
					}
				case OptFloat:
					f, isNum := wv.(float64)
					same = isNum && floatsAgree([]float32{o.Float}, []float64{f})
				case OptInts:
					l, _ := wv.([]any)
					same = len(l) == len(o.Ints)
					for k := range min(len(l), len(o.Ints)) {
						if f, _ := l[k].(float64); int32(f) != o.Ints[k] {
							same = false
						}
					}
				}
				check(same, op+".builtin_options."+o.Name, o, wv)
			}
		}
	}
}
