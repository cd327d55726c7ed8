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
	"cmp"
	"fmt"
	"math"
	"runtime"
	"sort"
	"sync"

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
	CentreCOG  float64 // centre of gravity above half maximum, a cross-check on Center
	Blend      bool    // fitted jointly with overlapping neighbours
	Unresolved bool    // much wider than the profile's other lines: possibly an unresolved blend
	// Channel is set by a caller that measured this line again in one
	// colour channel ("R", "G" or "B") because it was clipped in the
	// profile; Center and Sigma are then that channel's. Find leaves it empty.
	Channel string `json:",omitempty"`
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
	// NoiseShape, when set (one value per sample), is how the noise varies
	// along the profile relative to the estimated noise (1 where it is
	// typical). A line must then clear MinSNR times the local noise, its
	// SNR is against the local noise and its σ grows with it: stray light
	// raises the noise where it falls, and a global noise level would let
	// its fluctuations pass for lines. Values below 1 are taken as 1.
	NoiseShape []float64
	// Gain is the profile value of one detected photoelectron, so that a
	// line signal S carries shot-noise variance Gain·S; with it the fit
	// weights each sample by noise² + Gain·S and approaches the Cramér–Rao
	// bound at high SNR. 0 means uniform weights (the gain is unknown).
	Gain float64
	// Workers is how many groups of overlapping lines may be fitted at
	// once, and wide lines tried as pairs (each on its own, so the result
	// does not depend on it); 0 means one per CPU, 1 one after another.
	Workers int
}

// Result is what Find returns besides the peaks, to look at.
type Result struct {
	Peaks    []Peak
	Baseline []float64 // subtracted baseline
	Noise    float64   // robust σ of one sample of the profile
	// Smoothed is the baseline-free profile smoothed by [1 2 1]/4, on which
	// candidates were detected; Threshold is the height and prominence a
	// candidate needed there, and Distance the least spacing kept (the
	// arguments scipy.signal.find_peaks would take to find the same).
	Smoothed  []float64
	Threshold float64
	Distance  float64
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
	if opt.NoiseShape != nil && len(opt.NoiseShape) != n {
		return Result{}, fmt.Errorf("peaks: %d noise-shape values for %d samples", len(opt.NoiseShape), n)
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
		// Wide enough to pass under the widest strong line: 8 times the
		// half-maximum width of the profile's highest sample.
		win = max(31, n/25, 8*topWidth(profile))
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
	res.Smoothed, res.Distance = sm, sep
	// Detect, re-estimate the noise away from what was detected, and detect
	// again when that lowered the noise (lines inflate the first estimate,
	// which would hide faint lines).
	var est []comp
	smBG := sm // the smoothed samples away from the lines found so far
	// corr is how much more the smoothed profile scatters than white noise
	// of the profile's σ would: 1 for white noise, more when neighbouring
	// samples' noise is correlated.
	corr := 1.0
	for pass := 0; pass < 2; pass++ {
		// [1 2 1]/4 smoothing scales white noise by sqrt(6)/4; noise
		// correlated between neighbouring samples (JPEG's blocks, a
		// demosaiced or resampled frame) it scales by less, and the
		// threshold on the smoothed profile is then set by the smoothed
		// profile's own scatter.
		white, own := noise*math.Sqrt(6)/4, LevelNoise(smBG)
		thr := minSNR * math.Max(white, own)
		res.Threshold = thr
		corr = math.Max(1, own/white)
		cands := LocalMaxima(sm)
		prom := Prominences(sm, cands)
		var keep []int
		for k, i := range cands {
			if prom[k] >= thr && sm[i] >= thr {
				keep = append(keep, k)
			}
		}
		keep = dropClose(keep, cands, sm, sep)
		est = est[:0]
		for _, k := range keep {
			c := fitter{y: sm}.estimate(cands[k]) // the smoothed profile gives steadier starting widths
			c.prom = prom[k]
			est = append(est, c)
		}
		// A half-maximum walk runs on into an overlapping neighbour; no line
		// starts wider than the gap to its nearest neighbour.
		for k := range est {
			for _, j := range []int{k - 1, k + 1} {
				if j >= 0 && j < len(est) {
					est[k].fwhm = math.Max(2, math.Min(est[k].fwhm, math.Abs(est[j].mu-est[k].mu)))
				}
			}
		}
		// The noise from the samples away from every candidate line.
		away := awayFromLines(n, est)
		bg := samplesAt(y, away)
		if len(bg) < max(30, n/5) {
			break
		}
		smBG = samplesAt(sm, away)
		nn := LevelNoise(bg)
		res.Noise = nn
		if nn >= 0.9*noise || nn == 0 {
			noise = math.Max(nn, 1e-12*(1+maxAbs(y)))
			break
		}
		noise = nn
	}
	if noise == 0 {
		noise = 1e-12 * (1 + maxAbs(y))
	}
	f := fitter{y: y, noise: noise, gain: opt.Gain, clipped: opt.Clipped}
	workers := cmp.Or(opt.Workers, runtime.GOMAXPROCS(0))
	res.Peaks = f.fitAll(est, minSNR, workers)
	// A faint line on a strong line's flank has little prominence of its
	// own: look again in what the fitted lines leave, and fit anew with
	// whatever stands out there.
	if more := f.inResidual(res.Peaks, est, res.Threshold); len(more) > 0 {
		est = append(est, more...)
		sort.Slice(est, func(a, b int) bool { return est[a].mu < est[b].mu })
		res.Peaks = f.fitAll(est, minSNR, workers)
	}
	f.splitWide(&res, minSNR, corr*corr, workers)
	if len(opt.NoiseShape) == n {
		kept := res.Peaks[:0]
		for _, p := range res.Peaks {
			i := min(n-1, max(0, int(math.Round(p.Center))))
			if k := opt.NoiseShape[i]; k > 1 {
				p.SNR /= k
				p.Sigma *= k
			}
			if p.SNR >= minSNR {
				kept = append(kept, p)
			}
		}
		res.Peaks = kept
	}
	sort.Slice(res.Peaks, func(a, b int) bool { return res.Peaks[a].Center < res.Peaks[b].Center })
	return res, nil
}

// awayFromLines returns the indices of a profile of n samples farther
// than 2·FWHM + 2 from every estimated line.
func awayFromLines(n int, est []comp) []int {
	near := make([]bool, n)
	for _, c := range est {
		r := 2*c.fwhm + 2
		for j := max(0, int(c.mu-r)); j <= min(n-1, int(c.mu+r)); j++ {
			near[j] = true
		}
	}
	away := make([]int, 0, n)
	for j, nr := range near {
		if !nr {
			away = append(away, j)
		}
	}
	return away
}

// samplesAt returns y's samples at the indices idx.
func samplesAt(y []float64, idx []int) []float64 {
	out := make([]float64, len(idx))
	for k, j := range idx {
		out[k] = y[j]
	}
	return out
}

// topWidth returns the number of samples above half maximum around the
// profile's highest sample, measured from the profile's median.
func topWidth(y []float64) int {
	med := median(y)
	top := 0
	for i, v := range y {
		if v > y[top] {
			top = i
		}
	}
	hm := med + (y[top]-med)/2
	l, r := top, top
	for l > 0 && y[l-1] > hm {
		l--
	}
	for r < len(y)-1 && y[r+1] > hm {
		r++
	}
	return r - l + 1
}

// fitAll fits every group of estimates and keeps what is a line: as high
// as asked once fitted, wider than a single-sample spike, and placed to
// better than half its width.
func (f fitter) fitAll(est []comp, minSNR float64, workers int) []Peak {
	// The groups do not overlap and the fitter is only read: with workers,
	// they are fitted side by side, each into its own slot.
	groups := groupComps(est)
	fitted := make([][]Peak, len(groups))
	inTurn(len(groups), workers, func(k int) { fitted[k] = f.fitGroup(est[groups[k][0]:groups[k][1]]) })
	var out []Peak
	for _, fg := range fitted {
		for _, p := range fg {
			if p.SNR < minSNR || p.FWHM < 0.8 || p.Sigma > p.FWHM/2 {
				continue
			}
			out = append(out, p)
		}
	}
	return out
}

// inResidual returns new estimates for maxima of the smoothed residual
// (profile minus the fitted lines) that clear thr in height and
// prominence, and a tenth of the fitted lines there, and lie more than
// 1.2 FWHM from every fitted line.
func (f fitter) inResidual(ps []Peak, est []comp, thr float64) []comp {
	n := len(f.y)
	r := make([]float64, n)
	model := make([]float64, n)
	copy(r, f.y)
	for _, p := range ps {
		s := p.FWHM / fwhmPerSigma
		for j := max(0, int(p.Center-5*s)); j <= min(n-1, int(p.Center+5*s)+1); j++ {
			d := (float64(j) - p.Center) / s
			v := p.Height * math.Exp(-d*d/2)
			r[j] -= v
			model[j] += v
		}
	}
	sm := smooth121(r)
	cands := LocalMaxima(sm)
	prom := Prominences(sm, cands)
	var out []comp
	for k, i := range cands {
		// A bright line's shape is never quite Gaussian: what its fit
		// leaves within 1.2 FWHM, or below a tenth of its model there, is
		// that mismatch, not a line.
		if sm[i] < thr || prom[k] < thr || sm[i] < 0.1*model[i] {
			continue
		}
		near := false
		for _, p := range ps {
			d := math.Abs(p.Center - float64(i))
			// …nor, within 4 FWHM of a line 30 times brighter, the
			// non-Gaussian wings of its image (JPEG ringing, aberrations).
			if d <= math.Max(2, 1.2*p.FWHM) || (d <= 4*p.FWHM && sm[i] < p.Height/30) {
				near = true
			}
		}
		for _, e := range est {
			if math.Abs(e.mu-float64(i)) <= 2 {
				near = true
			}
		}
		if near {
			continue
		}
		c := fitter{y: sm}.estimate(i)
		c.fwhm = math.Max(2, math.Min(c.fwhm, 6))
		c.a, c.prom = f.y[i], prom[k]
		out = append(out, c)
	}
	return out
}

// comp is a starting estimate of one line.
type comp struct {
	idx         int     // sample of the local maximum
	mu, a, fwhm float64 // centre, height, FWHM
	prom        float64
}

// fitter holds what every line fit of one profile shares.
type fitter struct {
	y       []float64
	noise   float64
	gain    float64
	clipped []bool
}

// estimate measures the half-maximum width at local maximum i and places
// the centre by a parabola through the three top samples.
func (f fitter) estimate(i int) comp {
	y, n := f.y, len(f.y)
	hm := y[i] / 2
	l, r := i, i
	for l > 0 && y[l-1] > hm {
		l--
	}
	for r < n-1 && y[r+1] > hm {
		r++
	}
	mu := float64(i)
	if i > 0 && i < n-1 {
		if d := y[i-1] - 2*y[i] + y[i+1]; d < 0 {
			mu += 0.5 * (y[i-1] - y[i+1]) / d
		}
	}
	return comp{idx: i, mu: mu, a: y[i], fwhm: math.Max(1.5, float64(r-l+1))}
}

// groupComps returns [start, end) ranges of estimates whose fit windows
// overlap enough that they must be fitted together: centres closer than
// 1.8·(FWHM_a + FWHM_b) + 2 samples, up to six lines a group.
func groupComps(cs []comp) [][2]int {
	var out [][2]int
	start := 0
	for k := 1; k <= len(cs); k++ {
		if k < len(cs) && k-start < 6 && cs[k].mu-cs[k-1].mu < 1.8*(cs[k].fwhm+cs[k-1].fwhm)+2 {
			continue
		}
		out = append(out, [2]int{start, k})
		start = k
	}
	return out
}

// fitGroup fits the lines of one group jointly: a Gaussian each on a
// shared sloping background, weighted by the noise model. Clipped samples
// are left out. A line whose joint fit fails falls back to its centre of
// gravity.
func (f fitter) fitGroup(cs []comp) []Peak {
	n := len(f.y)
	maxW := 0.0
	for _, c := range cs {
		maxW = math.Max(maxW, c.fwhm)
	}
	// Windows of at least ±1.5·3 samples: a blend's starting widths can be
	// too small to hold its wings.
	lo := max(0, int(math.Floor(cs[0].mu-1.5*math.Max(3, cs[0].fwhm)))-1)
	hi := min(n-1, int(math.Ceil(cs[len(cs)-1].mu+1.5*math.Max(3, cs[len(cs)-1].fwhm)))+1)
	out := make([]Peak, len(cs))
	var xs, ys []float64
	saturated := make([]bool, len(cs))
	for j := lo; j <= hi; j++ {
		if f.clipped != nil && f.clipped[j] {
			// Attribute the clipped sample to the nearest line.
			best := 0
			for k, c := range cs {
				if math.Abs(float64(j)-c.mu) < math.Abs(float64(j)-cs[best].mu) {
					best = k
				}
			}
			saturated[best] = true
			continue
		}
		xs = append(xs, float64(j))
		ys = append(ys, f.y[j])
	}
	x0 := (float64(lo) + float64(hi)) / 2
	// The joint fit starts from the estimates; when it ends on a component
	// that is no line (negative, outside the window, of no width or three
	// times its estimate's), it starts again from widths half as large again
	// and then twice the estimates' (common practice: a nonlinear fit
	// restarted). The estimates of a close pair sit inside the pair and
	// narrow (its half-maximum walks stop at each other): from
	// starts 0.01 px apart, the Hg yellow pair's fit once converged and
	// once ran off to amplitudes of +416 and −660 (χ² 64 414 for 107), and
	// both lines fell back to centres of gravity 1 px inside the pair.
	// isLine says whether component k of params is a line: positive,
	// inside the window, of a width between 0.2 px and three times its
	// estimate's.
	isLine := func(params []float64, k int) bool {
		a, mu, s := params[3*k], params[3*k+1], math.Abs(params[3*k+2])
		return a > 0 && mu >= float64(lo) && mu <= float64(hi) && s >= 0.2 && s <= 3*cs[k].fwhm
	}
	valid := func(params []float64) bool {
		for k := range cs {
			if !isLine(params, k) {
				return false
			}
		}
		return true
	}
	params, cov, chi, ok := f.fitGaussiansChi(xs, ys, cs, x0)
	for _, widen := range []float64{1.5, 2} {
		if ok && valid(params) {
			break
		}
		wide := append([]comp(nil), cs...)
		for k := range wide {
			wide[k].fwhm *= widen
		}
		if p2, c2, chi2, ok2 := f.fitGaussiansChi(xs, ys, wide, x0); ok2 && valid(p2) {
			params, cov, chi, ok = p2, c2, chi2, ok2
		}
	}
	if ok && len(cs) > 1 {
		// Components may trade places during the fit; hand them back to
		// the estimates in order of position.
		idx := make([]int, len(cs))
		for k := range idx {
			idx[k] = k
		}
		sort.Slice(idx, func(a, b int) bool { return params[3*idx[a]+1] < params[3*idx[b]+1] })
		np := append([]float64(nil), params...)
		nc := append([]float64(nil), cov...)
		for k, o := range idx {
			copy(np[3*k:3*k+3], params[3*o:3*o+3])
			nc[k] = cov[o]
		}
		params, cov = np, nc
	}
	for k, c := range cs {
		p := Peak{Index: c.idx, Prominence: c.prom, Saturated: saturated[k], Blend: len(cs) > 1}
		if ok && isLine(params, k) {
			a, mu, s := params[3*k], params[3*k+1], math.Abs(params[3*k+2])
			p.Center, p.Sigma, p.FWHM, p.Height, p.Method = mu, math.Sqrt(cov[k]), s*fwhmPerSigma, a, "gauss"
		}
		if dof := float64(len(xs) - 5); p.Method == "gauss" && len(cs) == 1 && chi > dof+3*math.Sqrt(2*dof) {
			// A slit imaged through the optics is a box blurred by the PSF:
			// flat-topped when the slit is wide. When the Gaussian fits
			// badly, try that model and take it when it fits clearly better
			// (AIC lower by more than 10, one more parameter).
			if sp, ok := f.fitSlit(xs, ys, p, x0); ok && sp.chi2+2 < chi-10 {
				p.Center, p.Sigma, p.FWHM, p.Height, p.Method = sp.mu, sp.sigma, sp.fwhm, sp.height, "slit"
			}
		}
		if p.Method == "" {
			l, r := max(lo, c.idx-int(c.fwhm)), min(hi, c.idx+int(c.fwhm))
			p.Center, p.Sigma = centroid(f.y, l, r, f.noise)
			p.FWHM, p.Height, p.Method = c.fwhm, c.a, "centroid"
		}
		l, r := max(lo, int(p.Center-p.FWHM)), min(hi, int(p.Center+p.FWHM)+1)
		p.CentreCOG, _ = centroid(f.y, l, r, f.noise)
		p.Area = p.Height * p.FWHM * 1.0645
		p.SNR = p.Height / f.noise
		out[k] = p
	}
	return out
}

// fitGaussiansChi fits Σ A_k·exp(−(x−μ_k)²/2s_k²) + c0 + c1·(x − x0) and
// returns the parameters, the variance of each centre (scaled up by the
// fit's Birge ratio when χ² is significantly high) and the fit's χ². With a
// gain, the weights follow σ² = noise² + gain·(line signal), refitted once
// with the first fit's model.
func (f fitter) fitGaussiansChi(xs, ys []float64, cs []comp, x0 float64) ([]float64, []float64, float64, bool) {
	K := len(cs)
	if len(xs) < 3*K+3 {
		return nil, nil, 0, false
	}
	init := make([]float64, 0, 3*K+2)
	for _, c := range cs {
		init = append(init, c.a, c.mu, c.fwhm/fwhmPerSigma)
	}
	init = append(init, 0, 0)
	lines := func(x float64, p, g []float64) float64 {
		var v float64
		for k := 0; k < K; k++ {
			a, mu, s := p[3*k], p[3*k+1], p[3*k+2]
			dx := x - mu
			s2 := s * s
			e := math.Exp(-dx * dx / (2 * s2))
			v += a * e
			if g != nil {
				g[3*k] = e
				g[3*k+1] = a * e * dx / s2
				g[3*k+2] = a * e * dx * dx / (s2 * s)
			}
		}
		return v
	}
	model := func(i int, p, g []float64) float64 {
		v := lines(xs[i], p, g) + p[3*K] + p[3*K+1]*(xs[i]-x0)
		if g != nil {
			g[3*K], g[3*K+1] = 1, xs[i]-x0
		}
		return v
	}
	sig := make([]float64, len(xs))
	for i := range sig {
		sig[i] = f.noise
	}
	r, err := lsq.Fit(lsq.Problem{Y: ys, Sigma: sig, Model: model}, init)
	if err != nil {
		return nil, nil, 0, false
	}
	if f.gain > 0 {
		for i := range sig {
			sig[i] = math.Sqrt(f.noise*f.noise + f.gain*math.Max(0, lines(xs[i], r.Params, nil)))
		}
		r2, err := lsq.Fit(lsq.Problem{Y: ys, Sigma: sig, Model: model}, r.Params)
		if err == nil {
			r = r2
		}
	}
	// Scale the errors up only when the residuals are significantly larger
	// than the noise model says (χ²/dof beyond its 2σ range), so that
	// ordinary fluctuations of χ² do not inflate every σ.
	birge := 1.0
	if r.DOF > 0 {
		if red := r.ChiSq / float64(r.DOF); red > 1+2*math.Sqrt(2/float64(r.DOF)) {
			birge = red
		}
	}
	// Without a gain the weights ignore shot noise, which is largest at the
	// line's core: the model covariance then understates the scatter of
	// bright lines by up to 2.5 times (BenchmarkCramerRao), so take the
	// sandwich covariance when it is larger, scaled by n/(n−k) for the
	// parameters it used up.
	hc := float64(len(xs)) / float64(max(1, r.DOF))
	v := make([]float64, K)
	for k := range v {
		v[k] = r.Cov.At(3*k+1, 3*k+1) * birge
		if f.gain == 0 {
			v[k] = math.Max(v[k], r.Robust.At(3*k+1, 3*k+1)*hc)
		}
	}
	return r.Params, v, r.ChiSq, true
}

type slitFit struct{ mu, sigma, fwhm, height, chi2 float64 }

// fitSlit fits A/2·[erf((x−μ+w)/√2s) − erf((x−μ−w)/√2s)] + c0 + c1·(x − x0),
// a box of half-width w blurred by a Gaussian of σ s, starting from the
// Gaussian fit g.
func (f fitter) fitSlit(xs, ys []float64, g Peak, x0 float64) (slitFit, bool) {
	if len(xs) < 8 {
		return slitFit{}, false
	}
	s0 := g.FWHM / fwhmPerSigma
	sig := make([]float64, len(xs))
	for i := range sig {
		sig[i] = math.Sqrt(f.noise*f.noise + f.gain*math.Max(0, ys[i]))
	}
	const rt2, rtPi = math.Sqrt2, 1.7724538509055159
	model := func(i int, p, gr []float64) float64 {
		A, mu, s, w := p[0], p[1], math.Abs(p[2])+1e-9, p[3]
		x := xs[i]
		z1, z2 := (x-mu+w)/(rt2*s), (x-mu-w)/(rt2*s)
		E := (math.Erf(z1) - math.Erf(z2)) / 2
		if gr != nil {
			g1, g2 := math.Exp(-z1*z1), math.Exp(-z2*z2)
			k := 1 / (rt2 * rtPi * s)
			gr[0] = E
			gr[1] = A * (g2 - g1) * k
			gr[2] = A / (rtPi * s) * (z2*g2 - z1*g1)
			gr[3] = A * (g1 + g2) * k
			gr[4], gr[5] = 1, x-x0
		}
		return A*E + p[4] + p[5]*(x-x0)
	}
	init := []float64{g.Height * 1.1, g.Center, 0.6 * s0, 0.6 * s0, 0, 0}
	r, err := lsq.Fit(lsq.Problem{Y: ys, Sigma: sig, Model: model}, init)
	if err != nil {
		return slitFit{}, false
	}
	A, mu, s, w := r.Params[0], r.Params[1], math.Abs(r.Params[2]), math.Abs(r.Params[3])
	if A <= 0 || mu < xs[0] || mu > xs[len(xs)-1] || s < 0.2 || w > 3*g.FWHM {
		return slitFit{}, false
	}
	v := r.Cov.At(1, 1)
	if r.DOF > 0 {
		if red := r.ChiSq / float64(r.DOF); red > 1+2*math.Sqrt(2/float64(r.DOF)) {
			v *= red
		}
	}
	if f.gain == 0 {
		v = math.Max(v, r.Robust.At(1, 1)*float64(len(xs))/float64(max(1, r.DOF)))
	}
	height := A * math.Erf(w/(rt2*s))
	// FWHM of a blurred box, close enough for a width column.
	fwhm := math.Hypot(2*w, s*fwhmPerSigma)
	return slitFit{mu: mu, sigma: math.Sqrt(v), fwhm: fwhm, height: height, chi2: r.ChiSq}, true
}

// splitWide looks for lines 1.25 times wider than the profile's typical line and
// tries to split each into two. A split is kept when it lowers χ² by more
// than 25·inflate and both parts clear the SNR threshold at least 0.4 FWHM
// apart, each at least 0.75 of the typical width (every line passes
// through the same optics: a part much narrower is the fit following a
// distorted shape, as a compressed photo's bright line, not a line);
// otherwise the line is flagged Unresolved. inflate is how much the
// profile's σ understates its noise on a line's scale (correlated noise,
// Find's corr²): χ² computed with that σ is as much too large, and a JPEG
// of quality 70 had a Balmer line split in two 1.7 px apart.
func (f fitter) splitWide(res *Result, minSNR, inflate float64, workers int) {
	var ws []float64
	for _, p := range res.Peaks {
		if p.SNR >= 20 && !p.Blend {
			ws = append(ws, p.FWHM)
		}
	}
	if len(ws) < 3 {
		return
	}
	typ := median(ws)
	// Each wide line is tried on its own (side by side with workers), into
	// its own slot: what it becomes, one line or two.
	became := make([][]Peak, len(res.Peaks))
	var wide []int
	for k, p := range res.Peaks {
		if p.Blend || p.SNR < 20 || p.FWHM < 1.25*typ {
			became[k] = []Peak{p}
		} else {
			wide = append(wide, k)
		}
	}
	try := func(k int) {
		p := res.Peaks[k]
		half := p.FWHM / 4
		cs := []comp{
			{idx: p.Index, mu: p.Center - half, a: p.Height * 0.7, fwhm: typ, prom: p.Prominence},
			{idx: p.Index, mu: p.Center + half, a: p.Height * 0.7, fwhm: typ, prom: p.Prominence},
		}
		one := f.chi2([]Peak{p})
		parts := f.fitGroup(cs)
		two := f.chi2(parts)
		if parts[0].Method == "gauss" && parts[1].Method == "gauss" && one-two > 25*inflate &&
			parts[0].SNR >= minSNR && parts[1].SNR >= minSNR && math.Abs(parts[1].Center-parts[0].Center) >= 0.4*typ &&
			math.Min(parts[0].FWHM, parts[1].FWHM) >= 0.75*typ {
			became[k] = parts
			return
		}
		p.Unresolved = true
		became[k] = []Peak{p}
	}
	inTurn(len(wide), workers, func(i int) { try(wide[i]) })
	var out []Peak
	for _, b := range became {
		out = append(out, b...)
	}
	res.Peaks = out
}

// inTurn calls fn(i) for every i in [0, n), up to workers at a time (one
// after another when workers ≤ 1), and waits for all.
func inTurn(n, workers int, fn func(i int)) {
	if workers <= 1 || n <= 1 {
		for i := range n {
			fn(i)
		}
		return
	}
	var wg sync.WaitGroup
	next := make(chan int)
	for range min(workers, n) {
		wg.Go(func() {
			for i := range next {
				fn(i)
			}
		})
	}
	for i := range n {
		next <- i
	}
	close(next)
	wg.Wait()
}

// chi2 evaluates χ² of fitted Gaussians (on the baseline-free profile,
// local background neglected) over their joint window.
func (f fitter) chi2(ps []Peak) float64 {
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, p := range ps {
		lo = math.Min(lo, p.Center-1.5*p.FWHM-1)
		hi = math.Max(hi, p.Center+1.5*p.FWHM+1)
	}
	var s float64
	for j := max(0, int(lo)); j <= min(len(f.y)-1, int(hi)+1); j++ {
		m := 0.0
		for _, p := range ps {
			d := (float64(j) - p.Center) / (p.FWHM / fwhmPerSigma)
			m += p.Height * math.Exp(-d*d/2)
		}
		r := (f.y[j] - m) / f.noise
		s += r * r
	}
	return s
}

const fwhmPerSigma = 2.3548200450309493 // 2·sqrt(2 ln 2)

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
