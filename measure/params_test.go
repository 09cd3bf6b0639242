package measure

import (
	"encoding/binary"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/build"
)

// TestParamsPublished checks params on the reference architectures of
// model/build (BatchNormalization unfolded, 224×224, batch 1) against the
// counts torchvision's model documentation publishes (num_params), exactly.
func TestParamsPublished(t *testing.T) {
	cases := []struct {
		arch string
		want int64
	}{
		{"resnet18", 11_689_512},     // torchvision model documentation
		{"resnet50", 25_557_032},     // torchvision model documentation
		{"mobilenet_v2", 3_504_872},  // torchvision model documentation
		{"squeezenet1_1", 1_235_496}, // torchvision model documentation
		{"alexnet", 61_100_840},      // torchvision model documentation
		{"vgg16", 138_357_544},       // torchvision model documentation
	}
	for _, c := range cases {
		t.Run(c.arch, func(t *testing.T) {
			f, ok := build.Architecture(c.arch)
			if !ok {
				t.Fatalf("no architecture %q", c.arch)
			}
			m, err := f(build.Options{Declared: true})
			if err != nil {
				t.Fatal(err)
			}
			met, err := Measure(m, 0, Options{})
			if err != nil {
				t.Fatal(err)
			}
			if met.Params != c.want {
				t.Errorf("params = %d, torchvision publishes %d (diff %+d)", met.Params, c.want, met.Params-c.want)
			}
			if met.ParamBytes != 4*c.want {
				t.Errorf("param_bytes = %d, want 4 × params = %d (float32)", met.ParamBytes, 4*c.want)
			}
			if len(met.Unresolved) > 0 {
				t.Errorf("unresolved nodes: %v", met.Unresolved)
			}
		})
	}
}

// TestParamBytesQuantized: the int8 QDQ twin of MobileNetV2 stores its
// weights in about a quarter of the float model's bytes (common practice:
// 8-bit quantization shrinks fp32 weights about 4×). Its int32 biases and
// the folding of BatchNormalization keep it from being exactly a quarter.
func TestParamBytesQuantized(t *testing.T) {
	f, err := build.MobileNetV2(build.Options{Declared: true})
	if err != nil {
		t.Fatal(err)
	}
	q, err := build.MobileNetV2QDQ(build.Options{Declared: true})
	if err != nil {
		t.Fatal(err)
	}
	mf, err := Measure(f, 0, Options{})
	if err != nil {
		t.Fatal(err)
	}
	mq, err := Measure(q, 0, Options{})
	if err != nil {
		t.Fatal(err)
	}
	ratio := float64(mq.ParamBytes) / float64(mf.ParamBytes)
	t.Logf("param_bytes float32 %d, int8 %d, ratio %.3f", mf.ParamBytes, mq.ParamBytes, ratio)
	if ratio < 0.24 || ratio > 0.27 {
		t.Errorf("int8/float32 param_bytes ratio %.3f, want about 0.25", ratio)
	}
}

// rawTensor is a tensor whose raw bytes are given.
func rawTensor(dt model.DType, dims []int64, b []byte) *model.Tensor {
	return &model.Tensor{Name: "t", DType: dt, Dims: dims, Data: model.TensorData{Encoding: model.EncodingRaw, Segments: [][]byte{b}}}
}

// TestCountZeros checks the zero scan per dtype on hand-written bytes.
func TestCountZeros(t *testing.T) {
	le32 := func(v ...uint32) []byte {
		var b []byte
		for _, x := range v {
			b = binary.LittleEndian.AppendUint32(b, x)
		}
		return b
	}
	le16 := func(v ...uint16) []byte {
		var b []byte
		for _, x := range v {
			b = binary.LittleEndian.AppendUint16(b, x)
		}
		return b
	}
	cases := []struct {
		name string
		t    *model.Tensor
		want int64
	}{
		// IEEE 754: +0 is 0x00000000, -0 is 0x80000000; 0x00000001 is the smallest subnormal, not zero.
		{"float32", rawTensor(model.Float32, []int64{5}, le32(0, 0x80000000, 0x3f800000, 1, 0)), 3},
		// IEEE 754 binary16: ±0 are 0x0000 and 0x8000; 0x3c00 is 1.0.
		{"float16", rawTensor(model.Float16, []int64{4}, le16(0x8000, 0x3c00, 0, 0x0001)), 2},
		// bfloat16: the top half of a float32, -0 is 0x8000.
		{"bfloat16", rawTensor(model.BFloat16, []int64{3}, le16(0x8000, 0x3f80, 0)), 2},
		{"float64", rawTensor(model.Float64, []int64{2}, binary.LittleEndian.AppendUint64(binary.LittleEndian.AppendUint64(nil, 1<<63), 0x3ff0000000000000)), 1},
		{"int8", rawTensor(model.Int8, []int64{6}, []byte{0, 1, 0xff, 0, 0x80, 0}), 3},
		{"int32", rawTensor(model.Int32, []int64{3}, le32(0, 0x80000000, 7)), 1},
		// int4: two a byte, low nibble first; 5 elements use 3 bytes and the last high nibble (0xf) is padding.
		{"int4", rawTensor(model.Int4, []int64{5}, []byte{0x10, 0x00, 0xf3}), 3},
		// float8e4m3fn: 0x80 is -0; float8e4m3fnuz: 0x80 is NaN.
		{"float8e4m3fn", rawTensor(model.Float8E4M3FN, []int64{3}, []byte{0x80, 0x00, 0x38}), 2},
		{"float8e4m3fnuz", rawTensor(model.Float8E4M3FNUZ, []int64{3}, []byte{0x80, 0x00, 0x38}), 1},
		{"declared only", &model.Tensor{Name: "d", DType: model.Float32, Dims: []int64{4}}, -1},
	}
	for _, c := range cases {
		if got, err := countZeros(c.t); err != nil || got != c.want {
			t.Errorf("%s: %d zeros (%v), want %d", c.name, got, err, c.want)
		}
	}
	// Stored values that cannot be read are an error naming the weight.
	if _, err := countZeros(rawTensor(model.Float32, []int64{4}, le32(0, 0))); err == nil || !strings.Contains(err.Error(), "weight") {
		t.Errorf("short bytes: want an error naming the weight, got %v", err)
	}
}

// TestSparsity checks Metrics.Sparsity over the weights with stored
// values: a [2,4] weight with 3 zeros and a declared-only one (skipped).
func TestSparsity(t *testing.T) {
	b := newCostGraph()
	x := b.in("x", f32c, 1, 2)
	w := nnF32("w", []float64{0, 1, 2, 0, 3, 4, 5, math.Copysign(0, -1)}, 2, 4).tensor()
	b.g.Initializers = append(b.g.Initializers, w)
	y := b.node("MatMul", "mm", []string{x, "w"}, "y")
	b.out(b.node("MatMul", "mm2", []string{y, b.w("w2", 4, 3)}, "z"))
	met, err := Measure(b.model(), 0, Options{})
	if err != nil {
		t.Fatal(err)
	}
	// derived: zeros 0, 0 and -0 of w's 8 elements; w2 has no bytes
	if met.Sparsity != 3.0/8 {
		t.Errorf("sparsity %g, want 0.375", met.Sparsity)
	}
	if met.Params != 8+12 {
		t.Errorf("params %d, want 20", met.Params)
	}
	// derived: [1,2]×[2,4] = 4 × 2 = 8 MACs; [1,4]×[4,3] = 3 × 4 = 12; 20 MACs, 40 FLOPs
	if met.MACs != 20 || met.FLOPs != 40 {
		t.Errorf("MACs %d, FLOPs %d; want 20, 40", met.MACs, met.FLOPs)
	}
	m, err := build.ResNet18(build.Options{Declared: true, Size: 64})
	if err != nil {
		t.Fatal(err)
	}
	if met, err = Measure(m, 0, Options{}); err != nil || met.Sparsity != -1 {
		t.Errorf("declared weights: sparsity %g (err %v), want -1", met.Sparsity, err)
	}
}

// TestZeros32MatchesSimpleCount compares the word-at-a-time scan with a
// plain element loop on random data rich in zeros, negative zeros and
// values near the lane boundaries (hand-made property test).
func TestZeros32MatchesSimpleCount(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 11))
	special := []uint32{0, 0x80000000, 1, 0x7fffffff, 0xffffffff, 0x00000100, 0x80000001}
	for trial := 0; trial < 500; trial++ {
		n := rng.IntN(200)
		b := make([]byte, 4*n+rng.IntN(4))
		for i := 0; i < n; i++ {
			v := rng.Uint32()
			if rng.IntN(3) == 0 {
				v = special[rng.IntN(len(special))]
			}
			binary.LittleEndian.PutUint32(b[4*i:], v)
		}
		for _, mask := range []uint32{0x7fffffff, 0xffffffff} {
			var want int64
			for i := 0; i+4 <= len(b); i += 4 {
				if binary.LittleEndian.Uint32(b[i:])&mask == 0 {
					want++
				}
			}
			if got := zeros32(b, mask); got != want {
				t.Fatalf("trial %d mask %#x: zeros32 = %d, simple loop = %d", trial, mask, got, want)
			}
		}
	}
}

// TestDeployedArenaQuantized: the int8 QDQ twin's deployed arena is a
// quarter of the float model's (common practice: int8 activations take a
// quarter of float32's bytes; the QDQ pairs fold away in the deployed view).
func TestDeployedArenaQuantized(t *testing.T) {
	f, err := build.MobileNetV2(build.Options{Declared: true})
	if err != nil {
		t.Fatal(err)
	}
	q, err := build.MobileNetV2QDQ(build.Options{Declared: true})
	if err != nil {
		t.Fatal(err)
	}
	mf, err := Measure(f, 0, Options{})
	if err != nil {
		t.Fatal(err)
	}
	mq, err := Measure(q, 0, Options{})
	if err != nil {
		t.Fatal(err)
	}
	ratio := float64(mq.Memory.Deployed.ArenaBytes) / float64(mf.Memory.Deployed.ArenaBytes)
	t.Logf("deployed arena float32 %d, int8 %d, ratio %.3f", mf.Memory.Deployed.ArenaBytes, mq.Memory.Deployed.ArenaBytes, ratio)
	if ratio < 0.24 || ratio > 0.26 {
		t.Errorf("int8/float32 deployed arena ratio %.3f, want about 0.25", ratio)
	}
}

// TestWeightsReadInStoredOrder: the weights' zeros are counted front to
// back in memory, whatever order their consumers come in, and each
// weight's stored bytes are handed to Options.WeightsRead once, in that
// order; the list of weights keeps its consumers' order. Hand-worked: w0,
// read first, lies after w1 in one buffer; w0 holds 3 zeros of 4 elements,
// w1 holds 1 (1.0 is 0x3f800000).
func TestWeightsReadInStoredOrder(t *testing.T) {
	b := build.New("order", 13)
	x := b.Input("x", model.Float32, 1, 2)
	x = b.MatMul("mm0", x, b.Weight("w0", model.Float32, 2, 2))
	x = b.MatMul("mm1", x, b.Weight("w1", model.Float32, 2, 2))
	b.Output(x)
	m, err := b.Model()
	if err != nil {
		t.Fatal(err)
	}
	buf := make([]byte, 32)
	place := func(name string, at int, vals ...uint32) {
		for i, v := range vals {
			binary.LittleEndian.PutUint32(buf[at+4*i:], v)
		}
		w := m.Graph.Initializer(name)
		if w == nil {
			t.Fatalf("no initializer %s", name)
		}
		w.Data = model.TensorData{Encoding: model.EncodingRaw, Segments: [][]byte{buf[at : at+16]}}
	}
	place("w1", 0, 0x3f800000, 0x3f800000, 0, 0x3f800000)
	place("w0", 16, 0, 0, 0x3f800000, 0)
	inf, err := Infer(m, InferOptions{})
	if err != nil {
		t.Fatal(err)
	}
	var offsets []int
	ws, err := weights(inf, func(b []byte) {
		offsets = append(offsets, len(buf)-cap(b)) // b is buf[at:...], so cap(b) = 32 − at
	})
	if err != nil {
		t.Fatal(err)
	}
	if len(ws) != 2 || ws[0].Name != "w0" || ws[1].Name != "w1" {
		t.Fatalf("weights %+v, want w0 then w1 (their consumers' order)", ws)
	}
	if ws[0].Zeros != 3 || ws[1].Zeros != 1 {
		t.Errorf("zeros w0 %d, w1 %d; want 3 and 1", ws[0].Zeros, ws[1].Zeros)
	}
	if len(offsets) != 2 || offsets[0] != 0 || offsets[1] != 16 {
		t.Errorf("stored bytes handed on at offsets %v, want [0 16] (front to back)", offsets)
	}
}

// TestCountZerosInPieces: a weight larger than a piece is counted piece by
// piece, front to back, with the same count as element by element
// (hand-checkable reference: the loop below), and every stored byte is
// handed on once, in order. An int4 weight of an odd count spans pieces
// with its padding nibble (0, which must not count) at the very end.
func TestCountZerosInPieces(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	cases := []struct {
		dt    model.DType
		elems int64
	}{
		{model.Float32, zeroPiece/4 + 1000},
		{model.Int4, 2*zeroPiece + 2*1000 + 1},
		{model.Int8, 2*zeroPiece + 7},
	}
	for _, c := range cases {
		b := make([]byte, c.dt.StorageBytes(c.elems))
		for i := range b {
			if rng.IntN(3) > 0 {
				b[i] = byte(rng.IntN(256))
			}
		}
		if c.dt == model.Int4 {
			b[len(b)-1] &= 0x0f // the padding nibble is 0
		}
		var want int64
		for i := int64(0); i < c.elems; i++ {
			switch c.dt {
			case model.Float32:
				if binary.LittleEndian.Uint32(b[4*i:])&0x7fffffff == 0 {
					want++
				}
			case model.Int4:
				if (b[i/2]>>(4*(i%2)))&0xf == 0 {
					want++
				}
			case model.Int8:
				if b[i] == 0 {
					want++
				}
			}
		}
		var seen int
		got, err := countZerosInPieces(rawTensor(c.dt, []int64{c.elems}, b), func(p []byte) {
			if &p[0] != &b[seen] {
				t.Errorf("%v: a piece starts at byte %d of the weight, want %d", c.dt, len(b)-cap(p), seen)
			}
			seen += len(p)
		})
		if err != nil || got != want {
			t.Errorf("%v: %d zeros (%v), want %d", c.dt, got, err, want)
		}
		if seen != len(b) {
			t.Errorf("%v: %d bytes handed on, want %d", c.dt, seen, len(b))
		}
	}
}
