package main

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"lineshot/calibrate"
	"lineshot/imaging/synth"
)

// runCLI runs the command line and returns stdout, stderr and the exit status.
func runCLI(t testing.TB, args ...string) (string, string, int) {
	t.Helper()
	var out, errb bytes.Buffer
	err := run(context.Background(), args, &out, &errb)
	code := exitCode(err, &errb)
	return out.String(), errb.String(), code
}

type truthDoc struct {
	Lamp string `json:"lamp"`
	synth.Truth
}

// simulate renders a photo with the simulate command and returns its path
// and truth.
func simulate(t testing.TB, dir, name string, args ...string) (string, truthDoc) {
	t.Helper()
	path := filepath.Join(dir, name)
	_, stderr, code := runCLI(t, append([]string{"simulate", "-o", path}, args...)...)
	if code != 0 {
		t.Fatalf("simulate %v: exit %d: %s", args, code, stderr)
	}
	b, err := os.ReadFile(strings.TrimSuffix(path, filepath.Ext(path)) + ".truth.json")
	if err != nil {
		t.Fatal(err)
	}
	var tr truthDoc
	if err := json.Unmarshal(b, &tr); err != nil {
		t.Fatal(err)
	}
	return path, tr
}

func digest(t testing.TB, path string) [32]byte {
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	return sha256.Sum256(b)
}

// The end-to-end round trip of the first version: 1920x1080 JPEG (q90),
// 600 lines/mm, tilts 0, +4 and −8 degrees. Truth: the simulator's line
// positions; NIST wavelengths (REFERENCE-DATA.md sections 1-2); CODATA 2018
// R_H. Every mercury line found and identified, centroids within 0.3 px,
// Balmer wavelengths within 0.2 nm, R within 0.2 % of R_H.
func TestMeasureRoundTrip(t *testing.T) {
	for i, tilt := range []string{"0", "4", "-8"} {
		dir := t.TempDir()
		hg, hgTruth := simulate(t, dir, "hg.jpg", "--lamp", "mercury", "--tilt", tilt, "--seed", "3")
		h, hTruth := simulate(t, dir, "h.jpg", "--lamp", "hydrogen", "--tilt", tilt, "--seed", "4")
		before := digest(t, hg)
		stdout, stderr, code := runCLI(t, "measure", "--json", "--calibration-from", hg, h)
		if code != 0 {
			t.Fatalf("tilt %s: exit %d: %s", tilt, code, stderr)
		}
		if digest(t, hg) != before {
			t.Fatal("the calibration photo was modified")
		}
		var doc document
		if err := json.Unmarshal([]byte(stdout), &doc); err != nil {
			t.Fatalf("tilt %s: %v\n%s", tilt, err, stdout)
		}
		if len(doc.Calibrations) != 1 || len(doc.Images) != 1 {
			t.Fatalf("tilt %s: %d calibration photos, %d images", tilt, len(doc.Calibrations), len(doc.Images))
		}
		cal, img := doc.Calibrations[0], doc.Images[0]
		if cal.Lamp != "mercury" || img.Lamp != "hydrogen" {
			t.Errorf("tilt %s: lamps %q and %q", tilt, cal.Lamp, img.Lamp)
		}
		checkLines(t, "mercury tilt "+tilt, cal, hgTruth, 0.3, 0)
		checkLines(t, "hydrogen tilt "+tilt, img, hTruth, 0.3, 0.2)
		if img.Rydberg == nil {
			t.Fatalf("tilt %s: no Rydberg fit", tilt)
		}
		rel := img.Rydberg.R/calibrate.RHydrogen() - 1
		if math.Abs(rel) > 0.002 {
			t.Errorf("tilt %s: R = %.0f, %.4f %% from R_H", tilt, img.Rydberg.R, 100*rel)
		}
		if len(img.Rydberg.LinesUsed) < 4 {
			t.Errorf("tilt %s: only %v Balmer lines used", tilt, img.Rydberg.LinesUsed)
		}
		t.Logf("tilt %s°: R = %.0f ± %.0f m⁻¹ (%+.4f %% from R_H, %+.2fσ from the Bohr-formula value of the NIST lines), model %s",
			tilt, img.Rydberg.R, img.Rydberg.Sigma, 100*rel, img.Rydberg.DevRefSigma, img.Calibration.Dispersion.Model)
		_ = i
	}
}

// checkLines matches every in-frame truth line to a measured line by
// position and checks position and (when tolNM > 0) wavelength.
func checkLines(t *testing.T, name string, r imageResult, tr truthDoc, tolPX, tolNM float64) {
	t.Helper()
	for _, l := range tr.Lines {
		if !l.InFrame {
			continue
		}
		best := -1
		bd := math.Inf(1)
		for k, m := range r.Lines {
			if d := math.Hypot(m.X-l.X, m.Y-l.Y); d < bd {
				best, bd = k, d
			}
		}
		if best < 0 || bd > tolPX {
			t.Errorf("%s: line %.4f nm at (%.2f, %.2f): nearest measured line %.3f px away", name, l.NM, l.X, l.Y, bd)
			continue
		}
		m := r.Lines[best]
		if m.RefNM != l.NM {
			t.Errorf("%s: line %.4f nm identified as %q (%.4f)", name, l.NM, m.ID, m.RefNM)
		}
		if tolNM > 0 && math.Abs(m.WavelengthNM-l.NM) > tolNM {
			t.Errorf("%s: line %.4f nm measured at %.4f ± %.4f nm", name, l.NM, m.WavelengthNM, m.WavelengthErrNM)
		}
	}
}

// A photo alone calibrates itself and identifies its lamp with no hints.
func TestMeasureIdentifiesLampUnaided(t *testing.T) {
	dir := t.TempDir()
	for _, lamp := range []string{"mercury", "helium", "hydrogen"} {
		p, tr := simulate(t, dir, lamp+".jpg", "--lamp", lamp, "--size", "1280x720", "--seed", "9")
		stdout, stderr, code := runCLI(t, "measure", "--json", p)
		if code != 0 {
			t.Fatalf("%s: exit %d: %s", lamp, code, stderr)
		}
		var doc document
		if err := json.Unmarshal([]byte(stdout), &doc); err != nil {
			t.Fatal(err)
		}
		if got := doc.Images[0].Lamp; got != lamp {
			t.Errorf("%s photo classified as %q", lamp, got)
		}
		checkLines(t, lamp, doc.Images[0], tr, 0.3, 0.1)
	}
}

// Bad input: one line on stderr naming the file and the reason, a
// non-zero exit, no stack trace; the batch goes on past the bad file.
func TestMeasureBadInput(t *testing.T) {
	dir := t.TempDir()
	notImage := filepath.Join(dir, "notes.jpg")
	os.WriteFile(notImage, []byte("bench 3, Tuesday: lamp warmed up for 5 minutes"), 0o644)
	dark, _ := simulate(t, dir, "dark.png", "--peak", "0.00001", "--size", "640x480")
	good, _ := simulate(t, dir, "good.jpg", "--size", "1280x720")
	cases := []struct{ path, reason string }{
		{filepath.Join(dir, "nope.jpg"), "no such file"},
		{notImage, "not an image"},
		{dark, "no spectrum band"},
	}
	for _, c := range cases {
		_, stderr, code := runCLI(t, "measure", c.path, good)
		if code != exitFailed {
			t.Errorf("%s: exit %d, want %d", c.path, code, exitFailed)
		}
		lines := strings.Split(strings.TrimSpace(stderr), "\n")
		if len(lines) != 1 || !strings.Contains(lines[0], c.path) || !strings.Contains(lines[0], c.reason) {
			t.Errorf("%s: stderr %q should be one line naming the file and %q", c.path, stderr, c.reason)
		}
		if strings.Contains(stderr, "goroutine") || strings.Contains(stderr, "panic") {
			t.Errorf("%s: stack trace on stderr", c.path)
		}
	}
	if _, _, code := runCLI(t, "measure", "--no-such-flag", good); code != exitUsage {
		t.Errorf("unknown flag: exit %d, want %d", code, exitUsage)
	}
	if _, _, code := runCLI(t, "frobnicate"); code != exitUsage {
		t.Errorf("unknown command: exit %d, want %d", code, exitUsage)
	}
	// Numbers no option means (NaN, infinities, negative thresholds) are
	// usage errors, never a crash: --angle NaN panicked, --lines-per-mm NaN
	// was taken, --min-snr -3 made the mercury photo "cfl".
	prof := filepath.Join(t.TempDir(), "p.csv")
	os.WriteFile(prof, []byte("intensity\n1\n5\n1\n"), 0o644)
	readings := filepath.Join("..", "..", "testdata", "vernier", "class-b12.csv")
	for _, args := range [][]string{
		{"measure", "--dark", good, good},
		{"measure", "--angle", "NaN", good}, {"measure", "--min-snr", "NaN", good}, {"measure", "--min-snr", "-3", good},
		{"measure", "--lines-per-mm", "NaN", good}, {"measure", "--lines-per-mm", "Inf", good}, {"measure", "--match-tolerance", "-1", good},
		{"peaks", "--min-snr", "-2", "--profile", prof}, {"peaks", "--gain", "-1", "--profile", prof},
		{"vernier", "--d-um", "-1", readings}, {"vernier", "--least-count", "NaN", readings},
		{"vernier", "--least-count", "0.001", readings}, {"vernier", "--least-count", "31", readings},
		{"batch", "--least-count", "0.001", "--out", filepath.Join(t.TempDir(), "o"), t.TempDir()},
		{"batch", "--min-snr", "-1", "--out", filepath.Join(t.TempDir(), "o"), t.TempDir()},
	} {
		_, stderr, code := runCLI(t, args...)
		if code != exitUsage || strings.Contains(stderr, "panic") || !strings.Contains(stderr, "--"+strings.TrimPrefix(args[1], "--")) {
			t.Errorf("%v: exit %d, %s", args, code, stderr)
		}
	}
	// A pinned line far outside the profile held the last peak, and the
	// mercury photo came out as another lamp: now that photo fails.
	if _, stderr, code := runCLI(t, "measure", "--line", "546.07@99999999", good); code != exitFailed || !strings.Contains(stderr, "outside the profile") {
		t.Errorf("a pin outside the profile: exit %d, %s", code, stderr)
	}
	// A hydrogen photo given as the calibration was taken for neon and the
	// Balmer lines "measured" against it: now it is recognised and refused,
	// unless the user names hydrogen as the calibration lamp.
	hPhoto := filepath.Join("..", "..", "testdata", "demo", "bench2", "hydrogen.jpg")
	if _, stderr, code := runCLI(t, "measure", "-c", hPhoto, hPhoto); code != exitFailed || !strings.Contains(stderr, "this is a hydrogen lamp") {
		t.Errorf("hydrogen as the calibration: exit %d, %s", code, stderr)
	}
	if _, stderr, code := runCLI(t, "measure", "--calibration-lamp", "hydrogen", "-c", hPhoto, hPhoto); code != 0 {
		t.Errorf("hydrogen named as the calibration lamp: exit %d, %s", code, stderr)
	}
	// A wrong lamp named is taken (the user may know better) with a
	// warning naming the lamp the photo is recognised as; the right one
	// named, no warning.
	hgPhoto := filepath.Join("..", "..", "testdata", "demo", "bench2", "mercury.jpg")
	if stdout, _, code := runCLI(t, "measure", "--lamp", "neon", hgPhoto); code != 0 || !strings.Contains(stdout, "poorly") || !strings.Contains(stdout, "recognised as mercury") {
		t.Errorf("neon named for the mercury photo: exit %d, %s", code, stdout)
	}
	if stdout, _, _ := runCLI(t, "measure", "--lamp", "mercury", hgPhoto); strings.Contains(stdout, "poorly") {
		t.Errorf("mercury named for the mercury photo: %s", stdout)
	}
	// A simulated frame larger than lineshot measures (it would take some
	// 16 bytes a pixel to render) is refused before any is made.
	if _, stderr, code := runCLI(t, "simulate", "--size", "12000x12000", "-o", filepath.Join(t.TempDir(), "x.jpg")); code != exitUsage || !strings.Contains(stderr, "up to 120") {
		t.Errorf("144 MP simulation: exit %d, %s", code, stderr)
	}
}

// An output option naming a file the command reads (by its name or
// through a link) is a usage error, and the file stays as it was: a
// typo'd --save-calibration turned the calibration photo into JSON, and
// vernier --csv would have replaced a class's readings with its table.
func TestOutputsNeverReplaceInputs(t *testing.T) {
	dir := t.TempDir()
	copyIn := func(src string) string {
		b, err := os.ReadFile(src)
		if err != nil {
			t.Fatal(err)
		}
		p := filepath.Join(dir, filepath.Base(src))
		os.WriteFile(p, b, 0o644)
		return p
	}
	hg := copyIn(filepath.Join("..", "..", "testdata", "demo", "bench2", "mercury.jpg"))
	h := copyIn(filepath.Join("..", "..", "testdata", "demo", "bench2", "hydrogen.jpg"))
	readings := copyIn(filepath.Join("..", "..", "testdata", "vernier", "class-b12.csv"))
	link := filepath.Join(dir, "link.jpg")
	if err := os.Symlink(h, link); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(dir, "out")
	os.MkdirAll(out, 0o755)
	inOut := filepath.Join(out, "results.csv")
	os.WriteFile(inOut, []byte("bench,observer,line,deg,arcmin\n"), 0o644)
	for _, c := range []struct {
		args []string
		kept string
	}{
		{[]string{"measure", "--calibration-from", hg, "--save-calibration", hg}, hg},
		{[]string{"measure", "--calibration-from", hg, "--save-strip", link, h}, h},
		{[]string{"vernier", "--csv", readings, readings}, readings},
		{[]string{"batch", "--readings", inOut, "--out", out, dir}, inOut},
	} {
		before := digest(t, c.kept)
		_, stderr, code := runCLI(t, c.args...)
		if code != exitUsage || !strings.Contains(stderr, "a file this command reads") {
			t.Errorf("%v: exit %d, %s", c.args, code, stderr)
		}
		if digest(t, c.kept) != before {
			t.Errorf("%v: %s was changed", c.args, c.kept)
		}
	}
}

// A saved calibration applies like the photo it came from; one edited
// into nonsense is refused with a message naming it.
func TestCalibrationFileRoundTrip(t *testing.T) {
	dir := t.TempDir()
	hg, _ := simulate(t, dir, "hg.jpg", "--lamp", "mercury", "--seed", "5")
	h, _ := simulate(t, dir, "h.jpg", "--lamp", "hydrogen", "--seed", "6")
	calPath := filepath.Join(dir, "bench.json")
	if _, stderr, code := runCLI(t, "measure", "--calibration-from", hg, "--save-calibration", calPath); code != 0 {
		t.Fatalf("save: exit %d: %s", code, stderr)
	}
	a, _, _ := runCLI(t, "measure", "--json", "--calibration-from", hg, h)
	b, stderr, code := runCLI(t, "measure", "--json", "--calibration-from", calPath, h)
	if code != 0 {
		t.Fatalf("load: exit %d: %s", code, stderr)
	}
	var da, db document
	json.Unmarshal([]byte(a), &da)
	json.Unmarshal([]byte(b), &db)
	ra, rb := da.Images[0].Rydberg, db.Images[0].Rydberg
	if ra == nil || rb == nil || math.Abs(ra.R-rb.R) > 1e-6*ra.R {
		t.Errorf("R from photo %v, from saved calibration %v", ra, rb)
	}
	raw, _ := os.ReadFile(calPath)
	for name, edit := range map[string]string{
		"truncated": string(raw[:len(raw)/2]),
		"no params": strings.Replace(string(raw), `"params"`, `"parameters"`, 1),
		"garbage":   "not json at all",
	} {
		bad := filepath.Join(dir, "bad-"+strings.ReplaceAll(name, " ", "-")+".json")
		os.WriteFile(bad, []byte(edit), 0o644)
		_, stderr, code := runCLI(t, "measure", "--calibration-from", bad, h)
		if code == 0 || !strings.Contains(stderr, bad) {
			t.Errorf("%s calibration: exit %d, stderr %q", name, code, stderr)
		}
	}
}

func TestHelpShowsExamples(t *testing.T) {
	out, _, code := runCLI(t, "help")
	if code != 0 || !strings.Contains(out, "lineshot measure --calibration-from") {
		t.Errorf("help: exit %d\n%s", code, out)
	}
	_, errOut, code := runCLI(t, "measure", "--help")
	if code != 0 || !strings.Contains(errOut, "Examples:") || !strings.Contains(errOut, "--calibration-from") {
		t.Errorf("measure --help: exit %d\n%s", code, errOut)
	}
}

// A bare file-system error reads as the file and the reason, an empty
// name as ""; an error with its own context is left as it is.
func TestUserText(t *testing.T) {
	_, errOpen := os.Open("/no/such/results.json")
	_, errEmpty := os.Stat("")
	for _, c := range []struct {
		err  error
		want string
	}{
		{errOpen, "/no/such/results.json: no such file or directory"},
		{errEmpty, `"": no such file or directory`},
		{fmt.Errorf("reading the class: %w", errOpen), "reading the class: open /no/such/results.json: no such file or directory"},
	} {
		if got := userText(c.err); got != c.want {
			t.Errorf("got %q, want %q", got, c.want)
		}
	}
}
