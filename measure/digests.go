package measure

import (
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"fmt"

	"github.com/loadline/loadline/model"
)

// Constant digests, for the flash a device saves when models that run on
// it share identical weights (budget's device totals). A digest covers a
// stored constant's dtype, dims and bytes, so two constants with one digest
// are the same weights whatever their names. Constants smaller than
// MinSharedBytes are left out: a linker does not fold a bias or a shape
// vector across models, and the saving would be noise. Every stored
// constant gets one, parameter or not (a shape tensor, a quantization
// table, BatchNormalization's running statistics are in the file, so in
// flash, too); Weight says which of them count in param_bytes, the only
// ones a device that keeps weights in RAM holds there.

// MinSharedBytes is the smallest constant that gets a digest.
const MinSharedBytes = 256

// ConstantDigest identifies one stored constant by content.
type ConstantDigest struct {
	Name   string `json:"name"`
	Bytes  int64  `json:"bytes"`
	Digest string `json:"digest"`
	// Weight is true when the constant is a parameter: counted in
	// param_bytes (params.go), so in ram when the device keeps weights in
	// RAM.
	Weight bool `json:"weight,omitempty"`
}

// ConstantDigests returns the digest of every initializer and Constant
// value of the main graph with at least MinSharedBytes of stored bytes, in
// graph order. params are the model's parameters (weights): a constant
// among them by name is marked Weight.
func ConstantDigests(m *model.Model, params []ParamTensor) ([]ConstantDigest, error) {
	isWeight := make(map[string]bool, len(params))
	for _, p := range params {
		if !p.Generated { // computed at load time: not a stored constant
			isWeight[p.Name] = true
		}
	}
	var out []ConstantDigest
	add := func(name string, t *model.Tensor) error {
		if !t.HasData() || t.StorageBytes() < MinSharedBytes {
			return nil
		}
		b, err := t.RawBytes()
		if err != nil {
			return fmt.Errorf("constant %q: %w", name, err)
		}
		h := sha256.New()
		var word [8]byte
		fmt.Fprintf(h, "%s\x00%d\x00", t.DType, len(t.Dims))
		for _, d := range t.Dims {
			binary.LittleEndian.PutUint64(word[:], uint64(d))
			h.Write(word[:])
		}
		h.Write(b)
		out = append(out, ConstantDigest{Name: name, Bytes: int64(len(b)), Digest: hex.EncodeToString(h.Sum(nil)),
			Weight: isWeight[name]})
		return nil
	}
	g := m.Graph
	for _, t := range g.Initializers {
		if err := add(t.Name, t); err != nil {
			return nil, err
		}
	}
	for _, n := range g.Nodes {
		if n.Op == "Constant" && len(n.Outputs) == 1 {
			if a := n.Attr("value"); a != nil && a.Tensor != nil {
				if err := add(n.Outputs[0], a.Tensor); err != nil {
					return nil, err
				}
			}
		}
	}
	return out, nil
}
