package measure

import (
	"math/rand"
	"slices"
	"sort"
	"testing"
)

// TestTopLayersAsStableSort: the one-pass pick gives the first k of a
// stable sort by key, largest first (the standard library's
// sort.SliceStable is the reference), on random keys with many ties.
func TestTopLayersAsStableSort(t *testing.T) {
	rng := rand.New(rand.NewSource(5))
	for trial := range 500 {
		ls := make([]Layer, rng.Intn(40))
		for i := range ls {
			ls[i].MACs = int64(rng.Intn(6))
			ls[i].Step = i
		}
		key := func(l *Layer) int64 { return l.MACs }
		want := make([]int, len(ls))
		for i := range want {
			want[i] = i
		}
		sort.SliceStable(want, func(a, b int) bool { return ls[want[a]].MACs > ls[want[b]].MACs })
		k := 1 + rng.Intn(6)
		want = want[:min(k, len(want))]
		if got := TopLayers(ls, k, key); !slices.Equal(got, want) {
			t.Fatalf("trial %d, k %d, keys %v: got %v, want %v", trial, k, ls, got, want)
		}
	}
	if got := TopLayers([]Layer{{MACs: 1}}, 0, func(l *Layer) int64 { return l.MACs }); got != nil {
		t.Errorf("k 0: %v, want none", got)
	}
}
