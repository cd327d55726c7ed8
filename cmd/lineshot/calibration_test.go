package main

import (
	"fmt"
	"image/jpeg"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"lineshot/calibrate"
	"lineshot/imaging/synth"
)

// setup is one simulated bench: grating and camera.
type setup struct {
	name  string
	lpm   float64
	w, h  int
	psf   float64
	tilt  float64
	jpegQ int
	lineH float64 // line image length, px; 0: the simulator default
}

var setups = []setup{
	{name: "webcam 300/mm", lpm: 300, w: 1280, h: 720, psf: 1.4, tilt: 2, jpegQ: 85},
	{name: "webcam 600/mm", lpm: 600, w: 1280, h: 720, psf: 1.4, tilt: -3, jpegQ: 85},
	{name: "phone 600/mm", lpm: 600, w: 1920, h: 1080, psf: 1.2, tilt: 1, jpegQ: 90},
	{name: "phone 1000/mm", lpm: 1000, w: 1920, h: 1080, psf: 1.2, tilt: -1.5, jpegQ: 90},
}

// render writes a JPEG of lamp through setup s and returns its path and truth.
func (s setup) render(t testing.TB, dir, lamp string, seed uint64) (string, synth.Truth) {
	t.Helper()
	l, err := calibrate.LampByName(lamp)
	if err != nil {
		t.Fatal(err)
	}
	img, tr, err := synth.Render(synth.Params{Width: s.w, Height: s.h, LinesPerMM: s.lpm, PSFSigmaPX: s.psf,
		TiltDeg: s.tilt, Seed: seed, Emissions: emissions(l), LineHeightPX: s.lineH})
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(dir, strings.ReplaceAll(s.name, "/", "_")+"-"+lamp+".jpg")
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	if err := jpeg.Encode(f, img, &jpeg.Options{Quality: s.jpegQ}); err != nil {
		t.Fatal(err)
	}
	f.Close()
	return path, tr
}

var defaultCfg = measureConfig{minSNR: 5, tolNM: 1}

// Every lamp on every bench, no hints: the lamp is classified right and
// every line found at SNR ≥ 20 is identified as the truth line it is.
// Sodium is left out: its D pair is one blended line at these dispersions,
// too few to identify by pattern (TestSodiumUnaided recognises it by its
// colour, TestSodiumWithACalibration measures it).
func TestIdentifyEveryLampOnEveryBench(t *testing.T) {
	dir := t.TempDir()
	for _, s := range setups {
		for i, lamp := range []string{"mercury", "helium", "neon", "hydrogen", "cfl"} {
			path, tr := s.render(t, dir, lamp, uint64(500+i))
			r := measureOne(path, nil, defaultCfg)
			if r.Error != "" {
				t.Errorf("%s, %s: %s", s.name, lamp, r.Error)
				continue
			}
			if r.Lamp != lamp {
				t.Errorf("%s, %s photo classified as %s (confidence %.2f)", s.name, lamp, r.Lamp, r.LampScore)
				continue
			}
			wrong, checked := 0, 0
			for _, m := range r.Lines {
				if m.SNR < 20 {
					continue
				}
				tl, d := nearestTruth(tr, m.X, m.Y)
				if d > 1 {
					continue // a line the truth does not hold (blend of a band)
				}
				checked++
				if math.Abs(m.RefNM-tl.NM) > 1e-6 {
					wrong++
					t.Errorf("%s, %s: line at %.4f nm (SNR %.0f) identified as %q", s.name, lamp, tl.NM, m.SNR, m.ID)
				}
			}
			if checked < 3 {
				t.Errorf("%s, %s: only %d lines at SNR ≥ 20 to check", s.name, lamp, checked)
			}
		}
	}
}

func nearestTruth(tr synth.Truth, x, y float64) (synth.TruthLine, float64) {
	best, bd := synth.TruthLine{}, math.Inf(1)
	for _, l := range tr.Lines {
		if d := math.Hypot(l.X-x, l.Y-y); d < bd {
			best, bd = l, d
		}
	}
	return best, bd
}

// Mercury-calibrated Balmer wavelengths on phone and webcam benches from
// 300 to 1000 lines/mm: within 0.1 nm of NIST (Hα included, 77 nm beyond
// the last mercury line), R within 0.05 % of CODATA 2018 R_H.
func TestBalmerAccuracyAcrossBenches(t *testing.T) {
	dir := t.TempDir()
	for k, s := range setups {
		hg, _ := s.render(t, dir, "mercury", uint64(700+k))
		h, _ := s.render(t, dir, "hydrogen", uint64(800+k))
		cal, _, err := buildCalibration([]string{hg}, defaultCfg)
		if err != nil {
			t.Fatalf("%s: %v", s.name, err)
		}
		r := measureOne(h, &cal, defaultCfg)
		if r.Rydberg == nil {
			t.Fatalf("%s: no Rydberg fit: %s %v", s.name, r.Error, r.Warnings)
		}
		worst := worstBalmer(t, r, 0.1, s.name)
		rel := r.Rydberg.R/calibrate.RHydrogen() - 1
		if math.Abs(rel) > 0.0005 {
			t.Errorf("%s: R %.0f ± %.0f, %.4f %% from R_H", s.name, r.Rydberg.R, r.Rydberg.Sigma, 100*rel)
		}
		t.Logf("%s: %.3f nm/px, model %s, worst Balmer error %.4f nm, R %+.5f %% from R_H (%+.2fσ from the NIST-line value)",
			s.name, math.Abs(cal.Dispersion.Slope((cal.Dispersion.MinPX+cal.Dispersion.MaxPX)/2)), cal.Dispersion.Model, worst, 100*rel, r.Rydberg.DevRefSigma)
	}
}

// Two calibration lamps of one setup combine into one fit that covers
// more of the spectrum than either.
func TestCalibrationCombinesLamps(t *testing.T) {
	dir := t.TempDir()
	s := setups[2]
	hg, _ := s.render(t, dir, "mercury", 901)
	he, _ := s.render(t, dir, "helium", 902)
	h, _ := s.render(t, dir, "hydrogen", 903)
	cal, res, err := buildCalibration([]string{hg, he}, defaultCfg)
	if err != nil {
		t.Fatal(err)
	}
	if cal.Lamp != "mercury+helium" || len(res) != 2 {
		t.Fatalf("lamp %q, %d results", cal.Lamp, len(res))
	}
	lo, hi := cal.Dispersion.Wavelength(cal.Dispersion.MinPX), cal.Dispersion.Wavelength(cal.Dispersion.MaxPX)
	if lo > 390 || hi < 700 || len(cal.Dispersion.Residuals) < 12 {
		t.Errorf("combined calibration spans %.1f-%.1f nm with %d lines", lo, hi, len(cal.Dispersion.Residuals))
	}
	r := measureOne(h, &cal, defaultCfg)
	for _, l := range r.Lines {
		if l.N == 3 && math.Abs(l.WavelengthNM-l.RefNM) > 0.05 {
			t.Errorf("Hα inside a helium-extended calibration: %.4f ± %.4f nm", l.WavelengthNM, l.WavelengthErrNM)
		}
	}
	for _, w := range r.Warnings {
		if strings.Contains(w, "moved") || strings.Contains(w, "smooth dispersion") {
			t.Errorf("unexpected warning: %s", w)
		}
	}
}

// A user's line list (CSV) is a lamp like the built-in ones.
func TestUserLineList(t *testing.T) {
	dir := t.TempDir()
	csv := "# Hg lines, copied from the NIST Handbook table\nname,nm,strength,source\nviolet,404.6563,0.5,BAL50\nblue,435.8328,1,BAL50\ngreen,546.0735,1,BAL50\nyellow 1,576.9598,0.3,BAL50\nyellow 2,579.0663,0.3,BAL50\n"
	p := filepath.Join(dir, "myhg.csv")
	os.WriteFile(p, []byte(csv), 0o644)
	l, err := readLampFile(p)
	if err != nil {
		t.Fatal(err)
	}
	if l.Name != "myhg" || len(l.Lines) != 5 || l.Lines[2].Name != "green" {
		t.Fatalf("%+v", l)
	}
	hg, _ := setups[2].render(t, dir, "mercury", 904)
	cfg := defaultCfg
	cfg.extra = []calibrate.Lamp{l}
	cfg.lamp = "myhg"
	r := measureOne(hg, nil, cfg)
	if r.Lamp != "myhg" || r.Error != "" {
		t.Fatalf("lamp %q, error %q", r.Lamp, r.Error)
	}
	for _, bad := range []string{"nm\n", "name,wl\nx,500\n", "nm\n500\nabc\n", "nm,strength\n500,-1\n600,1\n"} {
		if _, err := calibrate.ReadLines(strings.NewReader(bad), "x"); err == nil {
			t.Errorf("%q accepted", bad)
		}
	}
}

func FuzzCalibrationJSON(f *testing.F) {
	dir := f.TempDir()
	s := setups[1]
	hg, _ := s.render(f, dir, "mercury", 990)
	cal, _, err := buildCalibration([]string{hg}, defaultCfg)
	if err != nil {
		f.Fatal(err)
	}
	good := filepath.Join(dir, "good.json")
	if err := writeJSONAtomic(good, cal); err != nil {
		f.Fatal(err)
	}
	raw, _ := os.ReadFile(good)
	f.Add(raw)
	f.Add([]byte(`{"lineshot_calibration":1}`))
	f.Fuzz(func(t *testing.T, b []byte) {
		p := filepath.Join(t.TempDir(), "c.json")
		os.WriteFile(p, b, 0o644)
		c, err := readCalibration(p)
		if err != nil {
			if !strings.Contains(err.Error(), p) {
				t.Fatalf("error does not name the file: %v", err)
			}
			return
		}
		// Accepted: it must be usable everywhere in its range.
		d := c.Dispersion
		for _, x := range []float64{d.MinPX, d.MaxPX} {
			if w := d.Wavelength(x); math.IsNaN(w) {
				t.Fatalf("accepted calibration gives NaN at %g", x)
			}
			d.Sigma(x, 0.1)
		}
	})
}

func FuzzLineList(f *testing.F) {
	f.Add("name,nm,strength\nviolet,404.6563,0.5\ngreen,546.0735,1\n")
	f.Add("nm\n500\n600\n")
	f.Fuzz(func(t *testing.T, s string) {
		l, err := calibrate.ReadLines(strings.NewReader(s), "x")
		if err != nil {
			return
		}
		for _, ln := range l.Lines {
			if !(ln.NM >= 100 && ln.NM <= 3000) || math.IsNaN(ln.Strength) || ln.Strength < 0 {
				t.Fatalf("accepted %+v", ln)
			}
		}
	})
}

// A sodium lamp shows one bright line (the D pair, 0.6 nm apart, NIST ASD
// 588.995095 and 589.592424 nm air, REFERENCE-DATA.md section 5): too few
// for a pattern, and no band of its own (the line image's length was once
// taken for the band). With a mercury calibration of the same setup it is
// measured along the calibration's band and classified as sodium on every
// bench, its line between D2 − 0.3 nm and D1 + 0.3 nm.
func TestSodiumWithACalibration(t *testing.T) {
	dir := t.TempDir()
	for k, s := range setups {
		hg, _ := s.render(t, dir, "mercury", uint64(900+k))
		na, _ := s.render(t, dir, "sodium", uint64(950+k))
		cal, _, err := buildCalibration([]string{hg}, defaultCfg)
		if err != nil {
			t.Fatalf("%s: %v", s.name, err)
		}
		r := measureOne(na, &cal, defaultCfg)
		if r.Lamp != "sodium" {
			t.Errorf("%s: classified as %q (confidence %.2f)", s.name, r.Lamp, r.LampScore)
		}
		if math.Abs(r.Quality.AngleDeg-cal.AngleDeg) > 1 {
			t.Errorf("%s: band at %.2f°, calibration's at %.2f°", s.name, r.Quality.AngleDeg, cal.AngleDeg)
		}
		ok := false
		for _, l := range r.Lines {
			if strings.HasPrefix(l.ID, "Na D") && l.WavelengthNM > 588.995095-0.3 && l.WavelengthNM < 589.592424+0.3 {
				ok = true
			}
		}
		if !ok {
			t.Errorf("%s: no Na D line measured: %+v", s.name, r.Lines)
		}
	}
}

// Sodium with no calibration and no hint: one yellow line (its D pair),
// recognised by its colour on every bench, its place in the photo given
// within 3 px of the simulator's truth; the other lamps are not taken for
// it (TestIdentifyEveryLampOnEveryBench).
func TestSodiumUnaided(t *testing.T) {
	dir := t.TempDir()
	for k, s := range setups {
		na, tr := s.render(t, dir, "sodium", uint64(980+k))
		r := measureOne(na, nil, defaultCfg)
		if r.Error != "" || r.Lamp != "sodium" {
			t.Errorf("%s: lamp %q, error %q", s.name, r.Lamp, r.Error)
			continue
		}
		var x, y float64
		for _, l := range tr.Lines {
			x, y = x+l.X/2, y+l.Y/2 // the two D lines, a fraction of a pixel to 3 px apart
		}
		found := false
		for _, w := range r.Warnings {
			var wx, wy float64
			if n, _ := fmt.Sscanf(w[strings.Index(w, "(")+1:], "%f, %f", &wx, &wy); n == 2 && math.Hypot(wx-x, wy-y) < 3 {
				found = true
			}
		}
		if !found {
			t.Errorf("%s: the line's place (truth %.1f, %.1f) not given: %v", s.name, x, y, r.Warnings)
		}
	}
}

// worstBalmer checks every Balmer line of r (n ≥ 3) against its NIST
// wavelength (REFERENCE-DATA.md section 2), reporting those more than tol
// nm off under label, and returns the largest difference.
func worstBalmer(t *testing.T, r imageResult, tol float64, label string) float64 {
	t.Helper()
	worst := 0.0
	for _, l := range r.Lines {
		if l.N >= 3 {
			d := math.Abs(l.WavelengthNM - l.RefNM)
			worst = math.Max(worst, d)
			if d > tol {
				t.Errorf("%s: %s at %.4f ± %.4f nm, NIST %.4f", label, l.ID, l.WavelengthNM, l.WavelengthErrNM, l.RefNM)
			}
		}
	}
	return worst
}

// A line where the calibration's grating model has no wavelength (a fit
// with c < 0 extrapolated until 1 + c·t² < 0: sin θ beyond 1) gets none,
// and a warning; a NaN there made the JSON encoder refuse the whole
// document (a batch lost its results.json), seen on a simulated photo of
// JPEG quality 60 whose lamp was taken for another.
func TestLineBeyondTheGratingsReach(t *testing.T) {
	cov := [][]float64{{1e-4, 0, 0}, {0, 1e-4, 0}, {0, 0, 1e-8}}
	cal := calibration{Dispersion: calibrate.Dispersion{Model: calibrate.ModelGrating, Params: []float64{500, 100, -0.5}, Cov: cov,
		Center: 500, Scale: 500, MinPX: 300, MaxPX: 700, Birge: 1}}
	r := imageResult{File: "x.jpg", Lines: []lineResult{{X: 400, Height: 1}, {X: 1500, Height: 1}}}
	applyCalibration(&r, cal, calibrate.Mercury(), defaultCfg, nil)
	if got := r.Lines[0].WavelengthNM; math.Abs(got-(500-20)/math.Sqrt(1-0.5*0.04)) > 0.01 {
		t.Errorf("line in range at %.4f nm", got)
	}
	if l := r.Lines[1]; l.WavelengthNM != 0 || l.WavelengthErrNM != 0 || l.ID != "" {
		t.Errorf("line beyond reach: %.4g ± %.4g nm, %q", l.WavelengthNM, l.WavelengthErrNM, l.ID)
	}
	warned := false
	for _, w := range r.Warnings {
		warned = warned || strings.Contains(w, "gives no wavelength")
	}
	if !warned {
		t.Errorf("no warning: %q", r.Warnings)
	}
	if err := encodeJSON(io.Discard, r); err != nil {
		t.Errorf("JSON: %v", err)
	}
}
