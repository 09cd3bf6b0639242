package measure

import "github.com/loadline/loadline/model"

// maxCachedRank is the highest rank whose shapes shapeCache shares, and
// maxCachedShapes how many it keeps: the common shapes come early, and a
// graph whose every value has a shape of its own gains nothing from it.
const (
	maxCachedRank   = 4
	maxCachedShapes = 4096
)

// shapeCache hands out one shared copy of each fully known shape of rank
// up to maxCachedRank. Values never change a shape they hold (rules copy
// before they edit), so equal shapes can share storage: a large graph has
// tens of thousands of weights and outputs of a few shapes, and a copy
// each was 4 MB of a 100,000-node graph's inference. The copies handed out
// end at their length, so that appending to one cannot reach another.
type shapeCache struct {
	byDims map[[maxCachedRank + 1]int64]model.Shape
}

// key is the cache's key for dims, and whether dims can be cached.
func (c *shapeCache) key(rank int, dim func(i int) (int64, bool)) ([maxCachedRank + 1]int64, bool) {
	var k [maxCachedRank + 1]int64
	if rank == 0 || rank > maxCachedRank {
		return k, false // a scalar's shape takes no storage to share
	}
	k[0] = int64(rank)
	for i := range rank {
		v, ok := dim(i)
		if !ok {
			return k, false
		}
		k[i+1] = v
	}
	return k, true
}

// fromDims is the known shape dims, shared when it can be; ok is false
// when the cache does not keep shapes like it (the caller makes its own).
func (c *shapeCache) fromDims(dims []int64) (model.Shape, bool) {
	k, ok := c.key(len(dims), func(i int) (int64, bool) { return dims[i], true })
	if !ok {
		return nil, false
	}
	if s, ok := c.byDims[k]; ok {
		return s, true
	}
	s := make(model.Shape, len(dims))
	for i, d := range dims {
		s[i] = model.Known(d)
	}
	c.put(k, s)
	return s, true
}

// intern is s, or the shared copy of a shape equal to it.
func (c *shapeCache) intern(s model.Shape) model.Shape {
	k, ok := c.key(len(s), func(i int) (int64, bool) { return s[i].Value, s[i].IsKnown() })
	if !ok {
		return s
	}
	if shared, ok := c.byDims[k]; ok {
		return shared
	}
	s = s[:len(s):len(s)]
	c.put(k, s)
	return s
}

func (c *shapeCache) put(k [maxCachedRank + 1]int64, s model.Shape) {
	if len(c.byDims) >= maxCachedShapes {
		return
	}
	if c.byDims == nil {
		c.byDims = map[[maxCachedRank + 1]int64]model.Shape{}
	}
	c.byDims[k] = s
}
