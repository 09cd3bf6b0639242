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
// vector across models, and the saving would be noise.

// MinSharedBytes is the smallest constant that gets a digest.
const MinSharedBytes = 256

// ConstantDigest identifies one stored constant by content.
type ConstantDigest struct {
	Name   string `json:"name"`
	Bytes  int64  `json:"bytes"`
	Digest string `json:"digest"`
}

// ConstantDigests returns the digest of every initializer and Constant
// value of the main graph with at least MinSharedBytes of stored bytes, in
// graph order.
func ConstantDigests(m *model.Model) ([]ConstantDigest, error) {
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
		out = append(out, ConstantDigest{Name: name, Bytes: int64(len(b)), Digest: hex.EncodeToString(h.Sum(nil))})
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
