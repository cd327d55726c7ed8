// Package peaks finds emission lines in a 1-D intensity profile and
// estimates their centres to a fraction of a sample.
//
// Sample i is centred at position i. Widths are FWHM in samples, heights
// and noise in the profile's own units. Find subtracts a baseline, estimates
// the noise robustly, detects local maxima whose height and prominence (as defined by
// scipy.signal.peak_prominences) both exceed a multiple of the noise, and fits
// each with a Gaussian on a sloping local background. The centre's
// uncertainty comes from the fit's covariance, scaled up by the fit's own
// residual scatter where that exceeds the noise (shot noise, non-Gaussian
// line shapes), so that it does not claim more than the data show.
package peaks

import (
	"fmt"
	"math"
	"sort"

	"lineshot/calibrate/lsq"
)

// Peak is one detected line.
type Peak struct {
	Center     float64 // fitted centre, samples
	Sigma      float64 // 1σ of Center, samples
	FWHM       float64 // samples
	Height     float64 // fitted amplitude above the local background
	Area       float64 // Height·FWHM·1.0645 (Gaussian area)
	Prominence float64 // as scipy.signal.peak_prominences, on the lightly smoothed profile
	SNR        float64 // Height / noise
	Index      int     // sample of the local maximum
	Saturated  bool    // clipped samples lay under the peak and were left out of the fit
	Method     string  // "gauss" or "centroid" (fallback when the fit failed)
}

// Options tunes Find. The zero value is usable.
type Options struct {
	// MinSNR is the least height above the baseline, and the least
	// prominence, in units of the smoothed profile's noise, for a maximum
	// to be a candidate (a false-alarm probability of about 3e-7 per sample
	// for white Gaussian noise), and the least fitted height in units of
	// the profile's noise for a line to be reported. 0 means 5.
	MinSNR float64
	// MinSeparation is the least distance between two reported peaks, in
	// samples; the lower of two closer maxima is dropped. 0 means 2.
	MinSeparation float64
	// BaselineWindow is the width of the rolling-minimum baseline, samples;
	// 0 means max(31, len/25). Negative means no baseline subtraction.
	BaselineWindow int
	// Clipped marks samples that hold saturated pixels; nil means none.
	Clipped []bool
}

// Result is what Find returns besides the peaks, to look at.
type Result struct {
	Peaks    []Peak
	Baseline []float64 // subtracted baseline
	Noise    float64   // robust σ of one sample of the profile
}

// Find detects and measures the peaks of profile. It returns an error for
// a profile shorter than 8 samples or holding non-finite values; it never
// changes profile.
func Find(profile []float64, opt Options) (Result, error) {
	n := len(profile)
	if n < 8 {
		return Result{}, fmt.Errorf("peaks: profile of %d samples is too short", n)
	}
	for i, v := range profile {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return Result{}, fmt.Errorf("peaks: sample %d is not a finite number", i)
		}
	}
	if opt.Clipped != nil && len(opt.Clipped) != n {
		return Result{}, fmt.Errorf("peaks: %d clip flags for %d samples", len(opt.Clipped), n)
	}
	minSNR := opt.MinSNR
	if minSNR == 0 {
		minSNR = 5
	}
	sep := opt.MinSeparation
	if sep == 0 {
		sep = 2
	}
	win := opt.BaselineWindow
	if win == 0 {
		win = max(31, n/25)
	}
	base := make([]float64, n)
	if win > 0 {
		Baseline(base, profile, win)
	}
	y := make([]float64, n)
	for i := range y {
		y[i] = profile[i] - base[i]
	}
	// The opening follows the lower envelope of the noise; lift it to the
	// noise's middle so heights are measured from the mean background.
	// Lines cover a small part of the profile, so the median is background.
	if win > 0 {
		off := median(y)
		for i := range y {
			y[i] -= off
			base[i] += off
		}
	}
	noise := math.Max(Noise(y), LevelNoise(y))
	res := Result{Baseline: base, Noise: noise}
	if noise == 0 {
		noise = 1e-12 * (1 + maxAbs(y))
	}
	sm := smooth121(y)
	// [1 2 1]/4 smoothing scales white noise by sqrt(6)/4.
	thr := minSNR * noise * math.Sqrt(6) / 4
	cands := LocalMaxima(sm)
	prom := Prominences(sm, cands)
	var keep []int
	for k, i := range cands {
		if prom[k] >= thr && sm[i] >= thr {
			keep = append(keep, k)
		}
	}
	keep = dropClose(keep, cands, sm, sep)
	for _, k := range keep {
		p := measure(y, cands[k], noise, opt.Clipped, neighbours(cands, keep, k))
		p.Prominence = prom[k]
		// Report only what is a line: as high as asked once fitted, wider
		// than a single-sample spike, and placed to better than half its
		// width.
		if p.SNR < minSNR || p.FWHM < 0.8 || p.Sigma > p.FWHM/2 {
			continue
		}
		res.Peaks = append(res.Peaks, p)
	}
	sort.Slice(res.Peaks, func(a, b int) bool { return res.Peaks[a].Center < res.Peaks[b].Center })
	return res, nil
}

// neighbours returns the positions of the kept maxima either side of k
// (−1 when there is none), to bound the fit window.
func neighbours(cands, keep []int, k int) [2]int {
	nb := [2]int{-1, -1}
	for _, o := range keep {
		c := cands[o]
		if c < cands[k] && (nb[0] < 0 || c > nb[0]) {
			nb[0] = c
		}
		if c > cands[k] && (nb[1] < 0 || c < nb[1]) {
			nb[1] = c
		}
	}
	return nb
}

// measure fits one peak at local maximum i of the baseline-free profile y.
func measure(y []float64, i int, noise float64, clipped []bool, nb [2]int) Peak {
	n := len(y)
	hm := y[i] / 2
	l, r := i, i
	for l > 0 && y[l-1] > hm {
		l--
	}
	for r < n-1 && y[r+1] > hm {
		r++
	}
	fwhm0 := math.Max(1.5, float64(r-l+1))
	half := int(math.Ceil(1.5*fwhm0)) + 1
	lo, hi := max(0, i-half), min(n-1, i+half)
	// Stay clear of the neighbours: each gets the samples on its side of
	// the midpoint.
	if nb[0] >= 0 {
		lo = max(lo, (nb[0]+i)/2+1)
	}
	if nb[1] >= 0 {
		hi = min(hi, (nb[1]+i+1)/2-1)
	}
	p := Peak{Index: i, Height: y[i], FWHM: fwhm0}
	var xs, ys []float64
	for j := lo; j <= hi; j++ {
		if clipped != nil && clipped[j] {
			p.Saturated = true
			continue
		}
		xs = append(xs, float64(j))
		ys = append(ys, y[j])
	}
	if g, ok := fitGauss(xs, ys, noise, float64(i), y[i], fwhm0); ok {
		p.Center, p.Sigma, p.FWHM, p.Height, p.Method = g[0], g[1], g[2], g[3], "gauss"
	} else {
		p.Center, p.Sigma = centroid(y, lo, hi, noise)
		p.Method = "centroid"
	}
	p.Area = p.Height * p.FWHM * 1.0645
	p.SNR = p.Height / noise
	return p
}

const fwhmPerSigma = 2.3548200450309493 // 2·sqrt(2 ln 2)

// fitGauss fits A·exp(−(x−μ)²/2s²) + c0 + c1·(x − x0) and returns μ, σ_μ,
// FWHM and A, or false when the fit fails or wanders off the window.
func fitGauss(xs, ys []float64, noise, x0, a0, fwhm0 float64) ([4]float64, bool) {
	if len(xs) < 6 {
		return [4]float64{}, false
	}
	sig := make([]float64, len(xs))
	for k := range sig {
		sig[k] = noise
	}
	model := func(k int, p, g []float64) float64 {
		dx := xs[k] - p[1]
		s2 := p[2] * p[2]
		e := math.Exp(-dx * dx / (2 * s2))
		if g != nil {
			g[0] = e
			g[1] = p[0] * e * dx / s2
			g[2] = p[0] * e * dx * dx / (s2 * p[2])
			g[3] = 1
			g[4] = xs[k] - x0
		}
		return p[0]*e + p[3] + p[4]*(xs[k]-x0)
	}
	r, err := lsq.Fit(lsq.Problem{Y: ys, Sigma: sig, Model: model}, []float64{a0, x0, fwhm0 / fwhmPerSigma, 0, 0})
	if err != nil {
		return [4]float64{}, false
	}
	mu, s, a := r.Params[1], math.Abs(r.Params[2]), r.Params[0]
	if a <= 0 || mu < xs[0] || mu > xs[len(xs)-1] || s < 0.2 || s > 3*fwhm0 {
		return [4]float64{}, false
	}
	sd := math.Sqrt(r.Cov.At(1, 1))
	if r.DOF > 0 {
		sd *= math.Max(1, math.Sqrt(r.ChiSq/float64(r.DOF)))
	}
	return [4]float64{mu, sd, s * fwhmPerSigma, a}, true
}

// centroid is the centre of gravity of the samples above half the maximum
// in [lo, hi], with the error that independent noise on each sample gives.
func centroid(y []float64, lo, hi int, noise float64) (float64, float64) {
	mx := 0.0
	for j := lo; j <= hi; j++ {
		mx = math.Max(mx, y[j])
	}
	var s, sx float64
	for j := lo; j <= hi; j++ {
		if w := y[j] - mx/2; w > 0 {
			s += w
			sx += w * float64(j)
		}
	}
	if s == 0 {
		return float64(lo+hi) / 2, float64(hi-lo) / 2
	}
	c := sx / s
	var v float64
	for j := lo; j <= hi; j++ {
		if y[j] > mx/2 {
			d := float64(j) - c
			v += d * d
		}
	}
	return c, noise * math.Sqrt(v) / s
}

func maxAbs(y []float64) float64 {
	m := 0.0
	for _, v := range y {
		m = math.Max(m, math.Abs(v))
	}
	return m
}

// dropClose removes, among maxima closer than sep, all but the highest
// (scipy.signal.find_peaks' "distance" rule).
func dropClose(keep, cands []int, y []float64, sep float64) []int {
	order := append([]int(nil), keep...)
	sort.SliceStable(order, func(a, b int) bool { return y[cands[order[a]]] > y[cands[order[b]]] })
	gone := map[int]bool{}
	for a, ka := range order {
		if gone[ka] {
			continue
		}
		for _, kb := range order[a+1:] {
			if math.Abs(float64(cands[ka]-cands[kb])) < sep {
				gone[kb] = true
			}
		}
	}
	var out []int
	for _, k := range keep {
		if !gone[k] {
			out = append(out, k)
		}
	}
	return out
}
