package calibrate

import (
	"math"
	"math/rand/v2"
	"testing"
)

// The built-in tables must hold the published values. Sources: NIST
// Handbook Hg I (Burns, Adams & Longwell 1950) and NIST ASD v5.5.6 H I / He I,
// as copied in ../shared/REFERENCE-DATA.md sections 1-3.
func TestReferenceTablesHoldPublishedValues(t *testing.T) {
	want := []struct {
		lamp string
		nm   float64
	}{
		{"mercury", 404.6563}, {"mercury", 435.8328}, {"mercury", 546.0735},
		{"mercury", 576.9598}, {"mercury", 579.0663},
		{"hydrogen", 656.2795}, {"hydrogen", 486.1325}, {"hydrogen", 434.0463}, {"hydrogen", 410.1735},
		{"helium", 587.5621}, {"helium", 447.14802}, {"helium", 667.8151},
		{"sodium", 588.995095}, {"neon", 640.2248},
	}
	for _, w := range want {
		l, err := LampByName(w.lamp)
		if err != nil {
			t.Fatal(err)
		}
		if _, d := l.Nearest(w.nm); d > 1e-9 {
			t.Errorf("%s: no line at %.4f nm (nearest %.4f off)", w.lamp, w.nm, d)
		}
	}
	for _, l := range Lamps() {
		for _, ln := range l.Lines {
			if ln.Source == "" {
				t.Errorf("%s %s has no source", l.Name, ln.Name)
			}
		}
	}
}

// Worked air/vacuum examples. Sources: IDL Astronomy Library AIRTOVAC docs
// (air 6056.125 Å → vac 6057.8019 Å) and the astrolibR airtovac example
// (air 4861.363 Å → vac 4862.721 Å); NIST ASD Na D2 588.995095 air /
// 589.1583264 vac; VALD3 wiki for the formulas themselves.
func TestAirVacuumWorkedExamples(t *testing.T) {
	cases := []struct {
		name      string
		air, vac  float64
		tol       float64
		direction string
	}{
		{"Kr 605.6 (IDL AIRTOVAC)", 605.6125, 605.78019, 2e-5, "a2v"},
		{"Hβ example (astrolibR)", 486.1363, 486.2721, 1e-4, "a2v"},
		{"Na D2 (NIST ASD)", 588.995095, 589.1583264, 2e-5, "both"},
	}
	for _, c := range cases {
		if got := AirToVacuum(c.air); math.Abs(got-c.vac) > c.tol {
			t.Errorf("%s: AirToVacuum(%.6f) = %.6f, want %.6f", c.name, c.air, got, c.vac)
		}
		if c.direction == "both" {
			if got := VacuumToAir(c.vac); math.Abs(got-c.air) > c.tol {
				t.Errorf("%s: VacuumToAir(%.7f) = %.6f, want %.6f", c.name, c.vac, got, c.air)
			}
		}
	}
	for nm := 300.0; nm <= 1000; nm += 7 {
		if d := math.Abs(VacuumToAir(AirToVacuum(nm)) - nm); d > 1e-8 {
			t.Fatalf("round trip at %g nm off by %g", nm, d)
		}
	}
	if got := AirToVacuum(150); got != 150 {
		t.Errorf("below 200 nm the wavelength is vacuum already; got %g", got)
	}
}

// R_H from CODATA 2018 R∞ and m_e/m_p; 10 967 758.340 m⁻¹ and h c R_H =
// 13.598 287 eV are computed in REFERENCE-DATA.md section 7.
func TestCODATA(t *testing.T) {
	if d := math.Abs(RHydrogen() - 10967758.340280); d > 1e-3 {
		t.Errorf("R_H = %.6f", RHydrogen())
	}
	if d := math.Abs(EnergyEV(RInfinity) - 13.605693122994); d > 1e-9 {
		t.Errorf("h c R∞ = %.12f eV, CODATA 2018 13.605693122994", EnergyEV(RInfinity))
	}
	if d := math.Abs(EnergyEV(RHydrogen()) - 13.598287); d > 1e-6 {
		t.Errorf("h c R_H = %.6f eV", EnergyEV(RHydrogen()))
	}
}

// Fitting the NIST Balmer centres of gravity must give R_H to within the
// 1.1-1.3e-5 relative offset that fine structure puts between them and the
// Bohr formula (REFERENCE-DATA.md section 2).
func TestRydbergFromNISTBalmer(t *testing.T) {
	var in []Balmer
	for _, l := range Hydrogen().Lines {
		if l.N <= 6 {
			in = append(in, Balmer{N: l.N, AirNM: l.NM, SigmaNM: 0.001})
		}
	}
	r, err := FitRydberg(in, nil)
	if err != nil {
		t.Fatal(err)
	}
	rel := r.R/RHydrogen() - 1
	if rel < 0.5e-5 || rel > 2e-5 {
		t.Errorf("R = %.1f m⁻¹, relative offset from R_H %.2e, want 0.5e-5..2e-5", r.R, rel)
	}
	if math.Abs(r.Intercept) > 5*r.InterceptSigma+50 {
		t.Errorf("free intercept %.1f ± %.1f m⁻¹ should be near zero", r.Intercept, r.InterceptSigma)
	}
	// Sigma follows from σ_λ: one line σ 0.001 nm at 656 nm → σ_y = y σ/λ.
	if r.Sigma <= 0 || r.Sigma > 100 {
		t.Errorf("σ_R = %g m⁻¹", r.Sigma)
	}
}

// The grating worked check of REFERENCE-DATA.md section 9 (computed there
// from d sin θ = mλ): 600 lines/mm, m = 1, 546.0735 nm → 19.126°.
func TestGratingEquation(t *testing.T) {
	cases := []struct{ nm, deg float64 }{{546.0735, 19.126}, {656.2795, 23.189}, {486.1325, 16.959}}
	for _, c := range cases {
		got, ok := GratingAngle(600, c.nm, 1)
		if !ok || math.Abs(got-c.deg) > 0.0006 {
			t.Errorf("angle of %.4f nm = %.4f°, want %.3f°", c.nm, got, c.deg)
		}
		if back := GratingWavelength(600, got, 1); math.Abs(back-c.nm) > 1e-9 {
			t.Errorf("round trip %.6f", back)
		}
	}
	if _, ok := GratingAngle(600, 2000, 1); ok {
		t.Error("2000 nm cannot diffract at 600 lines/mm")
	}
}

// A textbook worked solution (Halliday, Resnick & Walker, Fundamentals of
// Physics, chapter 36 problem 54, as its published solution page shows
// it): a grating of 160 lines/mm sends 460 nm to 8.46° in the second order,
// 640 nm to 11.81° in the second, 460 nm to 12.75° and 640 nm to 17.89° in
// the third, and 460 nm to 17.12° in the fourth (where orders overlap).
// Higher orders and their overlap are what the second-order search uses.
func TestGratingTextbookExample(t *testing.T) {
	cases := []struct {
		nm  float64
		m   int
		deg float64
	}{{460, 2, 8.46}, {640, 2, 11.81}, {460, 3, 12.75}, {640, 3, 17.89}, {460, 4, 17.12}}
	for _, c := range cases {
		got, ok := GratingAngle(160, c.nm, c.m)
		// The solution quotes two decimals, cut rather than rounded
		// (11.818° is given as 11.81°): agree within 0.01°.
		if !ok || math.Abs(got-c.deg) >= 0.01 {
			t.Errorf("%g nm, order %d: %.3f°, the worked solution gives %.2f°", c.nm, c.m, got, c.deg)
		}
	}
}

// camera is the pinhole-camera-and-grating geometry used to make synthetic
// line positions with a known truth.
type camera struct {
	linesPerMM, focal, thetaC, center float64
	flip                              bool
}

func (c camera) px(nm float64) float64 {
	th, _ := GratingAngle(c.linesPerMM, nm, 1)
	x := c.focal * math.Tan((th-c.thetaC)*math.Pi/180)
	if c.flip {
		x = -x
	}
	return c.center + x
}

func TestGratingModelExtrapolatesToHAlpha(t *testing.T) {
	cam := camera{linesPerMM: 600, focal: 4000, thetaC: 19, center: 960}
	rng := rand.New(rand.NewPCG(3, 4))
	var pts []Point
	for _, l := range Mercury().Lines {
		pts = append(pts, Point{PX: cam.px(l.NM) + 0.05*rng.NormFloat64(), SigmaPX: 0.05, NM: l.NM, Line: l.Name})
	}
	d, err := FitDispersion(pts, FitOptions{OpticalCenterPX: cam.center})
	if err != nil {
		t.Fatal(err)
	}
	if d.Model != ModelGrating {
		t.Errorf("chose %s, want grating (compared: %+v)", d.Model, d.Compared)
	}
	D, alpha, F, ok := d.Physical()
	if !ok || math.Abs(D/(1e6/600)-1) > 0.01 || math.Abs(alpha-19) > 0.2 || math.Abs(F/4000-1) > 0.02 {
		t.Errorf("physical D %.2f nm α %.3f° F %.1f px, want 1666.67, 19, 4000", D, alpha, F)
	}
	p := cam.px(656.2795)
	got, sig := d.Wavelength(p), d.Sigma(p, 0.05)
	if math.Abs(got-656.2795) > 0.1 || math.Abs(got-656.2795) > 4*sig {
		t.Errorf("Hα extrapolated to %.4f ± %.4f nm, truth 656.2795", got, sig)
	}
	if in, out := d.Sigma(cam.px(500), 0), d.Sigma(p, 0); out <= in {
		t.Errorf("calibration σ should grow outside the calibrated range: %.5f inside, %.5f at Hα", in, out)
	}
}

func TestPolynomialFitRecoversKnownCurve(t *testing.T) {
	var pts []Point
	for i := 0; i < 8; i++ {
		p := 100 + 200*float64(i)
		pts = append(pts, Point{PX: p, SigmaPX: 0.01, NM: 400 + 0.2*p - 1e-5*p*p})
	}
	d, err := FitDispersion(pts, FitOptions{Model: ModelPoly2})
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range []float64{0, 777, 1600} {
		if w := 400 + 0.2*p - 1e-5*p*p; math.Abs(d.Wavelength(p)-w) > 1e-6 {
			t.Errorf("λ(%g) = %.7f, want %.7f", p, d.Wavelength(p), w)
		}
	}
	if _, err := FitDispersion(pts[:1], FitOptions{}); err == nil {
		t.Error("one point must not calibrate")
	}
}

func peaksFor(cam camera, lamp Lamp, drop map[int]bool, extra []float64) ([]Peak, map[int]float64) {
	var ps []Peak
	truth := map[int]float64{}
	for i, l := range lamp.Lines {
		if drop[i] {
			continue
		}
		truth[len(ps)] = l.NM
		ps = append(ps, Peak{PX: cam.px(l.NM), SigmaPX: 0.1, Height: 100 * l.Strength})
	}
	for _, x := range extra {
		ps = append(ps, Peak{PX: x, SigmaPX: 0.3, Height: 8})
	}
	return ps, truth
}

func TestIdentifyMercuryUnaided(t *testing.T) {
	cases := []struct {
		name  string
		cam   camera
		drop  map[int]bool
		extra []float64
	}{
		{"600/mm, all lines", camera{600, 4000, 19, 960, false}, nil, nil},
		{"flipped, weak lines missing", camera{600, 4000, 19, 960, true}, map[int]bool{1: true, 3: true}, nil},
		{"300/mm webcam, extra peaks", camera{300, 1500, 9.5, 640, false}, nil, []float64{100, 1200, 333}},
		{"1000/mm phone", camera{1000, 3000, 33, 2016, false}, map[int]bool{3: true}, []float64{500}},
	}
	for _, c := range cases {
		peaks, truth := peaksFor(c.cam, Mercury(), c.drop, c.extra)
		id, err := Identify(peaks, Mercury(), IdentifyOptions{})
		if err != nil {
			t.Errorf("%s: %v", c.name, err)
			continue
		}
		if len(id.Matches) != len(truth) {
			t.Errorf("%s: %d matches, want %d", c.name, len(id.Matches), len(truth))
		}
		for _, m := range id.Matches {
			if want, ok := truth[m.Peak]; !ok || want != m.Line.NM {
				t.Errorf("%s: peak %d (%.1f px) taken for %.4f nm, truth %v", c.name, m.Peak, peaks[m.Peak].PX, m.Line.NM, want)
			}
		}
	}
}

func TestClassifyLamps(t *testing.T) {
	cam := camera{600, 4000, 19, 960, false}
	for _, lamp := range []Lamp{Mercury(), Hydrogen(), Helium()} {
		peaks, _ := peaksFor(cam, lamp, nil, nil)
		// Keep what a 1920 px frame holds.
		var in []Peak
		for _, p := range peaks {
			if p.PX >= 0 && p.PX < 1920 {
				in = append(in, p)
			}
		}
		ids := Classify(in, []Lamp{Mercury(), Helium(), Hydrogen()}, IdentifyOptions{})
		if len(ids) == 0 || ids[0].Lamp != lamp.Name {
			t.Errorf("%s photo classified as %+v", lamp.Name, ids)
		}
	}
}

// A user's pin is honoured: a right pin keeps the right answer, and a pin
// that contradicts every pattern leaves no identification.
func TestIdentifyHonoursPins(t *testing.T) {
	cam := camera{600, 4000, 19, 960, false}
	peaks, truth := peaksFor(cam, Mercury(), nil, nil)
	green := cam.px(546.0735)
	id, err := Identify(peaks, Mercury(), IdentifyOptions{Pins: []Pin{{NM: 546.0735, PX: green + 0.4}}})
	if err != nil || len(id.Matches) != len(truth) {
		t.Fatalf("right pin: %v, %d matches", err, len(id.Matches))
	}
	for _, m := range id.Matches {
		if truth[m.Peak] != m.Line.NM {
			t.Errorf("right pin: peak %d taken for %.4f", m.Peak, m.Line.NM)
		}
	}
	id, err = Identify(peaks, Mercury(), IdentifyOptions{Pins: []Pin{{NM: 404.6563, PX: green}}})
	if err == nil {
		for _, m := range id.Matches {
			if math.Abs(peaks[m.Peak].PX-green) < 1 && m.Line.NM != 404.6563 {
				t.Errorf("the pin 404.66@green was ignored: %+v", id.Matches)
			}
		}
	}
}
