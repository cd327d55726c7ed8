package main

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// Two photos of different setups named to calibrate one bench (a webcam's
// 300/mm mercury photo and a small 1000/mm hydrogen one taken for mercury:
// random setups of scripts/sweep.py, seed 31) make one calibration that
// fits neither. Its residual in pixels at a line where the fit has no
// slope was NaN, which Go's JSON encoder refuses: results.json was lost
// with every other bench's results. The batch must write its outputs and
// say the calibration does not hold together.
func TestMixedSetupsKeepTheResults(t *testing.T) {
	dir := t.TempDir()
	bench := filepath.Join(dir, "photos", "b1")
	if err := os.MkdirAll(bench, 0o755); err != nil {
		t.Fatal(err)
	}
	simulate(t, bench, "x.jpg", "--lamp", "mercury", "--size", "1920x1080", "--lines-per-mm", "300",
		"--tilt", "5.28", "--psf", "1.02", "--peak", "1.268", "--background", "0.0611", "--quality", "75", "--seed", "694333")
	simulate(t, bench, "h.jpg", "--lamp", "hydrogen", "--size", "640x480", "--lines-per-mm", "1000",
		"--tilt", "3.13", "--psf", "1.68", "--peak", "0.182", "--background", "0.0713", "--quality", "95", "--seed", "635142")
	for _, f := range []string{"x.truth.json", "h.truth.json"} {
		os.Remove(filepath.Join(bench, f))
	}
	// Named in the settings: unnamed, the hydrogen photo's three lines
	// are too few to calibrate beside a photo with more
	// (TestUncheckedPhotoStaysOutOfTheCalibration).
	if err := os.WriteFile(filepath.Join(bench, settingsFile), []byte("calibration: x.jpg h.jpg\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(dir, "out")
	_, stderr, _ := runCLI(t, "batch", "--quiet", "--out", out, filepath.Join(dir, "photos"))
	raw, err := os.ReadFile(filepath.Join(out, "results.json"))
	if err != nil {
		t.Fatalf("no results.json (%v); stderr: %s", err, stderr)
	}
	var doc batchDoc
	if err := json.Unmarshal(raw, &doc); err != nil {
		t.Fatalf("results.json: %v", err)
	}
	if len(doc.Benches) != 1 || doc.Benches[0].Calibration == nil {
		t.Fatalf("want one bench with its calibration; stderr: %s", stderr)
	}
	b := doc.Benches[0]
	said := false
	for _, r := range b.CalPhotos {
		for _, w := range r.Warnings {
			said = said || strings.Contains(w, "do not follow one smooth dispersion")
		}
	}
	if !said {
		t.Errorf("the calibration from two setups (χ²/dof %.0f) is not said to fall apart", b.Calibration.Dispersion.Birge*b.Calibration.Dispersion.Birge)
	}
	for _, f := range []string{"results.csv", "report.html"} {
		if st, err := os.Stat(filepath.Join(out, f)); err != nil || st.Size() == 0 {
			t.Errorf("%s not written: %v", f, err)
		}
	}
}

// A bench of one setup: a mercury photo, a bright hydrogen photo and a dim
// one whose three Balmer lines in view fit mercury's onto a three-parameter
// dispersion. Taken for mercury, the dim photo had joined the calibration
// (χ²/dof 10), and the bright hydrogen photo was then read as mercury
// lines: no Rydberg constant. The dim photo's unchecked reading now stays
// out of the calibration; measured with it, its lines are Balmer lines
// (NIST ASD, ../shared/REFERENCE-DATA.md) and R comes out.
func TestUncheckedPhotoStaysOutOfTheCalibration(t *testing.T) {
	dir := t.TempDir()
	bench := filepath.Join(dir, "photos", "b1")
	if err := os.MkdirAll(bench, 0o755); err != nil {
		t.Fatal(err)
	}
	same := []string{"--size", "640x480", "--lines-per-mm", "1000", "--tilt", "3.13", "--psf", "1.68", "--background", "0.0713", "--quality", "95"}
	for _, p := range []struct{ name, lamp, peak, seed string }{
		{"h1.jpg", "hydrogen", "0.182", "635142"}, {"hg.jpg", "mercury", "0.8", "11"}, {"h2.jpg", "hydrogen", "0.8", "12"},
	} {
		simulate(t, bench, p.name, append([]string{"--lamp", p.lamp, "--peak", p.peak, "--seed", p.seed}, same...)...)
		os.Remove(filepath.Join(bench, strings.TrimSuffix(p.name, ".jpg")+".truth.json"))
	}
	out := filepath.Join(dir, "out")
	_, stderr, code := runCLI(t, "batch", "--quiet", "--out", out, filepath.Join(dir, "photos"))
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	b := readBatch(t, out).Benches[0]
	if len(b.CalPhotos) != 1 || filepath.Base(b.CalPhotos[0].File) != "hg.jpg" {
		var names []string
		for _, r := range b.CalPhotos {
			names = append(names, filepath.Base(r.File)+" as "+r.Lamp)
		}
		t.Fatalf("calibrated from %v, want hg.jpg alone", names)
	}
	for _, r := range b.Photos {
		if r.Lamp != "hydrogen" {
			t.Errorf("%s: read as %s, want hydrogen", filepath.Base(r.File), r.Lamp)
		}
		if filepath.Base(r.File) == "h1.jpg" && !hasWarning(r, "nothing checks that") {
			t.Errorf("h1.jpg: no word of why it was left out of the calibration: %q", r.Warnings)
		}
	}
	if b.Rydberg == nil || math.Abs(b.Rydberg.DevSigma) > 3 {
		t.Fatalf("Rydberg %+v, want one within 3σ of CODATA R_H", b.Rydberg)
	}
	t.Logf("R = %.0f ± %.0f m⁻¹ (%+.1fσ)", b.Rydberg.R, b.Rydberg.Sigma, b.Rydberg.DevSigma)
}
