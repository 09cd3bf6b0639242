package target

// Measurement is one published measurement of a model on a device: the
// latency of one inference and, when published, its energy.
type Measurement struct {
	Model     string // the model's file name, without extension
	LatencyMS float64
	EnergyUJ  float64
}

// The MLPerf Tiny inference results the built-in targets are calibrated
// on, measured on an STM32 Nucleo-L4R5ZI board (Arm Cortex-M4F at
// 120 MHz): latency = 1 / the median throughput the harness printed;
// energy = the "median energy cost" line of the energy run (a separate
// run). The models are the benchmark's reference models (mlcommons/tiny,
// benchmark/training/*/trained_models/): kws_ref_model (keyword spotting),
// vww_96_int8 (visual wake words), pretrainedResnet_quant (image
// classification), ad01_int8 (anomaly detection).
var (
	// MLPerfTinyReference: TensorFlow Lite Micro with its reference
	// kernels; mlcommons/tiny_results_v0.5,
	// closed/reference/results/Nucleo-L4R5ZI/*/{performance,energy}/results.txt.
	MLPerfTinyReference = []Measurement{
		{"kws_ref_model", 181.9, 7374},
		{"vww_96_int8", 600.6, 24313},
		{"pretrainedResnet_quant", 704.2, 29207},
		{"ad01_int8", 10.05, 416},
	}
	// MLPerfTinyOptimized: compiled with Arm's optimised int8 kernels
	// (CMSIS-NN); mlcommons/tiny_results_v1.0,
	// closed/OctoML/results/microtvm_cmsis_nn/NUCLEO_L4R5ZI/.
	MLPerfTinyOptimized = []Measurement{
		{"kws_ref_model", 99.8, 5230},
		{"vww_96_int8", 301.2, 15531},
		{"pretrainedResnet_quant", 389.6, 20236},
		{"ad01_int8", 8.60, 443},
	}
)

// Calibration names the published measurements a built-in target was
// fitted to.
var Calibration = map[string][]Measurement{
	"m4-reference": MLPerfTinyReference,
	"m4-optimized": MLPerfTinyOptimized,
}
