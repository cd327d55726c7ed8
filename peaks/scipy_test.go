package peaks

import (
	"bytes"
	"encoding/json"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"testing"
)

// python returns an interpreter that has SciPy, or "" (LINESHOT_PYTHON
// overrides; scripts/test.sh installs Debian's python3-scipy).
func python(t *testing.T) string {
	cands := []string{os.Getenv("LINESHOT_PYTHON"), "/usr/bin/python3", "python3"}
	for _, c := range cands {
		if c == "" {
			continue
		}
		if err := exec.Command(c, "-c", "import scipy.signal").Run(); err == nil {
			return c
		}
	}
	return ""
}

// Outside check against a reference library: scipy.signal.find_peaks and
// peak_widths (Debian python3-scipy) on the same smoothed profiles with the
// same height, prominence and distance find the same lines, and our fitted
// centres lie within 0.5 px of scipy's half-prominence midpoints.
func TestAgainstSciPy(t *testing.T) {
	py := python(t)
	if py == "" {
		t.Skip("no python3 with scipy (scripts/test.sh installs python3-scipy)")
	}
	var profiles []map[string]any
	var ours []Result
	sets := [][]line{
		{{100.3, 500, 1.3}, {250.77, 80, 1.6}, {420.5, 1000, 2.2}, {431.2, 300, 2.2}, {700.05, 40, 1.2}},
		{{50, 30, 1}, {300, 3000, 1.5}, {318, 60, 1.5}, {600, 200, 3}, {900, 25, 2}},
		{{200, 100, 1.1}, {205.5, 90, 1.1}, {480, 70, 2.5}, {760.4, 900, 1.2}},
	}
	for k, lines := range sets {
		y := synth(1000, lines, 2, uint64(40+k))
		r, err := Find(y, Options{})
		if err != nil {
			t.Fatal(err)
		}
		ours = append(ours, r)
		profiles = append(profiles, map[string]any{"y": r.Smoothed, "height": r.Threshold, "prominence": r.Threshold, "distance": r.Distance})
	}
	in, _ := json.Marshal(map[string]any{"profiles": profiles})
	script := filepath.Join("..", "scripts", "scipy_peaks.py")
	cmd := exec.Command(py, script)
	cmd.Stdin = bytes.NewReader(in)
	out, err := cmd.Output()
	if err != nil {
		t.Fatalf("%s: %v", script, err)
	}
	var doc struct {
		SciPy   string `json:"scipy"`
		Results []struct {
			Peaks   []int     `json:"peaks"`
			Centres []float64 `json:"centres"`
		} `json:"results"`
	}
	if err := json.Unmarshal(out, &doc); err != nil {
		t.Fatal(err)
	}
	for k, r := range ours {
		sp := doc.Results[k]
		if len(sp.Peaks) != len(r.Peaks) {
			t.Errorf("profile %d: scipy %s finds %d peaks %v, lineshot %d", k, doc.SciPy, len(sp.Peaks), sp.Peaks, len(r.Peaks))
			continue
		}
		for j, p := range r.Peaks {
			if p.Index != sp.Peaks[j] {
				t.Errorf("profile %d: peak %d at sample %d, scipy %d", k, j, p.Index, sp.Peaks[j])
			}
			if d := math.Abs(p.Center - sp.Centres[j]); d > 0.5 {
				t.Errorf("profile %d: centre %.3f, scipy half-width midpoint %.3f", k, p.Center, sp.Centres[j])
			}
		}
	}
	t.Logf("scipy %s agrees on %d profiles", doc.SciPy, len(ours))
}
