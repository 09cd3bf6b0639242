package check

import (
	"reflect"
	"testing"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/measure"
	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/build"
)

// TestDetailOfViews: the detail section lists the largest activations by
// their own bytes, never the live total at their step, and carries both
// memory views, the deployed one marked as judged. x [1,2,8,8] → Conv a
// (4 out, 3×3, pad 1) → Relu r → Conv y (1 out, 1×1), float32 → Reshape
// to [1,64] (its shape a constant). Hand-worked own bytes: a and r 4·64·4
// = 1,024 B, y 1·64·4 = 256 B, the reshaped output 256 B; the live totals
// at their steps would be 1,536, 2,048 and 1,280 B.
func TestDetailOfViews(t *testing.T) {
	b := build.New("d", 13, build.Declared())
	x := b.Input("x", model.Float32, 1, 2, 8, 8)
	y := b.Relu("r", b.Conv("a", x, build.Conv2D(4, 3, 1, 1)))
	b.Output(b.Reshape("flat", b.Conv("y", y, build.Conv2D(1, 1, 1, 0)), 1, 64))
	m, err := b.Model()
	if err != nil {
		t.Fatal(err)
	}
	met, err := measure.Measure(m, 0, measure.Options{Layers: true})
	if err != nil {
		t.Fatal(err)
	}
	d := DetailOf(met)
	want := []budget.Layer{{Node: "a", Op: "Conv", Value: 1024}, {Node: "r", Op: "Relu", Value: 1024}, {Node: "y", Op: "Conv", Value: 256}, {Node: "flat", Op: "Reshape", Value: 256}} // hand-worked
	if !reflect.DeepEqual(d.TopMemory, want) {
		t.Errorf("largest activations %v, want %v", d.TopMemory, want)
	}
	if len(d.Views) != 2 || d.Views[0].Name != "graph" || d.Views[0].Judged || d.Views[1].Name != "deployed" || !d.Views[1].Judged {
		t.Fatalf("views %+v, want graph then deployed (judged)", d.Views)
	}
	// Deployed: the Relu fuses into a, the Reshape aliases y. Hand-worked:
	// step 0 x 512 + r 1024 = 1,536 (the peak); step 2 r + y = 1,280.
	if dv := d.Views[1]; dv.PeakBytes != 1536 || dv.PeakStep != 0 || len(dv.AtPeak) != 2 || len(dv.LiveBytes) != 4 {
		t.Errorf("deployed view %+v", dv)
	}
}
