package peaks

import (
	"math"
)

// Baseline writes into dst (len(dst) == len(src)) a smooth lower envelope
// of src: a rolling minimum then a rolling maximum over window samples (a
// morphological opening, which removes every feature narrower than the
// window) followed by a rolling mean over the same window. It returns dst.
func Baseline(dst, src []float64, window int) []float64 {
	n := len(src)
	h := window / 2
	tmp := make([]float64, n)
	rolling(tmp, src, h, func(a, b float64) bool { return a < b })
	open := make([]float64, n)
	rolling(open, tmp, h, func(a, b float64) bool { return a > b })
	// Rolling mean by prefix sums.
	cs := make([]float64, n+1)
	for i, v := range open {
		cs[i+1] = cs[i] + v
	}
	for i := range dst {
		lo, hi := max(0, i-h), min(n-1, i+h)
		dst[i] = (cs[hi+1] - cs[lo]) / float64(hi-lo+1)
	}
	// The mean can rise above the opening next to a strong feature's foot;
	// a baseline above the data would eat into the line.
	for i := range dst {
		dst[i] = math.Min(dst[i], src[i])
	}
	return dst
}

// rolling sets dst[i] to the extreme of src over [i−h, i+h] (clipped at
// the ends): the minimum when less(a, b) is a < b, the maximum for a > b.
// A monotone queue of indices makes it O(n) whatever the window (the
// straightforward double loop cost 10 ms a profile at 12 MP); gonum has no
// rolling extremum, hence hand-written.
func rolling(dst, src []float64, h int, less func(a, b float64) bool) {
	n := len(src)
	q := make([]int, 0, 2*h+2)
	next := 0 // first index not yet queued
	for i := range dst {
		for hi := min(n-1, i+h); next <= hi; next++ {
			for len(q) > 0 && !less(src[q[len(q)-1]], src[next]) {
				q = q[:len(q)-1]
			}
			q = append(q, next)
		}
		for q[0] < i-h {
			q = q[1:]
		}
		dst[i] = src[q[0]]
	}
}

// Noise returns a robust estimate of the standard deviation of white noise
// on y: 1.4826·MAD of the first differences, divided by √2. Smooth features
// (lines a few samples wide, slopes) barely move the median of differences.
func Noise(y []float64) float64 {
	if len(y) < 3 {
		return 0
	}
	d := make([]float64, len(y)-1)
	for i := range d {
		d[i] = y[i+1] - y[i]
	}
	// The median reorders d; the deviations' median does not depend on
	// their order.
	med := medianOf(d)
	for i := range d {
		d[i] = math.Abs(d[i] - med)
	}
	return 1.4826 * medianOf(d) / math.Sqrt2
}

// LevelNoise returns 1.4826·MAD of y about its median: a robust σ of the
// background level that, unlike Noise, also counts noise correlated
// between neighbouring samples (JPEG blocks, interpolation), provided lines
// and baseline wander cover well under half of the samples.
func LevelNoise(y []float64) float64 {
	if len(y) < 3 {
		return 0
	}
	d := append([]float64(nil), y...)
	med := medianOf(d) // (reordering d, as Noise)
	for i, v := range d {
		d[i] = math.Abs(v - med)
	}
	return 1.4826 * medianOf(d)
}

// Median returns the median of v (the mean of the middle two for an even
// count; NaN for none), leaving v unchanged. It selects instead of sorting
// (O(n) on average): medians are taken several times per profile, and
// sorting was half of Find's time.
func Median(v []float64) float64 { return median(v) }

// MedianInPlace is Median for a scratch slice: it reorders v instead of
// copying it.
func MedianInPlace(v []float64) float64 { return medianOf(v) }

func median(v []float64) float64 {
	return medianOf(append([]float64(nil), v...))
}

// medianOf is the median of s, which it reorders.
func medianOf(s []float64) float64 {
	n := len(s)
	if n == 0 {
		return math.NaN()
	}
	m := selectK(s, n/2)
	if n%2 == 1 {
		return m
	}
	// The other middle value is the largest of the lower part.
	// (The built-in max, inlined, treats NaN and ±0 as math.Max does;
	// math.Max is a call per element on amd64.)
	lo := s[0]
	for _, x := range s[1 : n/2] {
		lo = max(lo, x)
	}
	return (lo + m) / 2
}

// selectK rearranges s so that s[k] holds the value a sort would put
// there, everything before it is ≤ and everything after ≥, and returns
// s[k]. The standard library has no selection, hence hand-written.
func selectK(s []float64, k int) float64 {
	selectRange(s, 0, len(s)-1, k)
	return s[k]
}

// selectRange is selectK within s[lo..hi]: Floyd and Rivest's selection
// (R. W. Floyd, R. L. Rivest, "Algorithm 489: SELECT", Comm. ACM 18(3),
// 1975). On a long range it first selects within a sample around k's
// expected place, so that the partition's pivot falls close to the k-th
// value and one pass over the range leaves little to do: for the median of
// 20 000 noisy samples (the band search takes several a photo), 15 µs
// against 80-87 for Hoare's selection with a middle-of-three pivot, which
// it replaced.
func selectRange(s []float64, lo, hi, k int) {
	for hi > lo {
		if n := hi - lo + 1; n > 600 {
			i := k - lo + 1
			z := math.Log(float64(n))
			m := 0.5 * math.Exp(2*z/3) // the sample's size
			sd := 0.5 * math.Sqrt(z*m*(float64(n)-m)/float64(n))
			if i < n/2 {
				sd = -sd
			}
			l := max(lo, int(float64(k)-float64(i)*m/float64(n)+sd))
			r := min(hi, int(float64(k)+float64(n-i)*m/float64(n)+sd))
			selectRange(s, l, r, k)
		}
		// Partition about t = s[k], with s[lo] ≤ t ≤ s[hi] as sentinels.
		t := s[k]
		i, j := lo, hi
		s[lo], s[k] = s[k], s[lo]
		if s[hi] > t {
			s[hi], s[lo] = s[lo], s[hi]
		}
		for i < j {
			s[i], s[j] = s[j], s[i]
			i++
			j--
			for s[i] < t {
				i++
			}
			for s[j] > t {
				j--
			}
		}
		if s[lo] == t {
			s[lo], s[j] = s[j], s[lo]
		} else {
			j++
			s[j], s[hi] = s[hi], s[j]
		}
		if j <= k {
			lo = j + 1
		}
		if k <= j {
			hi = j - 1
		}
	}
}

// smooth121 returns y convolved with [1 2 1]/4, edges replicated.
func smooth121(y []float64) []float64 {
	n := len(y)
	out := make([]float64, n)
	for i := range y {
		l, r := y[max(0, i-1)], y[min(n-1, i+1)]
		out[i] = (l + 2*y[i] + r) / 4
	}
	return out
}

// LocalMaxima returns the indices of the local maxima of y, as
// scipy.signal.find_peaks finds them: a sample higher than its left
// neighbour and than the first different sample on its right; for a flat
// top the middle sample (rounded down) is returned. End samples are never
// maxima.
func LocalMaxima(y []float64) []int {
	var out []int
	n := len(y)
	for i := 1; i < n-1; {
		if y[i-1] < y[i] {
			j := i + 1
			for j < n-1 && y[j] == y[i] {
				j++
			}
			if y[j] < y[i] {
				out = append(out, (i+j-1)/2)
				i = j
				continue
			}
			i = j
			continue
		}
		i++
	}
	return out
}

// Prominences returns, for each maximum in idx, its topographic prominence
// as scipy.signal.peak_prominences defines it with no window: from the
// peak, extend left and right until a higher sample or the edge; on each
// side take the lowest sample of that stretch; the prominence is the peak
// minus the higher of the two minima.
//
// Walking out from every maximum costs a profile's length for each tall
// one; instead each side's minimum comes from one pass with a stack (see
// leastToHigher): the same values, in linear time and one slice a side.
func Prominences(y []float64, idx []int) []float64 {
	out := make([]float64, len(idx))
	if len(idx) == 0 || len(y) == 0 {
		return out
	}
	left, right := leastToHigher(y, 1), leastToHigher(y, -1)
	for k, i := range idx {
		out[k] = y[i] - max(left[i], right[i])
	}
	return out
}

// leastToHigher returns, for each sample i of y, the least sample from i
// back to the nearest higher sample before it (that one left out), or to
// the edge when there is none, walking y in direction dir (1: from the
// start, so the stretch on i's left; −1 for the right).
//
// One pass keeps a stack of the samples not yet outdone, each holding the
// least of its own stretch. Sample i outdoes (pops) the samples on top
// that are not higher; their stretches, laid end to end, are exactly the
// samples between the one left on top (i's nearest higher) and i, so i's
// least is the least of theirs and y[i]. The built-in min keeps what a
// minimum over the stretch gives: NaN when one is NaN, −0 below +0.
func leastToHigher(y []float64, dir int) []float64 {
	n := len(y)
	least := make([]float64, n)
	i := 0
	if dir < 0 {
		i = n - 1
	}
	stack := make([]int, 0, 64)
	for ; i >= 0 && i < n; i += dir {
		m := y[i]
		for len(stack) > 0 && y[stack[len(stack)-1]] <= y[i] {
			m = min(m, least[stack[len(stack)-1]])
			stack = stack[:len(stack)-1]
		}
		least[i] = m
		stack = append(stack, i)
	}
	return least
}
