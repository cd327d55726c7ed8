package calibrate

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"sort"

	"gonum.org/v1/gonum/mat"

	"lineshot/calibrate/lsq"
)

// ErrTooFewLines is returned when fewer calibration points are given than
// any dispersion model needs.
var ErrTooFewLines = errors.New("calibrate: too few identified lines for a dispersion fit")

// Point is one calibration point: a measured position and the air
// wavelength of the reference line identified there.
type Point struct {
	PX      float64 // position along the profile, px
	SigmaPX float64 // its 1σ uncertainty, px
	NM      float64 // reference air wavelength, nm
	SigmaNM float64 // uncertainty of the reference (bands); 0 means FitOptions.RefSigmaNM
	Line    string  // reference line name
	// AcrossPX is the point's distance across the band from the optical
	// axis (px, from the line through the principal point along the
	// dispersion direction). The grating model uses it: a band away from
	// the axis sees the grating at an elevation, and its lines sit
	// elsewhere (conical diffraction). 0 for a band through the axis.
	AcrossPX float64
	// Order is the line's signed diffraction order when the photo shows
	// the zero order or both first orders (−1 on one side of the zero
	// order, +1 on the other); 0 means +1. Any point with an order other
	// than +1 makes the fit a signed one (Dispersion.Signed).
	Order int
	// ZeroOrder marks the zero order (the undiffracted slit image), where
	// m·λ = 0; NM is ignored.
	ZeroOrder bool
}

// target is the value the dispersion must reach at p: m·λ.
func (p Point) target() float64 { return float64(p.order()) * p.NM }

// refSigma is the uncertainty of p's target from its reference
// wavelength: its own, or the fit's default, times |m|.
func (p Point) refSigma(opt FitOptions) float64 {
	rs := opt.RefSigmaNM
	if p.SigmaNM > 0 {
		rs = p.SigmaNM
	} else if rs == 0 {
		rs = 0.001 // lamp-type and hyperfine spread of Hg lines are below this (REFERENCE-DATA.md section 1)
	}
	return rs * math.Abs(float64(p.order()))
}

// order is p's signed order (+1 for the zero value; 0 for the zero order).
func (p Point) order() int {
	switch {
	case p.ZeroOrder:
		return 0
	case p.Order == 0:
		return 1
	}
	return p.Order
}

// Model names.
const (
	ModelPoly1   = "poly1"
	ModelPoly2   = "poly2"
	ModelPoly3   = "poly3"
	ModelGrating = "grating"
	// ModelLens is the grating model seen through a lens with radial
	// distortion: a position is undistorted (the lens maps undistorted
	// radius u to u·(1 + k·u²), in units of Scale about the principal
	// point; the first term of the usual radial model, common practice)
	// before the grating model applies. Params [a, b, c, k]. Wide phone lenses bend
	// the frame enough that the plain model extrapolates Hα 0.6 nm long
	// from mercury lines (simulated, k1 = −0.08).
	ModelLens = "grating-lens"
)

// Dispersion maps a profile position to an air wavelength.
//
// Polynomial models: λ = Σ Params[k]·t^k with t = (p − Center)/Scale.
//
// The grating model is a plane transmission grating at normal incidence seen
// by a pinhole camera whose axis makes angle α with the grating normal and
// whose principal point lies at profile position Center. With x = p − Center
// the grating equation gives λ = D·sin(α + atan(x/F)) (D = d/m, F the focal
// length in px), which rearranges to
//
//	λ = (a + b·t) / sqrt(1 + c·t²),  t = x/Scale,
//
// with a = D sin α, b = D cos α·Scale/F and c = (Scale/F)². Params holds
// [a, b, c]: linear in a and b and well conditioned, unlike [D, α, F].
// Physical returns D, α and F.
type Dispersion struct {
	Model     string      `json:"model"`
	Params    []float64   `json:"params"`
	Cov       [][]float64 `json:"covariance"` // parameter covariance, scaled by Birge² when it exceeds 1
	Center    float64     `json:"center_px"`
	Scale     float64     `json:"scale_px,omitempty"`
	ChiSq     float64     `json:"chi2"`
	DOF       int         `json:"dof"`
	Birge     float64     `json:"birge_ratio"`       // sqrt(χ²/DOF); 1 when DOF is 0
	FloorPX   float64     `json:"position_floor_px"` // see FitOptions.EstimateFloor
	AICc      Float       `json:"aicc"`              // +Inf (null in JSON) when no degree of freedom is left
	RMSNM     float64     `json:"rms_nm"`
	MinPX     float64     `json:"min_px"` // calibrated range
	MaxPX     float64     `json:"max_px"`
	Residuals []Residual  `json:"residuals"`
	Compared  []ModelFit  `json:"models_compared,omitempty"`
	// Signed says the model gives m·λ, the signed order times the
	// wavelength, not λ: the fit spans the zero order or both first
	// orders, and Resolve tells the order of each position. The grating
	// equation, d·sin θ = m·λ, is linear in m·λ, so one model covers
	// every order (REFERENCE-DATA.md section 9).
	Signed bool `json:"signed_orders,omitempty"`
	// ZeroOrderPX is the zero order's measured position, when it was in
	// the calibration photo (0 otherwise).
	ZeroOrderPX float64 `json:"zero_order_px,omitempty"`

	across float64 // see Across
}

// Across returns d evaluated at distance a (px) across the band from the
// optical axis, for a band other than the one it was fitted on (another
// band of the same photo, two lamps stacked): the grating model then
// accounts for conical diffraction, λ = (a + b·t)/sqrt(1 + c·(t² + w²))
// with w = a/Scale (the pinhole camera's ray to (x, y) has
// sqrt(1 + (x² + y²)/F²) in the denominator of its direction cosine).
// Polynomial models have no such term and are unchanged.
func (d Dispersion) Across(a float64) Dispersion {
	d.across = a
	return d
}

// Resolve returns the air wavelength at profile position p and its
// first-order sign: for a signed dispersion the side of the zero order p
// lies on (+1 or −1), otherwise +1.
func (d Dispersion) Resolve(p float64) (nm float64, order int) {
	v := d.Wavelength(p)
	if d.Signed && v < 0 {
		return -v, -1
	}
	return v, 1
}

// Residual is the fit's residual at one calibration point.
type Residual struct {
	Line    string  `json:"line"`
	Order   int     `json:"order,omitempty"` // signed order in a signed fit (0: the zero order, where RefNM is 0)
	RefNM   float64 `json:"ref_nm"`
	PX      float64 `json:"px"`
	FitNM   float64 `json:"fit_nm"`
	ResidNM float64 `json:"resid_nm"` // reference − fit
	// ResidPX is ResidNM over the fit's slope at the point: null in JSON
	// where the fit has none there (a fit through photos of two setups,
	// the point past where its lens term turns it over).
	ResidPX Float `json:"resid_px"`
}

// ModelFit summarises one candidate model of a model choice.
type ModelFit struct {
	Model string  `json:"model"`
	ChiSq float64 `json:"chi2"`
	DOF   int     `json:"dof"`
	AICc  Float   `json:"aicc"`
	RMSNM float64 `json:"rms_nm"`
}

// Float is a float64 that encodes as JSON null when it is not finite
// (JSON has no infinity) and decodes null as +Inf.
type Float float64

// MarshalJSON implements json.Marshaler.
func (f Float) MarshalJSON() ([]byte, error) {
	v := float64(f)
	if math.IsInf(v, 0) || math.IsNaN(v) {
		return []byte("null"), nil
	}
	return json.Marshal(v)
}

// UnmarshalJSON implements json.Unmarshaler.
func (f *Float) UnmarshalJSON(b []byte) error {
	if string(b) == "null" {
		*f = Float(math.Inf(1))
		return nil
	}
	var v float64
	if err := json.Unmarshal(b, &v); err != nil {
		return err
	}
	*f = Float(v)
	return nil
}

// Wavelength returns the air wavelength at profile position p, nm; for a
// signed dispersion, m·λ (see Resolve).
func (d Dispersion) Wavelength(p float64) float64 { return d.eval(p, d.Params, nil) }

// Slope returns dλ/dp at p, nm/px.
func (d Dispersion) Slope(p float64) float64 {
	const h = 1e-3
	return (d.Wavelength(p+h) - d.Wavelength(p-h)) / (2 * h)
}

// Sigma returns the 1σ uncertainty of the wavelength at p for a position
// known to sigmaPX: the calibration's own uncertainty (which grows outside
// the calibrated range) added in quadrature to the position's.
func (d Dispersion) Sigma(p, sigmaPX float64) float64 {
	c := d.Covariance([]float64{p}, []float64{sigmaPX})
	return math.Sqrt(c.At(0, 0))
}

// Covariance returns the covariance matrix of the wavelengths at positions
// ps with independent position uncertainties sps. Off-diagonal terms come
// from the shared calibration; they matter when the wavelengths are fitted
// together, as in the Rydberg fit. For a signed dispersion they are the
// wavelengths Resolve gives, on either side of the zero order.
func (d Dispersion) Covariance(ps, sps []float64) *mat.SymDense {
	k := len(d.Params)
	g := make([][]float64, len(ps))
	for i, p := range ps {
		g[i] = make([]float64, k)
		if v := d.eval(p, d.Params, g[i]); d.Signed && v < 0 {
			// λ = −F on the negative side: the gradient turns over.
			for a := range g[i] {
				g[i][a] = -g[i][a]
			}
		}
	}
	c := mat.NewSymDense(len(ps), nil)
	for i := range ps {
		for j := i; j < len(ps); j++ {
			var s float64
			for a := 0; a < k; a++ {
				for b := 0; b < k; b++ {
					s += g[i][a] * d.Cov[a][b] * g[j][b]
				}
			}
			if i == j {
				sl := d.Slope(ps[i]) * sps[i]
				s += sl * sl
			}
			c.SetSym(i, j, s)
		}
	}
	return c
}

// eval computes λ(p) for params (at d's distance across the band) and
// writes ∂λ/∂params into grad if not nil.
func (d Dispersion) eval(p float64, params, grad []float64) float64 {
	return d.evalAt(p, d.across, params, grad)
}

// evalAt is eval at distance across from the optical axis.
func (d Dispersion) evalAt(p, across float64, params, grad []float64) float64 {
	if d.Model == ModelGrating || d.Model == ModelLens {
		a, b, c := params[0], params[1], params[2]
		t := (p - d.Center) / d.Scale
		w := across / d.Scale
		var k, dtdk, dwdk float64 // lens: distortion; ∂t/∂k, ∂w/∂k
		if d.Model == ModelLens {
			// The lens maps an undistorted radius u to s = u·(1 + k·u²)
			// (the usual radial model, distortion in undistorted
			// coordinates, as OpenCV's): solve for u by Newton, scale t
			// and w by u/s.
			k = params[3]
			sd := math.Hypot(t, w)
			if sd > 0 {
				u := sd
				for it := 0; it < 20; it++ {
					f := u*(1+k*u*u) - sd
					fp := 1 + 3*k*u*u
					if fp <= 0 {
						return math.NaN()
					}
					du := f / fp
					u -= du
					if math.Abs(du) < 1e-13 {
						break
					}
				}
				dudk := -u * u * u / (1 + 3*k*u*u)
				dtdk, dwdk = t/sd*dudk, w/sd*dudk
				t, w = t*u/sd, w*u/sd
			}
		}
		r2 := t*t + w*w
		q := 1 + c*r2
		if q <= 0 {
			return math.NaN()
		}
		s := math.Sqrt(q)
		v := (a + b*t) / s
		if grad != nil {
			grad[0] = 1 / s
			grad[1] = t / s
			grad[2] = -v * r2 / (2 * q)
			if d.Model == ModelLens {
				grad[3] = b*dtdk/s - v*c*(t*dtdk+w*dwdk)/q
			}
		}
		return v
	}
	t := (p - d.Center) / d.Scale
	var v, tk float64 = 0, 1
	for k, c := range params {
		v += c * tk
		if grad != nil {
			grad[k] = tk
		}
		tk *= t
	}
	return v
}

// FitOptions tunes FitDispersion. The zero value is usable.
type FitOptions struct {
	// Model forces one model ("poly1".."poly3", "grating"); "" chooses the
	// model with the smallest AICc among those the points can support.
	Model string
	// OpticalCenterPX is the profile position nearest the camera's principal
	// point, used by the grating model; NaN or 0 with no better knowledge
	// means the middle of the calibrated range.
	OpticalCenterPX float64
	// LinesPerMM, when set, is the grating's nominal ruling: the grating
	// model then takes d = 1/LinesPerMM (first order) as a measurement with
	// relative uncertainty LinesPerMMTolerance (0 means 3 %, a typical
	// tolerance of replica gratings, from memory). Polynomials ignore it.
	LinesPerMM, LinesPerMMTolerance float64
	// EstimateFloor, when the chosen fit's χ²/DOF is significantly above 1, finds the
	// position uncertainty f (px) that, added in quadrature to every
	// point's SigmaPX, brings χ²/DOF to 1, refits with it and reports it as
	// Dispersion.FloorPX: the centroid scatter the fit's own σ do not cover
	// (JPEG, resampling, line-shape mismatch), which then applies to other
	// photos of the same setup too.
	EstimateFloor bool
	// RefSigmaNM is the uncertainty given to each reference wavelength; 0
	// means 0.001 nm (lamp-type and hyperfine spread of Hg lines are below
	// this, REFERENCE-DATA.md section 1).
	RefSigmaNM float64
}

// FitDispersion fits every model the points support and returns the chosen
// one, with the others' summaries in Compared. It returns ErrTooFewLines
// for fewer than 2 points.
func FitDispersion(pts []Point, opt FitOptions) (Dispersion, error) {
	if len(pts) < 2 {
		return Dispersion{}, fmt.Errorf("%w: %d given, at least 2 needed", ErrTooFewLines, len(pts))
	}
	pts = append([]Point(nil), pts...)
	sort.Slice(pts, func(i, j int) bool { return pts[i].PX < pts[j].PX })
	models := []string{ModelPoly1, ModelPoly2, ModelPoly3, ModelGrating, ModelLens}
	if opt.Model != "" {
		models = []string{opt.Model}
	}
	var fits []Dispersion
	var firstErr error
	for _, m := range models {
		k := 3
		switch m {
		case ModelPoly1:
			k = 2
		case ModelPoly3:
			k = 4
		case ModelLens:
			k = 5 // four parameters and a degree of freedom to judge them
		}
		if len(pts) < k {
			continue
		}
		var from *Dispersion // the lens model starts from the grating fit just made
		if m == ModelLens && len(fits) > 0 && fits[len(fits)-1].Model == ModelGrating {
			from = &fits[len(fits)-1]
		}
		d, err := fitModel(pts, m, opt, from)
		if err != nil {
			if firstErr == nil {
				firstErr = err
			}
			continue
		}
		fits = append(fits, d)
	}
	if len(fits) == 0 {
		if firstErr != nil {
			return Dispersion{}, firstErr
		}
		return Dispersion{}, fmt.Errorf("%w: %d given for model %s", ErrTooFewLines, len(pts), opt.Model)
	}
	// Prefer the physical model on a near tie: it extrapolates by physics
	// rather than by polynomial.
	// With too few lines for AICc, fall back to plain AIC (χ² + 2k),
	// ranked after every model that has an AICc.
	score := func(f Dispersion) float64 {
		v := float64(f.AICc)
		if math.IsInf(v, 1) {
			v = 1e12 + f.ChiSq + 2*float64(len(f.Params))
		}
		if f.Model == ModelGrating || f.Model == ModelLens {
			v -= 2
		}
		return v
	}
	best := 0
	for i, f := range fits {
		if score(f) < score(fits[best]) {
			best = i
		}
	}
	out := fits[best]
	// Only a χ² beyond its ordinary range (DOF + 2·sqrt(2·DOF)) shows a
	// floor; widening every σ whenever χ² happens to exceed DOF would
	// overstate the errors in half of all calibrations.
	if opt.EstimateFloor && out.DOF >= 2 && out.ChiSq > float64(out.DOF)+2*math.Sqrt(2*float64(out.DOF)) {
		if f := floorFor(pts, out, opt); f > 0 {
			fl := make([]Point, len(pts))
			for i, p := range pts {
				fl[i] = p
				fl[i].SigmaPX = math.Hypot(p.SigmaPX, f)
			}
			o := opt
			o.Model, o.EstimateFloor = out.Model, false
			if d, err := fitModel(fl, out.Model, o, nil); err == nil {
				d.FloorPX = f
				out = d
			}
		}
	}
	for _, f := range fits {
		out.Compared = append(out.Compared, ModelFit{Model: f.Model, ChiSq: f.ChiSq, DOF: f.DOF, AICc: f.AICc, RMSNM: f.RMSNM})
	}
	return out, nil
}

// fitModel fits one model. Position errors are carried into wavelength
// errors through the local slope (effective variance), iterated twice.
// For the lens model, from is the grating fit to start from (nil: fit
// one first).
func fitModel(pts []Point, model string, opt FitOptions, from *Dispersion) (Dispersion, error) {
	n := len(pts)
	lo, hi := pts[0].PX, pts[n-1].PX
	d := Dispersion{Model: model, MinPX: lo, MaxPX: hi, Center: (lo + hi) / 2, Scale: math.Max((hi-lo)/2, 1)}
	y := make([]float64, n)
	for i, p := range pts {
		y[i] = p.target()
		if p.order() != 1 {
			d.Signed = true
		}
	}
	// A straight line through the points starts both the slopes and the
	// nonlinear fit.
	lin, err := polyFit(pts, 1, d.Center, d.Scale, nil)
	if err != nil {
		return Dispersion{}, err
	}
	slope := func(p float64) float64 { return lin[1] / d.Scale }
	var init []float64
	var starts [][]float64 // other starting points worth a try
	switch model {
	case ModelPoly1, ModelPoly2, ModelPoly3:
		init = make([]float64, map[string]int{ModelPoly1: 2, ModelPoly2: 3, ModelPoly3: 4}[model])
	case ModelGrating:
		if n < 3 {
			return Dispersion{}, fmt.Errorf("%w: the grating model needs 3 lines", ErrTooFewLines)
		}
		c := opt.OpticalCenterPX
		if c == 0 || math.IsNaN(c) {
			c = d.Center
		}
		d.Center = c
		d.Scale = math.Max(math.Max(math.Abs(hi-c), math.Abs(lo-c)), 1)
		q, err := polyFit(pts, 2, c, d.Scale, nil)
		if err != nil {
			return Dispersion{}, err
		}
		// (a + bt)(1 − ct²/2 + …) = a + bt − (ac/2)t² − (bc/2)t³ + …: c
		// from the quadratic term (one first order, a ≫ 0) or the cubic
		// one (both orders about the zero order, a ≈ 0), or a guess; the
		// start that fits best is kept.
		cc := 0.01
		if q[0] != 0 && -2*q[2]/q[0] > 0 {
			cc = -2 * q[2] / q[0]
		}
		init = []float64{q[0], q[1], cc}
		starts = [][]float64{init, {q[0], q[1], 0.1}, {q[0], q[1], 1}}
		if n >= 5 {
			if q3, err := polyFit(pts, 3, c, d.Scale, nil); err == nil && q3[1] != 0 && -2*q3[3]/q3[1] > 0 {
				starts = append(starts, []float64{q3[0], q3[1], -2 * q3[3] / q3[1]})
			}
		}
	case ModelLens:
		// From the plain grating fit, undistorted.
		if from == nil {
			o := opt
			o.Model, o.EstimateFloor = ModelGrating, false
			g, err := fitModel(pts, ModelGrating, o, nil)
			if err != nil {
				return Dispersion{}, err
			}
			from = &g
		}
		g := *from
		d.Center, d.Scale = g.Center, g.Scale
		init = append(append([]float64(nil), g.Params...), 0)
	default:
		return Dispersion{}, fmt.Errorf("calibrate: unknown dispersion model %q", model)
	}
	sig := make([]float64, n)
	var res lsq.Result
	for iter := 0; iter < 2; iter++ {
		for i, p := range pts {
			s := slope(p.PX) * p.SigmaPX
			rs := p.refSigma(opt)
			sig[i] = math.Sqrt(s*s + rs*rs)
		}
		dd := d
		yy, ss := y, sig
		prior := (model == ModelGrating || model == ModelLens) && opt.LinesPerMM > 0
		if prior {
			tol := opt.LinesPerMMTolerance
			if tol == 0 {
				tol = 0.03
			}
			dNom := 1e6 / opt.LinesPerMM
			yy = append(append([]float64(nil), y...), dNom)
			ss = append(append([]float64(nil), sig...), dNom*tol)
		}
		prob := lsq.Problem{Y: yy, Sigma: ss, Model: func(i int, params, grad []float64) float64 {
			if i == n {
				return gratingD(params, grad)
			}
			return dd.evalAt(pts[i].PX, pts[i].AcrossPX, params, grad)
		}}
		res, err = lsq.Fit(prob, init)
		if iter == 0 {
			for _, st := range starts[min(1, len(starts)):] {
				if r, e := lsq.Fit(prob, st); e == nil && (err != nil || r.ChiSq < res.ChiSq) {
					res, err = r, nil
				}
			}
		}
		if err != nil {
			return Dispersion{}, fmt.Errorf("calibrate: %s fit: %w", model, err)
		}
		init = res.Params
		d.Params = res.Params
		slope = d.Slope
	}
	k := len(d.Params)
	d.ChiSq, d.DOF = res.ChiSq, res.DOF
	d.Birge = 1
	if d.DOF > 0 {
		d.Birge = math.Sqrt(d.ChiSq / float64(d.DOF))
	}
	scale := math.Max(1, d.Birge*d.Birge)
	d.Cov = make([][]float64, k)
	for a := range d.Cov {
		d.Cov[a] = make([]float64, k)
		for b := range d.Cov[a] {
			d.Cov[a][b] = res.Cov.At(a, b) * scale
		}
	}
	aicc := d.ChiSq + 2*float64(k)
	if n-k-1 > 0 {
		aicc += 2 * float64(k*(k+1)) / float64(n-k-1)
	} else {
		aicc = math.Inf(1) // no degrees of freedom left to judge the model
	}
	d.AICc = Float(aicc)
	var ss float64
	for _, p := range pts {
		// In λ, not m·λ: the fitted wavelength of a line in order m is
		// F/m. The zero order's residual is −F, in nm of m·λ.
		da := d.Across(p.AcrossPX)
		f, ref, m := da.Wavelength(p.PX), p.target(), p.order()
		r := ref - f
		rp := r / da.Slope(p.PX)
		if m != 0 {
			f, ref, r = f/float64(m), ref/float64(m), r/float64(m)
		}
		ss += r * r
		res := Residual{Line: p.Line, RefNM: ref, PX: p.PX, FitNM: f, ResidNM: r, ResidPX: Float(rp)}
		if d.Signed {
			res.Order = m
		}
		if p.ZeroOrder {
			d.ZeroOrderPX = p.PX
		}
		d.Residuals = append(d.Residuals, res)
	}
	d.RMSNM = math.Sqrt(ss / float64(n))
	return d, nil
}

// polyFit is an unweighted (or weighted, when sig is not nil) linear
// least-squares polynomial fit in t = (p − center)/scale.
func polyFit(pts []Point, deg int, center, scale float64, sig []float64) ([]float64, error) {
	n, k := len(pts), deg+1
	a := mat.NewDense(n, k, nil)
	b := mat.NewVecDense(n, nil)
	for i, p := range pts {
		w := 1.0
		if sig != nil {
			w = 1 / sig[i]
		}
		t, tk := (p.PX-center)/scale, 1.0
		for j := 0; j < k; j++ {
			a.Set(i, j, w*tk)
			tk *= t
		}
		b.SetVec(i, w*p.target())
	}
	var x mat.VecDense
	if err := x.SolveVec(a, b); err != nil {
		return nil, fmt.Errorf("calibrate: polynomial fit: %w", err)
	}
	return x.RawVector().Data, nil
}

// Physical returns the grating model's D = d/m (nm), α (degrees) and F
// (px), and false for a polynomial model or an unphysical fit (c ≤ 0).
func (d Dispersion) Physical() (dNM, alphaDeg, focalPX float64, ok bool) {
	if !(d.Model == ModelGrating && len(d.Params) == 3 || d.Model == ModelLens && len(d.Params) == 4) || d.Params[2] <= 0 {
		return 0, 0, 0, false
	}
	a, b, c := d.Params[0], d.Params[1], d.Params[2]
	f := d.Scale / math.Sqrt(c)
	dc := math.Abs(b) * f / d.Scale // D cos α; the sign of b is the direction of dispersion
	return math.Hypot(a, dc), math.Atan2(a, dc) * 180 / math.Pi, f, true
}

// gratingD returns D = d/m = sqrt(a² + b²/c) of grating-model parameters
// [a, b, c] and its gradient; NaN when c ≤ 0 (no physical grating).
func gratingD(p, grad []float64) float64 {
	a, b, c := p[0], p[1], p[2]
	if c <= 0 {
		return math.NaN()
	}
	D := math.Sqrt(a*a + b*b/c)
	if grad != nil {
		grad[0] = a / D
		grad[1] = b / (c * D)
		grad[2] = -b * b / (2 * c * c * D)
	}
	return D
}

// floorFor returns f ≥ 0 such that χ² of d's residuals with every σ_px
// widened to sqrt(σ_px² + f²) equals DOF (bisection; parameters held).
func floorFor(pts []Point, d Dispersion, opt FitOptions) float64 {
	chi2 := func(f float64) float64 {
		var s float64
		for _, p := range pts {
			da := d.Across(p.AcrossPX)
			sl := da.Slope(p.PX)
			rs := p.refSigma(opt)
			v := sl*sl*(p.SigmaPX*p.SigmaPX+f*f) + rs*rs
			r := p.target() - da.Wavelength(p.PX)
			s += r * r / v
		}
		return s
	}
	target := float64(d.DOF)
	lo, hi := 0.0, 10.0
	if chi2(hi) > target {
		return hi
	}
	for i := 0; i < 50; i++ {
		mid := (lo + hi) / 2
		if chi2(mid) > target {
			lo = mid
		} else {
			hi = mid
		}
	}
	return hi
}
