package target

import (
	"encoding/json"
	"os"
	"path/filepath"
	"testing"

	"github.com/loadline/loadline/internal/corpus"
)

// The MLPerf Tiny inference results measured on an STM32 Nucleo-L4R5ZI
// board (Arm Cortex-M4F at 120 MHz): latency = 1 / the median throughput
// the harness printed, energy = the "median energy cost" of the energy run.
// Reference kernels: mlcommons/tiny_results_v0.5,
// closed/reference/results/Nucleo-L4R5ZI/*/{performance,energy}/results.txt.
// Optimised kernels: mlcommons/tiny_results_v1.0,
// closed/OctoML/results/microtvm_cmsis_nn/NUCLEO_L4R5ZI/.
type published struct {
	file      string
	latencyMS float64
	energyUJ  float64
}

var (
	// mlcommons/tiny_results_v0.5, closed/reference, Nucleo-L4R5ZI.
	publishedReference = []published{
		{"kws_ref_model", 181.9, 7374},
		{"vww_96_int8", 600.6, 24313},
		{"pretrainedResnet_quant", 704.2, 29207},
		{"ad01_int8", 10.05, 416},
	}
	// mlcommons/tiny_results_v1.0, closed/OctoML, microtvm_cmsis_nn, NUCLEO_L4R5ZI.
	publishedOptimized = []published{
		{"kws_ref_model", 99.8, 5230},
		{"vww_96_int8", 301.2, 15531},
		{"pretrainedResnet_quant", 389.6, 20236},
		{"ad01_int8", 8.60, 443},
	}
)

// sharedTFLite returns ../shared/models/tflite from the module root, or
// skips (fails with LOADLINE_REQUIRE_CORPUS=1) when it is absent.
func sharedTFLite(t testing.TB) string {
	t.Helper()
	dir, err := os.Getwd()
	if err != nil {
		t.Fatal(err)
	}
	for {
		if _, err := os.Stat(filepath.Join(dir, "go.mod")); err == nil {
			break
		}
		up := filepath.Dir(dir)
		if up == dir {
			corpus.Missing(t, "module root not found")
			return ""
		}
		dir = up
	}
	p := filepath.Join(dir, "..", "shared", "models", "tflite")
	if _, err := os.Stat(p); err != nil {
		corpus.Missing(t, "shared TFLite models not found at "+p)
	}
	return p
}

// structureNodes reads the flatc decoding of a shared model
// (structure/NAME.json, made by the FlatBuffers compiler from the file, see
// the folder's README) into the cost model's nodes, with MACs by the
// folder's reference.json definitions: CONV_2D output elements × kh × kw ×
// C_in, DEPTHWISE_CONV_2D output elements × kh × kw, FULLY_CONNECTED output
// elements × K. It is an oracle apart from loadline's own TFLite reader.
func structureNodes(t testing.TB, name string) []Node {
	t.Helper()
	data, err := os.ReadFile(filepath.Join(sharedTFLite(t), "structure", name+".json"))
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

func samplesOf(t testing.TB, rows []published) []Sample {
	var out []Sample
	for _, r := range rows {
		out = append(out, Sample{Name: r.file, Nodes: structureNodes(t, r.file), LatencyMS: r.latencyMS, EnergyUJ: r.energyUJ})
	}
	return out
}

// TestBuiltinCalibration repeats the calibration of the built-in targets on
// their rows of published measurements (the MLPerf Tiny results above, over
// the flatc decoding of the four shared models) and checks that the
// shipped numbers are the fit's, that every latency is estimated within
// 15 % and every reference-kernel energy within 10 %. It logs the
// leave-one-out errors (fit on three models, predict the fourth), the
// honest figure for a model nobody measured; the README quotes them.
func TestBuiltinCalibration(t *testing.T) {
	for _, c := range []struct {
		name      string
		rows      []published
		energyMax float64
	}{
		{"m4-reference", publishedReference, 10}, // energy within 10 % on the four reference runs
		{"m4-optimized", publishedOptimized, 15},
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
