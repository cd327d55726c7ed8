package main

import (
	"encoding/json"
	"strings"
	"testing"

	"lineshot/calibrate"
)

// idOf builds an identification of lamp matching peak k to nm[k].
func idOf(lamp string, score float64, nm ...float64) calibrate.Identification {
	id := calibrate.Identification{Lamp: lamp, Score: score}
	for k, v := range nm {
		id.Matches = append(id.Matches, calibrate.Match{Peak: k, Line: calibrate.Line{NM: v}})
	}
	return id
}

// A runner-up close behind is a doubt only when it reads the lines as
// other wavelengths (NIST ASD air wavelengths of Hg I and the Balmer lines,
// ../shared/REFERENCE-DATA.md).
func TestLampDoubt(t *testing.T) {
	hg := idOf("mercury", 1, 404.656, 435.833, 546.074)
	cfl := idOf("cfl", 0.9, 404.656, 435.833, 546.074, 611.6) // mercury's lines and a phosphor's
	h := idOf("hydrogen", 0.8, 410.174, 434.047, 486.133)
	far := idOf("hydrogen", 0.5, 410.174, 434.047, 486.133)
	for _, c := range []struct {
		name string
		ids  []calibrate.Identification
		want string // a word the warning names; "" for none
	}{
		{"one lamp", []calibrate.Identification{hg}, ""},
		{"the same lines", []calibrate.Identification{hg, cfl}, ""},
		{"past the same lines, other ones close", []calibrate.Identification{hg, cfl, h}, "hydrogen"},
		{"other lines, far behind", []calibrate.Identification{hg, far}, ""},
	} {
		got := lampDoubt(c.ids)
		if (got == "") != (c.want == "") || !strings.Contains(got, c.want) {
			t.Errorf("%s: warning %q, want one naming %q", c.name, got, c.want)
		}
	}
	if got := lampDoubt([]calibrate.Identification{hg, h}); !strings.Contains(got, "confidence 0.56") {
		t.Errorf("warning %q: want the confidence against the runner-up, 1/(1+0.8)", got)
	}
}

// A hydrogen photo whose three Balmer lines in view a three-parameter
// dispersion fits onto mercury's (a random setup of scripts/sweep.py, seed
// 31, taken for mercury with no warning at all) must not come out as a
// silent, confident calibration. And a mercury photo with its lines in
// view raises no doubt, though a fluorescent lamp's mercury lines fit it too.
func TestUncheckedLampSaysSo(t *testing.T) {
	dir := t.TempDir()
	photo, truth := simulate(t, dir, "h.jpg", "--lamp", "hydrogen", "--size", "640x480", "--lines-per-mm", "1000",
		"--tilt", "3.13", "--psf", "1.68", "--peak", "0.182", "--background", "0.0713", "--quality", "95", "--seed", "635142")
	out, stderr, code := runCLI(t, "measure", "--json", photo)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var doc struct {
		Images []imageResult `json:"images"`
	}
	if err := json.Unmarshal([]byte(out), &doc); err != nil {
		t.Fatal(err)
	}
	r := doc.Images[0]
	if r.Lamp != truth.Lamp && len(r.Warnings) == 0 {
		t.Fatalf("a %s photo taken for %s (confidence %.2f) without a warning", truth.Lamp, r.Lamp, r.LampScore)
	}
	if c := r.Calibration; c != nil && c.Dispersion.DOF == 0 && !hasWarning(r, "no line to spare") {
		t.Errorf("a calibration with no line to spare, not said: %q", r.Warnings)
	}
	t.Logf("taken for %s (confidence %.2f): %q", r.Lamp, r.LampScore, r.Warnings)

	out, stderr, code = runCLI(t, "measure", "--json", "../../testdata/demo/bench1/mercury.jpg")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	doc.Images = nil
	if err := json.Unmarshal([]byte(out), &doc); err != nil {
		t.Fatal(err)
	}
	if r := doc.Images[0]; r.Lamp != "mercury" || hasWarning(r, "in doubt") {
		t.Errorf("demo mercury photo: lamp %s, warnings %q", r.Lamp, r.Warnings)
	}
}

func hasWarning(r imageResult, s string) bool {
	for _, w := range r.Warnings {
		if strings.Contains(w, s) {
			return true
		}
	}
	return false
}
