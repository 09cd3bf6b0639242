package model

import "testing"

func TestStorageBytes(t *testing.T) {
	cases := []struct {
		dt   DType
		n    int64
		want int64
	}{
		{Float32, 10, 40},                // 4 bytes each
		{Int4, 3, 2},                     // two a byte, rounded up (ONNX: int4 packs two per byte)
		{Uint4, 4, 2},                    // two a byte
		{Float16, 5, 10},                 // 2 bytes each
		{String, 5, -1},                  // not static
		{Float32, 1 << 62, -1},           // 2^64 bytes overflows int64
		{Int4, 1<<63 - 1, 1<<62 - 1 + 1}, // ⌈(2^63−1)/2⌉ = 2^62, no overflow on the way
	}
	for _, c := range cases {
		if got := c.dt.StorageBytes(c.n); got != c.want {
			t.Errorf("%s × %d: %d bytes, want %d", c.dt, c.n, got, c.want)
		}
	}
}
