package measure

import (
	"fmt"

	"github.com/loadline/loadline/model"
)

// Signal processing: DFT and STFT produce complex output as a trailing
// axis of 2 (real, imaginary); the window generators and MelWeightMatrix
// make constant-like tensors whose sizes are input values.

var signalOps = map[string]opRule{
	"DFT":             {infer: inferDFT, rankFree: true},
	"STFT":            {infer: inferSTFT, rankFree: true},
	"HannWindow":      {infer: inferWindowFunc, rankFree: true},
	"HammingWindow":   {infer: inferWindowFunc, rankFree: true},
	"BlackmanWindow":  {infer: inferWindowFunc, rankFree: true},
	"MelWeightMatrix": {infer: inferMelWeightMatrix, rankFree: true},
}

// scalarDim reads a one-element integer input as a dim (a symbol when it
// came from a symbolic shape), failing when it is computed at run time.
func scalarDim(c *ctx, i int, what string) (model.Dim, error) {
	v, err := valueDims(c, i, what)
	if err != nil {
		return model.Dim{}, err
	}
	if len(v) != 1 {
		return model.Dim{}, fmt.Errorf("%s (input %d) holds %d values; it must be a scalar", what, i, len(v))
	}
	if v[0].IsKnown() && v[0].Value < 0 {
		return model.Dim{}, fmt.Errorf("%s is %d, a negative size", what, v[0].Value)
	}
	return v[0], nil
}

// onesidedDim is floor(n/2)+1, the bins a real-input transform keeps.
func onesidedDim(n model.Dim) model.Dim {
	return dimAdd(dimFloorDiv(n, model.Known(2)), model.Known(1))
}

// inferDFT: input [batch, signal..., 1 or 2] (real or complex); the axis
// transformed (attribute, 1 by default, up to opset 19; a scalar input, -2
// by default, from opset 20) becomes dft_length (when given) or keeps its
// size, halved to floor(n/2)+1 with onesided; the last axis becomes 2.
func inferDFT(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	r := len(xs)
	if r < 3 {
		return nil, fmt.Errorf("input has rank %d; DFT needs [batch, signal..., 1 or 2] (rank ≥ 3)", r)
	}
	if last := xs[r-1]; last.IsKnown() && last.Value != 1 && last.Value != 2 {
		return nil, fmt.Errorf("input's last dim is %d; DFT needs 1 (real) or 2 (complex)", last.Value)
	}
	axis := c.attrInt("axis", 1)
	if c.opset >= 20 {
		axis = -2
		if presentInput(c, 2) {
			ax, err := c.needInts(2, "axis")
			if err != nil {
				return nil, err
			}
			if len(ax) != 1 {
				return nil, fmt.Errorf("axis holds %d values; it must be a scalar", len(ax))
			}
			axis = ax[0]
		}
	}
	// Accepted: [-r, -2] and [0, r-2]; the last axis holds the complex pair.
	a := axis
	if a < 0 {
		a += int64(r)
	}
	if a < 0 || a > int64(r-2) {
		return nil, fmt.Errorf("axis %d is out of range for rank %d (the last axis holds real/imaginary)", axis, r)
	}
	n := xs[a]
	if presentInput(c, 1) {
		if n, err = scalarDim(c, 1, "dft_length"); err != nil {
			return nil, err
		}
	}
	if c.attrInt("onesided", 0) != 0 {
		n = onesidedDim(n)
	}
	out := xs.Clone()
	out[a] = n
	out[r-1] = model.Known(2)
	return []*Value{tensor(c.dtype(0), out)}, nil
}

// inferSTFT: signal [batch, length, 1 or 2], frame_step (input 1), window
// (input 2, [frame_length]), frame_length (input 3); output [batch,
// frames, bins, 2] with frames = floor((length - frame_length) /
// frame_step) + 1 and bins = floor(frame_length/2)+1 when onesided (the
// default), frame_length otherwise.
func inferSTFT(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	if len(xs) != 3 {
		return nil, fmt.Errorf("signal has rank %d; STFT needs [batch, signal_length, 1 or 2]", len(xs))
	}
	step, err := c.needInts(1, "frame_step")
	if err != nil {
		return nil, err
	}
	if len(step) != 1 || step[0] <= 0 {
		return nil, fmt.Errorf("frame_step %v must be one positive number", step)
	}
	var fl model.Dim
	switch {
	case presentInput(c, 3):
		if fl, err = scalarDim(c, 3, "frame_length"); err != nil {
			return nil, err
		}
	case presentInput(c, 2):
		ws, err := c.shape(2)
		if err != nil {
			return nil, err
		}
		if len(ws) != 1 {
			return nil, fmt.Errorf("window has rank %d; STFT needs a 1-D window", len(ws))
		}
		fl = ws[0]
	default:
		return nil, fmt.Errorf("STFT has neither a window nor a frame_length, so its frame size is unknown")
	}
	length := xs[1]
	if fl.IsKnown() && length.IsKnown() && fl.Value > length.Value {
		return nil, fmt.Errorf("frame_length %d is longer than the signal (%d samples)", fl.Value, length.Value)
	}
	frames := dimAdd(dimFloorDiv(dimSub(length, fl), model.Known(step[0])), model.Known(1))
	bins := fl
	if c.attrInt("onesided", 1) != 0 {
		bins = onesidedDim(fl)
	}
	return []*Value{tensor(c.dtype(0), model.Shape{xs[0], frames, bins, model.Known(2)})}, nil
}

// inferWindowFunc: a 1-D window of the size input's value, of type
// output_datatype (float32 by default).
func inferWindowFunc(c *ctx) ([]*Value, error) {
	n, err := scalarDim(c, 0, "size")
	if err != nil {
		return nil, err
	}
	dt := model.DType(c.attrInt("output_datatype", int64(model.Float32)))
	return []*Value{tensor(dt, model.Shape{n})}, nil
}

// inferMelWeightMatrix: [floor(dft_length/2)+1, num_mel_bins] of type
// output_datatype (float32 by default).
func inferMelWeightMatrix(c *ctx) ([]*Value, error) {
	bins, err := scalarDim(c, 0, "num_mel_bins")
	if err != nil {
		return nil, err
	}
	dft, err := scalarDim(c, 1, "dft_length")
	if err != nil {
		return nil, err
	}
	dt := model.DType(c.attrInt("output_datatype", int64(model.Float32)))
	return []*Value{tensor(dt, model.Shape{onesidedDim(dft), bins})}, nil
}
