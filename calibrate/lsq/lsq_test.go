package lsq

import (
	"math"
	"math/rand/v2"
	"testing"
)

// A straight line has a closed-form weighted fit (the textbook normal
// equations), which the iterative fit must reproduce.
func TestFitMatchesClosedFormLine(t *testing.T) {
	xs := []float64{0, 1, 2, 3, 4, 5}
	ys := []float64{1.1, 2.9, 5.2, 7.1, 8.8, 11.2}
	sig := []float64{0.1, 0.2, 0.1, 0.3, 0.1, 0.2}
	var S, Sx, Sy, Sxx, Sxy float64
	for i := range xs {
		w := 1 / (sig[i] * sig[i])
		S += w
		Sx += w * xs[i]
		Sy += w * ys[i]
		Sxx += w * xs[i] * xs[i]
		Sxy += w * xs[i] * ys[i]
	}
	D := S*Sxx - Sx*Sx
	a, b := (Sxx*Sy-Sx*Sxy)/D, (S*Sxy-Sx*Sy)/D
	varB := S / D
	r, err := Fit(Problem{Y: ys, Sigma: sig, Model: func(i int, p, g []float64) float64 {
		if g != nil {
			g[0], g[1] = 1, xs[i]
		}
		return p[0] + p[1]*xs[i]
	}}, []float64{0, 0})
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(r.Params[0]-a) > 1e-8 || math.Abs(r.Params[1]-b) > 1e-8 {
		t.Errorf("params %v, closed form %v %v", r.Params, a, b)
	}
	if math.Abs(r.Cov.At(1, 1)-varB) > 1e-10 {
		t.Errorf("var(b) %g, closed form %g", r.Cov.At(1, 1), varB)
	}
}

// A Gaussian with noise: the fitted centre lies within 4σ of the truth.
func TestFitGaussian(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	var ys, sig []float64
	for i := 0; i < 40; i++ {
		x := float64(i)
		ys = append(ys, 100*math.Exp(-(x-17.3)*(x-17.3)/(2*2.1*2.1))+5+rng.NormFloat64())
		sig = append(sig, 1)
	}
	model := func(i int, p, g []float64) float64 {
		x := float64(i)
		e := math.Exp(-(x - p[1]) * (x - p[1]) / (2 * p[2] * p[2]))
		if g != nil {
			g[0] = e
			g[1] = p[0] * e * (x - p[1]) / (p[2] * p[2])
			g[2] = p[0] * e * (x - p[1]) * (x - p[1]) / (p[2] * p[2] * p[2])
			g[3] = 1
		}
		return p[0]*e + p[3]
	}
	r, err := Fit(Problem{Y: ys, Sigma: sig, Model: model}, []float64{80, 16, 3, 0})
	if err != nil {
		t.Fatal(err)
	}
	if s := math.Sqrt(r.Cov.At(1, 1)); math.Abs(r.Params[1]-17.3) > 4*s || s > 0.1 {
		t.Errorf("centre %.4f ± %.4f, truth 17.3", r.Params[1], s)
	}
}
