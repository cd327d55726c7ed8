// Package lsq fits a model to data by weighted nonlinear least squares and
// returns the parameter covariance.
//
// gonum's optimize minimises scalar functions but has no least-squares
// driver. Handing χ² to optimize.Newton worked, but each of its evaluations
// passes through channels between goroutines: on a 2-core machine a
// photo's line fits spent three times their CPU time waiting for those
// hand-overs. So the minimisation is a plain Levenberg–Marquardt loop
// here (Marquardt's diagonal scaling, the normal equations solved by
// gonum's Cholesky), checked against optimize.Newton's minimum in the
// tests; the covariance (JᵀWJ)⁻¹ at the solution is as before. Inside the
// loop the factorisation is LAPACK's (lapack64.Potrf, Potrs) rather than
// mat.Cholesky, which estimates the condition number on every call: a
// quarter of a photo's peak fitting.
package lsq

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/lapack/lapack64"
	"gonum.org/v1/gonum/mat"
)

// ErrSingular is returned when the parameters are not determined by the data.
var ErrSingular = errors.New("lsq: parameters not determined by the data (singular normal matrix)")

// Problem is a weighted least-squares problem with N observations.
type Problem struct {
	// Y and Sigma are the observations and their 1σ uncertainties; len(Sigma) == len(Y).
	Y, Sigma []float64
	// Model returns the model value for observation i at params and, when grad
	// is not nil, writes ∂model/∂params into grad (len(grad) == len(params)).
	Model func(i int, params, grad []float64) float64
}

// Result is a fitted parameter vector with its covariance.
type Result struct {
	Params []float64
	Cov    *mat.SymDense // (JᵀWJ)⁻¹, not scaled by χ²/DOF
	// Robust is the heteroskedasticity-consistent ("sandwich", White 1980
	// HC0) covariance (JᵀWJ)⁻¹ Jᵀ W diag(r²) W J (JᵀWJ)⁻¹, r the residuals:
	// right even when the σ given were wrong by a factor that varies from
	// observation to observation (unknown shot noise), noisier when few
	// observations are left over.
	Robust *mat.SymDense
	ChiSq  float64
	DOF    int
}

// Fit minimises χ² = Σ ((Y_i − model_i)/σ_i)² starting from init. It panics
// if len(Sigma) != len(Y); it returns ErrSingular when the normal matrix
// cannot be inverted and an error when χ² is not finite at the start.
func Fit(p Problem, init []float64) (Result, error) {
	if len(p.Sigma) != len(p.Y) {
		panic("lsq: len(Sigma) != len(Y)")
	}
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
	normal := func(dst *mat.SymDense, g []float64, x []float64) {
		for a := 0; a < k; a++ {
			for b := a; b < k; b++ {
				dst.SetSym(a, b, 0)
			}
			if g != nil {
				g[a] = 0
			}
		}
		for i, y := range p.Y {
			m := p.Model(i, x, grad)
			w := 1 / (p.Sigma[i] * p.Sigma[i])
			for a := 0; a < k; a++ {
				if g != nil {
					g[a] -= 2 * w * (y - m) * grad[a]
				}
				for b := a; b < k; b++ {
					dst.SetSym(a, b, dst.At(a, b)+w*grad[a]*grad[b])
				}
			}
		}
	}
	if c := chi2(init); math.IsNaN(c) || math.IsInf(c, 0) {
		return Result{}, fmt.Errorf("lsq: χ² not finite at the starting point")
	}
	best := levenbergMarquardt(k, init, chi2, normal)
	info := mat.NewSymDense(k, nil)
	normal(info, nil, best)
	var ch mat.Cholesky
	if !ch.Factorize(info) {
		return Result{}, ErrSingular
	}
	cov := mat.NewSymDense(k, nil)
	if err := ch.InverseTo(cov); err != nil {
		return Result{}, ErrSingular
	}
	// Meat of the sandwich: Σ w² r² g gᵀ.
	meat := mat.NewSymDense(k, nil)
	for i, y := range p.Y {
		m := p.Model(i, best, grad)
		w := 1 / (p.Sigma[i] * p.Sigma[i])
		r := y - m
		for a := 0; a < k; a++ {
			for b := a; b < k; b++ {
				meat.SetSym(a, b, meat.At(a, b)+w*w*r*r*grad[a]*grad[b])
			}
		}
	}
	var tmp, rob mat.Dense
	tmp.Mul(cov, meat)
	rob.Mul(&tmp, cov)
	robust := mat.NewSymDense(k, nil)
	for a := 0; a < k; a++ {
		for b := a; b < k; b++ {
			robust.SetSym(a, b, (rob.At(a, b)+rob.At(b, a))/2)
		}
	}
	return Result{Params: best, Cov: cov, Robust: robust, ChiSq: chi2(best), DOF: len(p.Y) - k}, nil
}

// levenbergMarquardt minimises chi2 from init. normal fills the normal
// matrix JᵀWJ and the gradient of χ² (−2·JᵀW·r) at x. Each round solves
// (JᵀWJ + λ·diag(JᵀWJ))·δ = JᵀW·r; a step that lowers χ² is taken and λ
// shrinks, otherwise λ grows (towards a short gradient step). It stops
// when a taken step changes χ² by less than 1e-12 of itself (or 1e-14
// absolutely), when no step helps any more, or after 200 rounds.
func levenbergMarquardt(k int, init []float64, chi2 func([]float64) float64, normal func(*mat.SymDense, []float64, []float64)) []float64 {
	x := append([]float64(nil), init...)
	c := chi2(x)
	A := mat.NewSymDense(k, nil)
	M := mat.NewSymDense(k, nil)
	g := make([]float64, k)
	rhs := make([]float64, k)
	delta := make([]float64, k)
	try := make([]float64, k)
	lambda := 1e-3
	for round := 0; round < 200; round++ {
		normal(A, g, x)
		for a := 0; a < k; a++ {
			rhs[a] = -g[a] / 2
		}
		improved := false
		for lambda < 1e16 {
			M.CopySym(A)
			for a := 0; a < k; a++ {
				d := A.At(a, a)
				if d <= 0 {
					d = 1e-300
				}
				M.SetSym(a, a, d*(1+lambda))
			}
			if !solveSPD(M, rhs, delta) {
				lambda *= 10
				continue
			}
			for a := 0; a < k; a++ {
				try[a] = x[a] + delta[a]
			}
			ct := chi2(try)
			if !(ct <= c) || math.IsNaN(ct) {
				lambda *= 10
				continue
			}
			improved = true
			drop := c - ct
			copy(x, try)
			c = ct
			lambda = math.Max(lambda/10, 1e-12)
			if drop <= 1e-12*c+1e-14 {
				return x
			}
			break
		}
		if !improved {
			return x
		}
	}
	return x
}

// solveSPD solves M·x = b for a symmetric positive definite M by Cholesky
// factorisation, overwriting M with its factor. It reports false when M is
// not positive definite or is too ill-conditioned to trust (the squared
// ratio of the factor's largest to smallest diagonal element, a lower
// bound on the condition number, beyond 1e16: mat.Cholesky's own limit).
func solveSPD(M *mat.SymDense, b, x []float64) bool {
	t, ok := lapack64.Potrf(M.RawSymmetric())
	if !ok {
		return false
	}
	lo, hi := math.Inf(1), 0.0
	for i := 0; i < t.N; i++ {
		d := math.Abs(t.Data[i*t.Stride+i])
		lo, hi = math.Min(lo, d), math.Max(hi, d)
	}
	if !(lo > 0) || (hi/lo)*(hi/lo) > 1e16 {
		return false
	}
	copy(x, b)
	lapack64.Potrs(t, blas64.General{Rows: t.N, Cols: 1, Stride: 1, Data: x})
	return true
}
