package lsq

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/optimize"
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

// The Levenberg–Marquardt loop reaches the minimum gonum's general
// minimiser (optimize.Newton on χ² with the Gauss–Newton Hessian, what
// this package used before) reaches: two overlapping Gaussians on a
// slope, 40 noisy problems, parameters within 1e-5 of their σ.
func TestFitAgreesWithGonumNewton(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	model := func(x float64, p, g []float64) float64 {
		e1 := math.Exp(-(x - p[1]) * (x - p[1]) / (2 * p[2] * p[2]))
		e2 := math.Exp(-(x - p[4]) * (x - p[4]) / (2 * p[2] * p[2]))
		if g != nil {
			g[0] = e1
			g[1] = p[0] * e1 * (x - p[1]) / (p[2] * p[2])
			g[2] = p[0]*e1*(x-p[1])*(x-p[1])/(p[2]*p[2]*p[2]) + p[3]*e2*(x-p[4])*(x-p[4])/(p[2]*p[2]*p[2])
			g[3] = e2
			g[4] = p[3] * e2 * (x - p[4]) / (p[2] * p[2])
			g[5] = 1
			g[6] = x
		}
		return p[0]*e1 + p[3]*e2 + p[5] + p[6]*x
	}
	for trial := 0; trial < 40; trial++ {
		c1 := 15 + 2*rng.Float64()
		sep := 3 + 3*rng.Float64()
		var ys, sig []float64
		for i := 0; i < 40; i++ {
			x := float64(i)
			ys = append(ys, 100*math.Exp(-(x-c1)*(x-c1)/8)+40*math.Exp(-(x-c1-sep)*(x-c1-sep)/8)+3+0.05*x+rng.NormFloat64())
			sig = append(sig, 1)
		}
		pr := Problem{Y: ys, Sigma: sig, Model: func(i int, p, g []float64) float64 { return model(float64(i), p, g) }}
		init := []float64{80, c1 - 0.5, 2.5, 30, c1 + sep + 0.5, 0, 0}
		got, err := Fit(pr, init)
		if err != nil {
			t.Fatal(err)
		}
		want := gonumNewton(pr, init)
		for a := range want {
			if d := math.Abs(got.Params[a]-want[a]) / math.Sqrt(got.Cov.At(a, a)); d > 1e-5 {
				t.Errorf("trial %d param %d: %.9g here, %.9g from gonum (%.2g σ apart)", trial, a, got.Params[a], want[a], d)
			}
		}
	}
}

// gonumNewton minimises the problem's χ² with gonum's optimize.Newton.
func gonumNewton(p Problem, init []float64) []float64 {
	k := len(init)
	grad := make([]float64, k)
	chi2 := func(x []float64) float64 {
		var s float64
		for i, y := range p.Y {
			r := (y - p.Model(i, x, nil)) / p.Sigma[i]
			s += r * r
		}
		return s
	}
	normal := func(h *mat.SymDense, g, x []float64) {
		for a := 0; a < k; a++ {
			if g != nil {
				g[a] = 0
			}
			for b := a; b < k; b++ {
				if h != nil {
					h.SetSym(a, b, 0)
				}
			}
		}
		for i, y := range p.Y {
			m := p.Model(i, x, grad)
			w := 1 / (p.Sigma[i] * p.Sigma[i])
			for a := 0; a < k; a++ {
				if g != nil {
					g[a] -= 2 * w * (y - m) * grad[a]
				}
				for b := a; b < k && h != nil; b++ {
					h.SetSym(a, b, h.At(a, b)+2*w*grad[a]*grad[b])
				}
			}
		}
	}
	prob := optimize.Problem{Func: chi2, Grad: func(g, x []float64) { normal(nil, g, x) }, Hess: func(h *mat.SymDense, x []float64) { normal(h, nil, x) }}
	settings := &optimize.Settings{MajorIterations: 500, Converger: &optimize.FunctionConverge{Absolute: 1e-12, Relative: 1e-14, Iterations: 10}}
	res, _ := optimize.Minimize(prob, init, settings, &optimize.Newton{})
	return res.X
}

// solveSPD gives the solution gonum's mat.Cholesky gives on well-posed
// systems (random AᵀA + I, up to 12×12), and refuses what mat.Cholesky
// refuses: a matrix that is not positive definite, and one whose
// condition number is far beyond 1e16.
func TestSolveSPDMatchesCholesky(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	for trial := 0; trial < 200; trial++ {
		k := 1 + rng.IntN(12)
		a := mat.NewDense(k+3, k, nil)
		for i := 0; i < k+3; i++ {
			for j := 0; j < k; j++ {
				a.Set(i, j, rng.NormFloat64()*math.Pow(10, float64(rng.IntN(5))))
			}
		}
		m := mat.NewSymDense(k, nil)
		m.SymOuterK(1, a.T())
		for i := 0; i < k; i++ {
			m.SetSym(i, i, m.At(i, i)+1)
		}
		b := make([]float64, k)
		for i := range b {
			b[i] = rng.NormFloat64()
		}
		var ch mat.Cholesky
		var want mat.VecDense
		if !ch.Factorize(m) || ch.SolveVecTo(&want, mat.NewVecDense(k, append([]float64(nil), b...))) != nil {
			t.Fatalf("trial %d: mat.Cholesky failed on a well-posed system", trial)
		}
		got := make([]float64, k)
		if !solveSPD(mat.NewSymDense(k, append([]float64(nil), m.RawSymmetric().Data...)), b, got) {
			t.Fatalf("trial %d: solveSPD refused a well-posed %dx%d system", trial, k, k)
		}
		for i := range got {
			if d := math.Abs(got[i] - want.AtVec(i)); d > 1e-9*math.Max(1, math.Abs(want.AtVec(i))) {
				t.Fatalf("trial %d: x[%d] = %g, mat.Cholesky %g", trial, i, got[i], want.AtVec(i))
			}
		}
	}
	x := make([]float64, 2)
	if solveSPD(mat.NewSymDense(2, []float64{1, 2, 2, 1}), []float64{1, 1}, x) {
		t.Error("solved an indefinite system")
	}
	if solveSPD(mat.NewSymDense(2, []float64{1, 0, 0, 1e-20}), []float64{1, 1}, x) {
		t.Error("solved a system with condition number 1e20")
	}
	var ch mat.Cholesky
	if ch.Factorize(mat.NewSymDense(2, []float64{1, 0, 0, 1e-20})) && ch.SolveVecTo(new(mat.VecDense), mat.NewVecDense(2, []float64{1, 1})) == nil {
		t.Error("mat.Cholesky solved the 1e20 system: the two disagree on what to refuse")
	}
}
