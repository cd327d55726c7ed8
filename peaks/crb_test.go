package peaks

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// crbCentre is the Cramér–Rao bound on the variance of the centre of a
// Gaussian line A·exp(−(i−μ)²/2s²) on a flat background b (counts), sampled
// at i = 0..n−1, with Poisson shot noise and Gaussian read noise r: the
// (μ, μ) element of the inverse Fisher matrix F_jk = Σ ∂f/∂θ_j ∂f/∂θ_k /
// (f + r²) over θ = (A, μ, s, b), the Gaussian-noise form of the Poisson
// information (textbook result, e.g. any estimation-theory text; common
// practice in astrometry).
func crbCentre(n int, a, mu, s, b, r float64) float64 {
	F := mat.NewSymDense(4, nil)
	for i := 0; i < n; i++ {
		x := float64(i)
		e := math.Exp(-(x - mu) * (x - mu) / (2 * s * s))
		f := a*e + b
		g := []float64{e, a * e * (x - mu) / (s * s), a * e * (x - mu) * (x - mu) / (s * s * s), 1}
		for j := 0; j < 4; j++ {
			for k := j; k < 4; k++ {
				F.SetSym(j, k, F.At(j, k)+g[j]*g[k]/(f+r*r))
			}
		}
	}
	var ch mat.Cholesky
	if !ch.Factorize(F) {
		return math.NaN()
	}
	inv := mat.NewSymDense(4, nil)
	ch.InverseTo(inv)
	return inv.At(1, 1)
}

type crbCell struct {
	snr, s           float64
	rmsOverCRB       float64
	reportedOverTrue float64
	trials, undetect int
}

// crbRun measures the centroid error over trials noise draws for one
// (SNR, width) cell. SNR is the peak height over the background noise.
func crbRun(snr, s float64, trials int, gain float64, seed uint64) crbCell {
	const n, b, r = 96, 100.0, 5.0
	sb := math.Sqrt(b + r*r)
	a := snr * sb
	rng := rand.New(rand.NewPCG(seed, uint64(snr*10+s)))
	var se, sc, sr float64
	c := crbCell{snr: snr, s: s, trials: trials}
	y := make([]float64, n)
	for t := 0; t < trials; t++ {
		mu := 47 + rng.Float64()
		for i := range y {
			x := float64(i)
			f := a*math.Exp(-(x-mu)*(x-mu)/(2*s*s)) + b
			y[i] = f + math.Sqrt(f+r*r)*rng.NormFloat64()
		}
		res, err := Find(y, Options{Gain: gain})
		var best *Peak
		if err == nil {
			for k := range res.Peaks {
				if math.Abs(res.Peaks[k].Center-mu) < 2*s+1 && (best == nil || res.Peaks[k].SNR > best.SNR) {
					best = &res.Peaks[k]
				}
			}
		}
		if best == nil {
			c.undetect++
			continue
		}
		d := best.Center - mu
		se += d * d
		sc += crbCentre(n, a, mu, s, b, r)
		sr += best.Sigma * best.Sigma
	}
	c.rmsOverCRB = math.Sqrt(se / sc)
	c.reportedOverTrue = math.Sqrt(sr / se)
	return c
}

// Over SNR 10-1000 and widths σ = 1-4 px, with shot noise weighting, the
// RMS centre error stays within 1.15 times the Cramér–Rao bound and the
// reported σ matches the observed scatter within 15 %.
func TestCentroidNearCramerRaoBound(t *testing.T) {
	// The ratios are estimated from the trials: with 500 the spread of
	// reported/observed between seeds is ±0.04 (12 seeds at σ 1 px, SNR 10
	// ranged 1.00-1.17, the mean over 5000 trials was 1.01), too wide to
	// test a 15 % bound; 2000 trials bring it to about ±0.02.
	const trials = 2000
	// The CRB counts four parameters (flat background); the fit also has a
	// background slope, which costs wide lines some precision: σ 4 px at
	// SNR 10 sits near 1.13.
	for _, s := range []float64{1, 2, 4} {
		for _, snr := range []float64{10, 30, 100, 300, 1000} {
			t.Run(fmt.Sprintf("sigma=%g/snr=%g", s, snr), func(t *testing.T) {
				t.Parallel()
				c := crbRun(snr, s, trials, 1, 77)
				t.Logf("σ %.0f px, SNR %4.0f: RMS/CRB %.3f, reported/observed %.3f, missed %d/%d", s, snr, c.rmsOverCRB, c.reportedOverTrue, c.undetect, c.trials)
				if c.undetect > 0 {
					t.Errorf("%d of %d lines not found", c.undetect, c.trials)
				}
				if c.rmsOverCRB > 1.15 {
					t.Errorf("RMS error %.3f × the Cramér–Rao bound", c.rmsOverCRB)
				}
				if c.reportedOverTrue < 0.85 || c.reportedOverTrue > 1.15 {
					t.Errorf("reported σ / observed scatter = %.3f", c.reportedOverTrue)
				}
			})
		}
	}
}

// BenchmarkCramerRao prints the ratios for uniform weights (gain unknown,
// as for photos) and for shot-noise weights.
func BenchmarkCramerRao(b *testing.B) {
	for _, gain := range []float64{0, 1} {
		for _, s := range []float64{1, 2, 4} {
			for _, snr := range []float64{10, 100, 1000} {
				b.Run(fmt.Sprintf("gain=%g/sigma=%g/snr=%g", gain, s, snr), func(b *testing.B) {
					var c crbCell
					for i := 0; i < b.N; i++ {
						c = crbRun(snr, s, 100, gain, uint64(i))
					}
					b.ReportMetric(c.rmsOverCRB, "rms/crb")
					b.ReportMetric(c.reportedOverTrue, "reported/observed")
				})
			}
		}
	}
}
