package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// Two photos of different setups left in one bench's folder (a webcam's
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
