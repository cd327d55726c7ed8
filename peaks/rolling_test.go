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

// Noise that triples over part of the profile (stray light falling there)
// passes for lines against the profile's typical noise; with NoiseShape
// saying where it is higher, no line is reported there, the real lines
// are still found, and their SNR and σ are against the local noise.
func TestNoiseShapeRejectsLocalNoise(t *testing.T) {
	const n = 2000
	rng := rand.New(rand.NewPCG(5, 6))
	y := make([]float64, n)
	shape := make([]float64, n)
	truth := []float64{300.4, 900.7, 1500.2}
	for i := range y {
		shape[i] = 1
		if i >= 1100 && i < 1400 {
			shape[i] = 3
		}
		y[i] = shape[i] * rng.NormFloat64()
		for _, c := range truth {
			d := (float64(i) - c) / 1.5
			y[i] += 60 * math.Exp(-d*d/2)
		}
	}
	inRegion := func(r Result) int {
		k := 0
		for _, p := range r.Peaks {
			if p.Center >= 1100 && p.Center < 1400 {
				k++
			}
		}
		return k
	}
	plain, err := Find(y, Options{})
	if err != nil {
		t.Fatal(err)
	}
	shaped, err := Find(y, Options{NoiseShape: shape})
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("without the shape %d lines in the noisy part, with it %d", inRegion(plain), inRegion(shaped))
	if inRegion(plain) == 0 {
		t.Error("the noisy part gave no false line even without the shape: the test is not testing")
	}
	if inRegion(shaped) > 0 {
		t.Errorf("%d false lines in the noisy part with the noise shape", inRegion(shaped))
	}
	for _, c := range truth {
		found := false
		for _, p := range shaped.Peaks {
			if math.Abs(p.Center-c) < 0.3 {
				found = true
			}
		}
		if !found {
			t.Errorf("line at %.1f lost", c)
		}
	}
	if _, err := Find(y, Options{NoiseShape: shape[:10]}); err == nil {
		t.Error("a noise shape of the wrong length was accepted")
	}
}

// selectK on long inputs (where it selects within a sample first): the
// value a sort puts at k, everything before it ≤ and everything after ≥;
// noisy, tied, sorted and reversed samples, k at the ends and the middle.
func TestSelectKLong(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	for trial := 0; trial < 60; trial++ {
		n := 601 + rng.IntN(40000)
		v := make([]float64, n)
		for i := range v {
			switch trial % 4 {
			case 0:
				v[i] = rng.NormFloat64()
			case 1:
				v[i] = float64(rng.IntN(7))
			case 2:
				v[i] = float64(i)
			default:
				v[i] = float64(n - i)
			}
		}
		sorted := append([]float64(nil), v...)
		sort.Float64s(sorted)
		for _, k := range []int{0, n / 2, n - 1, rng.IntN(n)} {
			s := append([]float64(nil), v...)
			if got := selectK(s, k); got != sorted[k] {
				t.Fatalf("trial %d, n %d, k %d: %g, want %g", trial, n, k, got, sorted[k])
			}
			for i := range s {
				if (i < k && s[i] > s[k]) || (i > k && s[i] < s[k]) {
					t.Fatalf("trial %d, n %d, k %d: s[%d] = %g on the wrong side of %g", trial, n, k, i, s[i], s[k])
				}
			}
		}
	}
}
