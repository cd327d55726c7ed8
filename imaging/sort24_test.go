package imaging

import (
	"math/bits"
	"math/rand/v2"
	"slices"
	"testing"
)

// The network sorts: by the zero-one principle (a comparator network that
// sorts every input of zeros and ones sorts every input; Knuth, TAOCP
// vol. 3, 5.3.4), checked on all 2^24 such inputs, 64 at a time as the
// bits of a word (a comparator is then AND for the minimum, OR for the
// maximum).
func TestSort24ZeroOne(t *testing.T) {
	var lanes [24]uint64
	for base := uint64(0); base < 1<<24; base += 64 {
		// Lane b of word k holds bit k of input base+b.
		for k := range lanes {
			var w uint64
			for b := uint64(0); b < 64; b++ {
				w |= ((base + b) >> k & 1) << b
			}
			lanes[k] = w
		}
		for _, p := range sort24Pairs {
			a, b := lanes[p[0]], lanes[p[1]]
			lanes[p[0]], lanes[p[1]] = a&b, a|b
		}
		// Sorted: once a lane is 1 at position k it stays 1 above it.
		for k := 1; k < 24; k++ {
			if bad := lanes[k-1] &^ lanes[k]; bad != 0 {
				t.Fatalf("input %#x left unsorted at %d", base+uint64(bits.TrailingZeros64(bad)), k)
			}
		}
	}
}

// sort24, the generated code, sorts as the standard library does: noisy
// samples, many ties, sorted and reversed runs.
func TestSort24(t *testing.T) {
	rng := rand.New(rand.NewPCG(24, 1))
	for trial := 0; trial < 20000; trial++ {
		var v [24]float64
		for i := range v {
			switch trial % 4 {
			case 0:
				v[i] = rng.NormFloat64()
			case 1:
				v[i] = float64(rng.IntN(4))
			case 2:
				v[i] = float64(i)
			default:
				v[i] = float64(-i) * 0.5
			}
		}
		want := v
		slices.Sort(want[:])
		sort24(&v)
		if v != want {
			t.Fatalf("trial %d: %v, want %v", trial, v, want)
		}
	}
}
