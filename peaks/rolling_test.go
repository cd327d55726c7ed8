package peaks

import (
	"math"
	"math/rand/v2"
	"sort"
	"testing"
)

// The queue-based rolling extremum equals the direct double loop (the
// definition) on random data, windows and lengths, ties included.
func TestRollingMatchesDefinition(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for trial := 0; trial < 200; trial++ {
		n := 1 + rng.IntN(300)
		h := rng.IntN(40)
		src := make([]float64, n)
		for i := range src {
			src[i] = math.Round(10 * rng.NormFloat64()) // ties on purpose
		}
		got := make([]float64, n)
		rolling(got, src, h, func(a, b float64) bool { return a < b })
		for i := range src {
			want := math.Inf(1)
			for j := max(0, i-h); j <= min(n-1, i+h); j++ {
				want = math.Min(want, src[j])
			}
			if got[i] != want {
				t.Fatalf("n %d, h %d, i %d: min %g, want %g", n, h, i, got[i], want)
			}
		}
		rolling(got, src, h, func(a, b float64) bool { return a > b })
		for i := range src {
			want := math.Inf(-1)
			for j := max(0, i-h); j <= min(n-1, i+h); j++ {
				want = math.Max(want, src[j])
			}
			if got[i] != want {
				t.Fatalf("n %d, h %d, i %d: max %g, want %g", n, h, i, got[i], want)
			}
		}
	}
}

// median by selection equals the sorted definition, odd and even counts,
// ties included, and leaves its input alone.
func TestMedianMatchesSort(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for trial := 0; trial < 500; trial++ {
		n := 1 + rng.IntN(200)
		v := make([]float64, n)
		for i := range v {
			v[i] = math.Round(5 * rng.NormFloat64())
		}
		orig := append([]float64(nil), v...)
		s := append([]float64(nil), v...)
		sort.Float64s(s)
		want := s[n/2]
		if n%2 == 0 {
			want = (s[n/2-1] + s[n/2]) / 2
		}
		if got := median(v); got != want {
			t.Fatalf("n %d: median %g, want %g", n, got, want)
		}
		for i := range v {
			if v[i] != orig[i] {
				t.Fatal("median changed its input")
			}
		}
	}
}
