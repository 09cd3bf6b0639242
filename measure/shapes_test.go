package measure

import (
	"slices"
	"testing"

	"github.com/loadline/loadline/model"
)

// TestShapeCacheShares: equal known shapes share one storage, which ends at
// its length; scalar and symbolic shapes, shapes of rank 5 and shapes past
// the cache's bound are left as they are.
func TestShapeCacheShares(t *testing.T) {
	var c shapeCache
	a, ok := c.fromDims([]int64{16, 16})
	b := c.intern(model.KnownShape(16, 16))
	if !ok || !slices.Equal(a, model.KnownShape(16, 16)) || &a[0] != &b[0] {
		t.Fatalf("fromDims %v and intern %v of [16,16] do not share storage", a, b)
	}
	if cap(b) != len(b) {
		t.Errorf("shared shape has room %d past its length %d", cap(b), len(b))
	}
	sym := model.Shape{model.Sym("batch"), model.Known(16)}
	if got := c.intern(sym); &got[0] != &sym[0] {
		t.Error("a symbolic shape was replaced")
	}
	five := model.KnownShape(1, 2, 3, 4, 5)
	if got := c.intern(five); &got[0] != &five[0] {
		t.Error("a shape of rank 5 was replaced")
	}
	if _, ok := c.fromDims([]int64{1, 2, 3, 4, 5}); ok {
		t.Error("fromDims kept a shape of rank 5")
	}
	for i := range maxCachedShapes + 10 {
		c.intern(model.KnownShape(int64(i), 7))
	}
	if len(c.byDims) > maxCachedShapes {
		t.Errorf("cache holds %d shapes, bound %d", len(c.byDims), maxCachedShapes)
	}
	// A scalar's shape, nil or empty, stays as it is.
	if c.intern(nil) != nil || c.intern(model.Shape{}) == nil {
		t.Error("a scalar's shape changed")
	}
}
