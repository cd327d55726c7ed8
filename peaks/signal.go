package peaks

import (
	"math"
	"sort"
)

// Baseline writes into dst (len(dst) == len(src)) a smooth lower envelope
// of src: a rolling minimum then a rolling maximum over window samples (a
// morphological opening, which removes every feature narrower than the
// window) followed by a rolling mean over the same window. It returns dst.
func Baseline(dst, src []float64, window int) []float64 {
	n := len(src)
	h := window / 2
	tmp := make([]float64, n)
	rolling(tmp, src, h, math.Min)
	open := make([]float64, n)
	rolling(open, tmp, h, math.Max)
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

func rolling(dst, src []float64, h int, f func(a, b float64) float64) {
	n := len(src)
	for i := range dst {
		lo, hi := max(0, i-h), min(n-1, i+h)
		v := src[lo]
		for j := lo + 1; j <= hi; j++ {
			v = f(v, src[j])
		}
		dst[i] = v
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
	med := median(d)
	for i := range d {
		d[i] = math.Abs(d[i] - med)
	}
	return 1.4826 * median(d) / math.Sqrt2
}

// LevelNoise returns 1.4826·MAD of y about its median: a robust σ of the
// background level that, unlike Noise, also counts noise correlated
// between neighbouring samples (JPEG blocks, interpolation), provided lines
// and baseline wander cover well under half of the samples.
func LevelNoise(y []float64) float64 {
	if len(y) < 3 {
		return 0
	}
	med := median(y)
	d := make([]float64, len(y))
	for i, v := range y {
		d[i] = math.Abs(v - med)
	}
	return 1.4826 * median(d)
}

func median(v []float64) float64 {
	s := append([]float64(nil), v...)
	sort.Float64s(s)
	n := len(s)
	if n%2 == 1 {
		return s[n/2]
	}
	return (s[n/2-1] + s[n/2]) / 2
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
func Prominences(y []float64, idx []int) []float64 {
	out := make([]float64, len(idx))
	for k, i := range idx {
		lmin := y[i]
		for j := i - 1; j >= 0 && y[j] <= y[i]; j-- {
			lmin = math.Min(lmin, y[j])
		}
		rmin := y[i]
		for j := i + 1; j < len(y) && y[j] <= y[i]; j++ {
			rmin = math.Min(rmin, y[j])
		}
		out[k] = y[i] - math.Max(lmin, rmin)
	}
	return out
}
