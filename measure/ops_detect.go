package measure

import (
	"fmt"
	"math"
	"sort"

	"github.com/loadline/loadline/model"
)

// Detection post-processing: NonMaxSuppression. Its output size depends on
// the data; when every input is a known constant the algorithm is run to
// get the exact count, otherwise the count is a fresh symbol.

var detectOps = map[string]opRule{
	"NonMaxSuppression": {infer: inferNMS, rankFree: true},
}

// maxNMSWork bounds the box comparisons inference spends on running
// NonMaxSuppression on constants.
const maxNMSWork = 1 << 24

// runtimeDim is a fresh symbol for axis of output out: a size only the run
// time knows. It is named after the output, so that every consumer of the
// value sees the same symbol.
func runtimeDim(c *ctx, out, axis int) model.Dim {
	name := ""
	if out < len(c.node.Outputs) {
		name = c.node.Outputs[out]
	}
	if name == "" {
		name = c.node.Op
	}
	return symbolic(fmt.Sprintf("?%s[%d]", name, axis))
}

// inferNMS: boxes [num_batches, spatial_dimension, 4], scores
// [num_batches, num_classes, spatial_dimension]; selected_indices is
// [num_selected, 3] int64, each row (batch, class, box).
func inferNMS(c *ctx) ([]*Value, error) {
	bs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	ss, err := c.shape(1)
	if err != nil {
		return nil, err
	}
	if len(bs) != 3 || (bs[2].IsKnown() && bs[2].Value != 4) {
		return nil, fmt.Errorf("boxes have shape %v; NonMaxSuppression needs [num_batches, spatial_dimension, 4]", bs)
	}
	if len(ss) != 3 {
		return nil, fmt.Errorf("scores have shape %v; NonMaxSuppression needs [num_batches, num_classes, spatial_dimension]", ss)
	}
	if _, ok := mergeDim(bs[0], ss[0]); !ok {
		return nil, fmt.Errorf("boxes have %d batches, scores %d", bs[0].Value, ss[0].Value)
	}
	if _, ok := mergeDim(bs[1], ss[2]); !ok {
		return nil, fmt.Errorf("boxes hold %d boxes per batch, scores score %d", bs[1].Value, ss[2].Value)
	}
	n := runtimeDim(c, 0, 0)
	if rows, ok := runNMS(c, bs, ss); ok {
		n = model.Known(int64(len(rows)) / 3)
		out := tensor(model.Int64, model.Shape{n, model.Known(3)})
		if len(rows) <= maxFoldElements {
			out.setHeld(intData(rows...))
		}
		return []*Value{out}, nil
	}
	return []*Value{tensor(model.Int64, model.Shape{n, model.Known(3)})}, nil
}

// nmsScalar reads optional scalar input i: def when absent, ok false when
// present but not known.
func nmsScalar(c *ctx, i int, def float64) (float64, bool) {
	if !presentInput(c, i) {
		return def, true
	}
	f, ok := c.consts(i).AsFloats()
	if !ok || len(f) != 1 {
		return 0, false
	}
	return f[0], true
}

// runNMS runs the algorithm of the NonMaxSuppression spec on known inputs
// and returns the selected rows, flattened; ok is false when an input is
// not known or the work would be too large. Per batch and class: boxes
// scoring below score_threshold are dropped, the rest taken by descending
// score, and a box is kept unless its IoU with a kept box exceeds
// iou_threshold, up to max_output_boxes_per_class (0, the default, selects
// nothing). Arithmetic is float32, as runtimes do it.
func runNMS(c *ctx, bs, ss model.Shape) ([]int64, bool) {
	bd, ok1 := bs.Ints()
	sd, ok2 := ss.Ints()
	if !ok1 || !ok2 {
		return nil, false
	}
	boxes, ok1 := c.consts(0).AsFloats()
	scores, ok2 := c.consts(1).AsFloats()
	if !ok1 || !ok2 || int64(len(boxes)) != bd[0]*bd[1]*4 || int64(len(scores)) != sd[0]*sd[1]*sd[2] {
		return nil, false
	}
	maxOut, ok := nmsScalar(c, 2, 0)
	if !ok {
		return nil, false
	}
	iouTh, ok := nmsScalar(c, 3, 0)
	if !ok {
		return nil, false
	}
	scoreTh, ok := nmsScalar(c, 4, math.Inf(-1))
	if !ok {
		return nil, false
	}
	batches, classes, spatial := sd[0], sd[1], sd[2]
	limit := int64(maxOut)
	if limit <= 0 {
		return []int64{}, true
	}
	if w := batches * classes * spatial * min(spatial, limit); w > maxNMSWork {
		return nil, false
	}
	center := c.attrInt("center_point_box", 0) != 0
	// corners gives box i of a batch as (x1, y1, x2, y2), min first.
	corners := func(b, i int64) [4]float32 {
		p := boxes[(b*spatial+i)*4:]
		v := [4]float32{float32(p[0]), float32(p[1]), float32(p[2]), float32(p[3])}
		if center {
			// [x_center, y_center, width, height]
			return [4]float32{v[0] - v[2]/2, v[1] - v[3]/2, v[0] + v[2]/2, v[1] + v[3]/2}
		}
		// [y1, x1, y2, x2], any diagonal pair of corners.
		return [4]float32{min(v[1], v[3]), min(v[0], v[2]), max(v[1], v[3]), max(v[0], v[2])}
	}
	overlaps := func(a, b [4]float32) bool {
		iw := min(a[2], b[2]) - max(a[0], b[0])
		ih := min(a[3], b[3]) - max(a[1], b[1])
		if iw <= 0 || ih <= 0 {
			return false
		}
		inter := iw * ih
		areaA := (a[2] - a[0]) * (a[3] - a[1])
		areaB := (b[2] - b[0]) * (b[3] - b[1])
		union := areaA + areaB - inter
		if areaA <= 0 || areaB <= 0 || union <= 0 {
			return false
		}
		return inter/union > float32(iouTh)
	}
	rows := []int64{}
	for b := int64(0); b < batches; b++ {
		for cl := int64(0); cl < classes; cl++ {
			sc := scores[(b*classes+cl)*spatial:][:spatial]
			var cand []int64
			for i, s := range sc {
				if float32(s) >= float32(scoreTh) {
					cand = append(cand, int64(i))
				}
			}
			sort.SliceStable(cand, func(i, j int) bool { return float32(sc[cand[i]]) > float32(sc[cand[j]]) })
			var kept [][4]float32
			for _, i := range cand {
				if int64(len(kept)) >= limit {
					break
				}
				box := corners(b, i)
				suppressed := false
				for _, k := range kept {
					if overlaps(box, k) {
						suppressed = true
						break
					}
				}
				if !suppressed {
					kept = append(kept, box)
					rows = append(rows, b, cl, i)
				}
			}
		}
	}
	return rows, true
}
