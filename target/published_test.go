package target

import (
	"encoding/json"
	"os"
	"path/filepath"
	"testing"

	"github.com/loadline/loadline/internal/corpus"
)

// structureNodes reads the flatc decoding of a shared model
// (structure/NAME.json, made by the FlatBuffers compiler from the file, see
// the folder's README) into the cost model's nodes, with MACs by the
// folder's reference.json definitions: CONV_2D output elements × kh × kw ×
// C_in, DEPTHWISE_CONV_2D output elements × kh × kw, FULLY_CONNECTED output
// elements × K. It is an oracle apart from loadline's own TFLite reader.
func structureNodes(t testing.TB, name string) []Node {
	t.Helper()
	data, err := os.ReadFile(filepath.Join(corpus.TFLiteDir(t), "structure", name+".json"))
	if err != nil {
		t.Fatal(err)
	}
	var doc struct {
		OperatorCodes []struct {
			Deprecated int    `json:"deprecated_builtin_code"`
			Builtin    string `json:"builtin_code"`
			Custom     string `json:"custom_code"`
		} `json:"operator_codes"`
		Subgraphs []struct {
			Tensors []struct {
				Shape  []int64 `json:"shape"`
				Type   string  `json:"type"`
				Buffer int     `json:"buffer"`
			} `json:"tensors"`
			Operators []struct {
				Opcode  int   `json:"opcode_index"`
				Inputs  []int `json:"inputs"`
				Outputs []int `json:"outputs"`
			} `json:"operators"`
		} `json:"subgraphs"`
		Buffers []struct {
			DataBytes int64 `json:"data_bytes"`
		} `json:"buffers"`
	}
	if err := json.Unmarshal(data, &doc); err != nil {
		t.Fatal(err)
	}
	// Names of the deprecated codes the shared files use (schema.fbs
	// BuiltinOperator enum).
	deprecated := map[int]string{0: "ADD", 1: "AVERAGE_POOL_2D", 3: "CONV_2D", 4: "DEPTHWISE_CONV_2D", 6: "DEQUANTIZE",
		9: "FULLY_CONNECTED", 14: "LOGISTIC", 22: "RESHAPE", 25: "SOFTMAX", 27: "SVDF", 44: "UNIDIRECTIONAL_SEQUENCE_LSTM", 114: "QUANTIZE"}
	size := map[string]int64{"INT8": 1, "UINT8": 1, "INT16": 2, "INT32": 4, "FLOAT32": 4, "INT64": 8, "BOOL": 1}
	dtype := map[string]string{"INT8": "int8", "UINT8": "uint8", "INT16": "int16", "INT32": "int32", "FLOAT32": "float32", "INT64": "int64", "BOOL": "bool"}
	sg := doc.Subgraphs[0]
	elems := func(i int) int64 {
		n := int64(1)
		for _, d := range sg.Tensors[i].Shape {
			n *= d
		}
		return n
	}
	var nodes []Node
	for step, op := range sg.Operators {
		oc := doc.OperatorCodes[op.Opcode]
		name := oc.Builtin
		if name == "ADD" || name == "" {
			name = deprecated[oc.Deprecated]
		}
		n := Node{Step: step, Name: name, Op: name, Domain: "tflite"}
		if oc.Builtin == "CUSTOM" {
			n.Op, n.Domain = oc.Custom, "tflite.custom"
		}
		for k, i := range op.Inputs {
			if i < 0 {
				continue
			}
			tn := sg.Tensors[i]
			if k == 0 {
				n.InElements = elems(i)
				n.DType = dtype[tn.Type]
			}
			if b := doc.Buffers[tn.Buffer].DataBytes; b > 0 {
				n.WeightBytes += b
			} else {
				n.ActivationBytes += elems(i) * size[tn.Type]
			}
		}
		for _, o := range op.Outputs {
			n.OutElements += elems(o)
			n.ActivationBytes += elems(o) * size[sg.Tensors[o].Type]
		}
		out := elems(op.Outputs[0])
		switch name {
		case "CONV_2D":
			w := sg.Tensors[op.Inputs[1]].Shape // [C_out, kh, kw, C_in]
			n.MACs = out * w[1] * w[2] * w[3]
		case "DEPTHWISE_CONV_2D":
			w := sg.Tensors[op.Inputs[1]].Shape // [1, kh, kw, C_out]
			n.MACs = out * w[1] * w[2]
		case "FULLY_CONNECTED":
			w := sg.Tensors[op.Inputs[1]].Shape // [units, K]
			n.MACs = out * w[1]
		}
		nodes = append(nodes, n)
	}
	return nodes
}

func TestStructureNodesMACs(t *testing.T) {
	// reference.json in the shared folder: macs of each MLPerf Tiny model.
	want := map[string]int64{"kws_ref_model": 2656768, "vww_96_int8": 7489664, "pretrainedResnet_quant": 12501632, "ad01_int8": 264192}
	for name, macs := range want {
		var got int64
		for _, n := range structureNodes(t, name) {
			got += n.MACs
		}
		if got != macs {
			t.Errorf("%s: %d MACs, reference.json says %d", name, got, macs)
		}
	}
}

func samplesOf(t testing.TB, rows []Measurement) []Sample {
	var out []Sample
	for _, r := range rows {
		out = append(out, Sample{Name: r.Model, Nodes: structureNodes(t, r.Model), LatencyMS: r.LatencyMS, EnergyUJ: r.EnergyUJ})
	}
	return out
}

// TestBuiltinCalibration repeats the calibration of the built-in targets on
// their rows of published measurements (MLPerfTinyReference and
// MLPerfTinyOptimized: mlcommons/tiny_results_v0.5 closed/reference and
// tiny_results_v1.0 closed/OctoML microtvm_cmsis_nn, Nucleo-L4R5ZI), over
// the flatc decoding of the four shared models and checks that the
// shipped numbers are the fit's, that every latency is estimated within
// 15 % and every reference-kernel energy within 10 %. It logs the
// leave-one-out errors (fit on three models, predict the fourth), the
// honest figure for a model nobody measured; the README quotes them.
func TestBuiltinCalibration(t *testing.T) {
	for _, c := range []struct {
		name      string
		rows      []Measurement
		energyMax float64
	}{
		{"m4-reference", MLPerfTinyReference, 10}, // energy within 10 % on the four reference runs
		{"m4-optimized", MLPerfTinyOptimized, 15},
	} {
		t.Run(c.name, func(t *testing.T) {
			shipped := Builtin[c.name]
			samples := samplesOf(t, c.rows)
			fit, err := Calibrate(shipped, samples, nil, WeightsFlash)
			if err != nil {
				t.Fatal(err)
			}
			if fit.Underdetermined != "" {
				t.Errorf("under-determined: %s", fit.Underdetermined)
			}
			if len(fit.Free) != 3 {
				t.Errorf("fitted %v, want conv, depthwise and dense: three numbers from four measurements", fit.Free)
			}
			for _, k := range fit.Free {
				got, want := shipped.Classes[k].PerUnit, fit.Target.Classes[k].PerUnit
				if d := (got - want) / want; d > 0.01 || d < -0.01 {
					t.Errorf("%s per_unit shipped %.4g, the fit gives %.4g", k, got, want)
				}
			}
			if d := (shipped.PowerMW - fit.Target.PowerMW) / fit.Target.PowerMW; d > 0.01 || d < -0.01 {
				t.Errorf("power shipped %.4g mW, the fit gives %.4g", shipped.PowerMW, fit.Target.PowerMW)
			}
			for _, s := range errorsOf(shipped, samples, WeightsFlash) {
				t.Logf("%-24s latency %7.2f ms (published %7.2f) %+6.1f %%   energy %8.0f µJ (published %6.0f) %+6.1f %%",
					s.Name, s.EstimatedMS, s.MeasuredMS, s.ErrorPct, s.EstimatedUJ, s.MeasuredUJ, s.EnergyErrorPct)
				if s.ErrorPct > 15 || s.ErrorPct < -15 {
					t.Errorf("%s: latency %.1f ms against the published %.1f ms: %+.1f %%, more than 15 %%", s.Name, s.EstimatedMS, s.MeasuredMS, s.ErrorPct)
				}
				if s.EnergyErrorPct > c.energyMax || s.EnergyErrorPct < -c.energyMax {
					t.Errorf("%s: energy %.0f µJ against the published %.0f µJ: %+.1f %%, more than %.0f %%", s.Name, s.EstimatedUJ, s.MeasuredUJ, s.EnergyErrorPct, c.energyMax)
				}
			}
			for _, s := range fit.LeaveOneOut {
				t.Logf("leave-one-out %-24s latency %7.2f ms (published %7.2f) %+6.1f %%   energy %+6.1f %%", s.Name, s.EstimatedMS, s.MeasuredMS, s.ErrorPct, s.EnergyErrorPct)
			}
		})
	}
}
