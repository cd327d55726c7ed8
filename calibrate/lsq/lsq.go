// Package lsq fits a model to data by weighted nonlinear least squares and
// returns the parameter covariance.
//
// gonum's optimize minimises scalar functions but has no least-squares
// driver, so this package supplies the thin layer between: χ², its
// gradient and the Gauss–Newton Hessian 2·JᵀWJ handed to optimize.Newton
// (which regularises the Hessian when needed, giving Levenberg–Marquardt-like
// steps), and the covariance (JᵀWJ)⁻¹ at the solution.
package lsq

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/optimize"
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
	scratch := mat.NewSymDense(k, nil)
	prob := optimize.Problem{
		Func: chi2,
		Grad: func(g, x []float64) { normal(scratch, g, x) },
		Hess: func(h *mat.SymDense, x []float64) {
			normal(h, nil, x)
			h.ScaleSym(2, h)
		},
	}
	settings := &optimize.Settings{MajorIterations: 200, Converger: &optimize.FunctionConverge{Absolute: 1e-10, Relative: 1e-12, Iterations: 5}}
	best := append([]float64(nil), init...)
	res, err := optimize.Minimize(prob, init, settings, &optimize.Newton{})
	if res != nil && res.F <= chi2(best) {
		best = res.X
	} else if err != nil {
		return Result{}, fmt.Errorf("lsq: %w", err)
	}
	// Line-search stalls at the float floor are reported as errors by
	// optimize but leave a usable minimum; the covariance below decides.
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
