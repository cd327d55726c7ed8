package calibrate

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// ErrTooFewBalmer is returned when fewer than two Balmer lines are given.
var ErrTooFewBalmer = errors.New("calibrate: the Rydberg fit needs at least two Balmer lines")

// Balmer is one measured Balmer line.
type Balmer struct {
	N       int     // upper level (3 for Hα)
	AirNM   float64 // measured air wavelength, nm
	SigmaNM float64 // its 1σ, nm (used when no covariance is given)
}

// Rydberg is the result of fitting 1/λ_vac = R·(1/4 − 1/n²).
type Rydberg struct {
	R         float64   `json:"value_per_m"`    // m⁻¹
	Sigma     float64   `json:"err_per_m"`      // 1σ, m⁻¹: SigmaStat, times sqrt(χ²/DOF) when χ² is beyond its 2σ range
	SigmaStat float64   `json:"err_stat_per_m"` // 1σ from the wavelength covariance alone
	Scaled    bool      `json:"err_scaled"`     // Sigma was widened by the Birge ratio
	ChiSq     float64   `json:"chi2"`
	DOF       int       `json:"dof"`
	LinesUsed []int     `json:"lines_used"` // upper levels n
	Residuals []float64 `json:"residuals_per_m"`
	VacNM     []float64 `json:"vacuum_nm"`
	X         []float64 `json:"x"` // 1/4 − 1/n²
	Y         []float64 `json:"y"` // 1/λ_vac, m⁻¹
	YSigma    []float64 `json:"y_err"`
	// Free-intercept check: 1/λ = A + R'·x. A far from zero (many σ)
	// points to a systematic offset in the wavelengths.
	Intercept      float64 `json:"intercept_per_m"`
	InterceptSigma float64 `json:"intercept_err_per_m"`
	SlopeFree      float64 `json:"slope_free_per_m"`
	SlopeFreeSigma float64 `json:"slope_free_err_per_m"`
	// Comparisons with CODATA 2018.
	RH         float64 `json:"codata_r_h_per_m"`
	DevSigma   float64 `json:"deviation_sigma"`   // (R − R_H)/σ
	DevPercent float64 `json:"deviation_percent"` // 100·(R − R_H)/R_H
	DevRInfPct float64 `json:"deviation_r_inf_percent"`
	EnergyEV   float64 `json:"ground_state_ev"` // h c R
	EnergySig  float64 `json:"ground_state_err_ev"`
	// RRef is the same fit applied to the NIST reference wavelengths of the
	// same lines: what a perfect measurement gives. It lies about 1.2e-5
	// above R_H because the Bohr formula ignores fine structure and QED
	// shifts (REFERENCE-DATA.md section 2); a measurement more precise than
	// that should be judged against RRef.
	RRef        float64 `json:"r_reference_lines_per_m"`
	DevRefSigma float64 `json:"deviation_from_reference_sigma"`
}

// FitRydberg converts the air wavelengths to vacuum (AirToVacuum) and fits
// R by generalised least squares through the origin. cov is the covariance
// of the air wavelengths (nm²), for example Dispersion.Covariance, which
// carries the correlation the shared calibration puts between lines; nil
// means independent errors SigmaNM. It panics if cov's size differs from
// len(lines).
func FitRydberg(lines []Balmer, cov *mat.SymDense) (Rydberg, error) {
	n := len(lines)
	if n < 2 {
		return Rydberg{}, fmt.Errorf("%w: %d given", ErrTooFewBalmer, n)
	}
	if cov == nil {
		cov = mat.NewSymDense(n, nil)
		for i, l := range lines {
			cov.SetSym(i, i, l.SigmaNM*l.SigmaNM)
		}
	}
	if r, _ := cov.Dims(); r != n {
		panic("calibrate: covariance size differs from the number of lines")
	}
	out := Rydberg{RH: RHydrogen()}
	jac := make([]float64, n) // ∂y/∂λ_air, m⁻¹ per nm
	for i, l := range lines {
		if l.N < 3 {
			return Rydberg{}, fmt.Errorf("calibrate: Balmer line with n=%d (need n ≥ 3)", l.N)
		}
		vac := AirToVacuum(l.AirNM)
		y := 1 / (vac * 1e-9)
		out.LinesUsed = append(out.LinesUsed, l.N)
		out.VacNM = append(out.VacNM, vac)
		out.X = append(out.X, 0.25-1/float64(l.N*l.N))
		out.Y = append(out.Y, y)
		jac[i] = -y / vac * AirToVacuumSlope(l.AirNM)
	}
	cy := mat.NewSymDense(n, nil)
	for i := 0; i < n; i++ {
		for j := i; j < n; j++ {
			cy.SetSym(i, j, jac[i]*cov.At(i, j)*jac[j])
		}
		out.YSigma = append(out.YSigma, math.Sqrt(cy.At(i, i)))
	}
	var ch mat.Cholesky
	if !ch.Factorize(cy) {
		return Rydberg{}, errors.New("calibrate: wavelength covariance is not positive definite (a zero uncertainty?)")
	}
	beta, bcov, chi2, err := gls(&ch, out.X, out.Y, false)
	if err != nil {
		return Rydberg{}, err
	}
	out.R, out.SigmaStat, out.ChiSq, out.DOF = beta[0], math.Sqrt(bcov.At(0, 0)), chi2, n-1
	out.Sigma = out.SigmaStat
	// When the lines scatter more than their errors allow, say so by
	// widening σ (the Birge ratio, common practice); ordinary fluctuations
	// of χ² leave it alone.
	if out.DOF > 0 && chi2 > float64(out.DOF)+2*math.Sqrt(2*float64(out.DOF)) {
		out.Sigma *= math.Sqrt(chi2 / float64(out.DOF))
		out.Scaled = true
	}
	for i := range out.X {
		out.Residuals = append(out.Residuals, out.Y[i]-out.R*out.X[i])
	}
	if n >= 3 {
		b2, c2, _, err := gls(&ch, out.X, out.Y, true)
		if err == nil {
			out.Intercept, out.InterceptSigma = b2[0], math.Sqrt(c2.At(0, 0))
			out.SlopeFree, out.SlopeFreeSigma = b2[1], math.Sqrt(c2.At(1, 1))
		}
	}
	var ref []float64
	for _, l := range lines {
		ref = append(ref, referenceBalmer(l.N))
	}
	if refY := balmerY(ref); !math.IsNaN(refY[0]) {
		if b, _, _, err := gls(&ch, out.X, refY, false); err == nil {
			out.RRef = b[0]
			out.DevRefSigma = (out.R - out.RRef) / out.Sigma
		}
	}
	out.DevSigma = (out.R - out.RH) / out.Sigma
	out.DevPercent = 100 * (out.R - out.RH) / out.RH
	out.DevRInfPct = 100 * (out.R - RInfinity) / RInfinity
	out.EnergyEV = EnergyEV(out.R)
	out.EnergySig = EnergyEV(out.Sigma)
	return out, nil
}

// gls solves y = X·β under covariance C (given by its Cholesky factor),
// with design columns [x] or [1 x].
func gls(ch *mat.Cholesky, x, y []float64, intercept bool) ([]float64, *mat.SymDense, float64, error) {
	n := len(x)
	k := 1
	if intercept {
		k = 2
	}
	X := mat.NewDense(n, k, nil)
	for i := range x {
		if intercept {
			X.Set(i, 0, 1)
		}
		X.Set(i, k-1, x[i])
	}
	Y := mat.NewVecDense(n, y)
	var ciX mat.Dense
	if err := ch.SolveTo(&ciX, X); err != nil {
		return nil, nil, 0, fmt.Errorf("calibrate: rydberg fit: %w", err)
	}
	var ciY mat.VecDense
	if err := ch.SolveVecTo(&ciY, Y); err != nil {
		return nil, nil, 0, fmt.Errorf("calibrate: rydberg fit: %w", err)
	}
	var A mat.Dense
	A.Mul(X.T(), &ciX)
	var b mat.VecDense
	b.MulVec(X.T(), &ciY)
	As := mat.NewSymDense(k, nil)
	for i := 0; i < k; i++ {
		for j := i; j < k; j++ {
			As.SetSym(i, j, A.At(i, j))
		}
	}
	var ach mat.Cholesky
	if !ach.Factorize(As) {
		return nil, nil, 0, errors.New("calibrate: rydberg fit: degenerate design (all lines the same n?)")
	}
	var beta mat.VecDense
	if err := ach.SolveVecTo(&beta, &b); err != nil {
		return nil, nil, 0, err
	}
	cov := mat.NewSymDense(k, nil)
	if err := ach.InverseTo(cov); err != nil {
		return nil, nil, 0, err
	}
	var r mat.VecDense
	r.MulVec(X, &beta)
	r.SubVec(Y, &r)
	var cir mat.VecDense
	if err := ch.SolveVecTo(&cir, &r); err != nil {
		return nil, nil, 0, err
	}
	return beta.RawVector().Data, cov, mat.Dot(&r, &cir), nil
}

// referenceBalmer returns the NIST air wavelength of Balmer line n, or NaN
// when the built-in table lacks it.
func referenceBalmer(n int) float64 {
	for _, l := range Hydrogen().Lines {
		if l.N == n {
			return l.NM
		}
	}
	return math.NaN()
}

// balmerY returns 1/λ_vac in m⁻¹ for air wavelengths in nm; NaN in, NaN
// out in the first element.
func balmerY(airNM []float64) []float64 {
	y := make([]float64, len(airNM))
	for i, a := range airNM {
		if math.IsNaN(a) {
			y[0] = math.NaN()
			return y
		}
		y[i] = 1 / (AirToVacuum(a) * 1e-9)
	}
	return y
}
