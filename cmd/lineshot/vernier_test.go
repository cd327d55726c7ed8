package main

import (
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"lineshot/calibrate/vernier"
)

// The shipped example class (made by scripts/make-vernier-demo.py with
// three deliberate mistakes) is summarised with each mistake named.
func TestVernierCommandOnExampleClass(t *testing.T) {
	csvPath := filepath.Join(t.TempDir(), "checked.csv")
	out, stderr, code := runCLI(t, "vernier", "--lines-per-mm", "600", "--csv", csvPath, filepath.Join("..", "..", "testdata", "vernier", "class-b12.csv"))
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	for _, want := range []string{
		"bench1 / Priya: fine",
		"bench1 / Tomas: check or re-measure H-beta: half-degree mark missed",
		"bench2 / Wen: check or re-measure yellow 1: neighbouring line",
		"bench3 / Olu: check or re-measure H-gamma: wrong whole degree",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("summary lacks %q\n%s", want, out)
		}
	}
	b, err := os.ReadFile(csvPath)
	if err != nil || strings.Count(string(b), "\n") != 1+4*8 {
		t.Errorf("CSV: %v, %d lines", err, strings.Count(string(b), "\n"))
	}
	bad := filepath.Join(t.TempDir(), "bad.csv")
	os.WriteFile(bad, []byte("bench,observer,lamp,line,side,reading\nB1,Ana,Hg,green,left,160 75\n"), 0o644)
	_, stderr, code = runCLI(t, "vernier", bad)
	if code != exitFailed || !strings.Contains(stderr, bad) || !strings.Contains(stderr, "row 2") || strings.Count(strings.TrimSpace(stderr), "\n") != 0 {
		t.Errorf("bad readings: exit %d, stderr %q", code, stderr)
	}
}

// The class's readings of bench-a are compared with the photos of bench-a,
// both from the command line (--against) and inside the batch report.
func TestVernierAgainstPhotos(t *testing.T) {
	root := makeLab(t)
	out := filepath.Join(t.TempDir(), "results")
	var b strings.Builder
	b.WriteString("bench,observer,lamp,line,side,reading\n")
	d := 1e6 / 600.0
	z := 180 + 2.0/60
	for _, l := range []struct {
		lamp, name string
		nm         float64
	}{{"mercury", "green", 546.0735}, {"mercury", "blue", 435.8328}, {"hydrogen", "H-alpha", 656.2795}, {"hydrogen", "H-beta", 486.1325}} {
		th := math.Asin(l.nm/d) * 180 / math.Pi
		fmt.Fprintf(&b, "bench-a,Nia,%s,%s,right,%s\n", l.lamp, l.name, vernier.FormatAngle(z+th))
		fmt.Fprintf(&b, "bench-a,Nia,%s,%s,left,%s\n", l.lamp, l.name, vernier.FormatAngle(z-th))
	}
	readings := filepath.Join(t.TempDir(), "class.csv")
	os.WriteFile(readings, []byte(b.String()), 0o644)
	runCLI(t, "batch", "--quiet", "--readings", readings, "--out", out, root)
	doc := readBatch(t, out)
	if len(doc.Vernier) != 1 || len(doc.VernierSummary) != 1 || !strings.Contains(doc.VernierSummary[0], "fine") {
		t.Fatalf("vernier in results.json: %+v", doc.VernierSummary)
	}
	for _, l := range doc.Vernier[0].Lines {
		if l.PhotoNM == 0 || math.Abs(l.PhotoNM-l.RefNM) > 0.1 {
			t.Errorf("%s: photo %.4f nm, reference %.4f", l.Asked, l.PhotoNM, l.RefNM)
		}
	}
	html, _ := os.ReadFile(filepath.Join(out, "report.html"))
	if !strings.Contains(string(html), "Vernier readings checked") {
		t.Error("the report has no vernier section")
	}
	stdout, stderr, code := runCLI(t, "vernier", "--against", filepath.Join(out, "results.json"), readings)
	if code != 0 || !strings.Contains(stdout, "photo nm") {
		t.Errorf("vernier --against: exit %d %s", code, stderr)
	}
}

// An observer who read no calibration line is named, a line on stderr,
// and the rest of the class is still checked: text, CSV and a batch's
// report alike, with the partly-failed exit status.
func TestVernierGoesOnPastAnObserver(t *testing.T) {
	raw, err := os.ReadFile(filepath.Join("..", "..", "testdata", "vernier", "class-b12.csv"))
	if err != nil {
		t.Fatal(err)
	}
	var keep []string
	for _, ln := range strings.Split(string(raw), "\n") {
		if !(strings.HasPrefix(ln, "bench1,Tomas,") && strings.Contains(ln, ",green,")) {
			keep = append(keep, ln)
		}
	}
	dir := t.TempDir()
	gap := filepath.Join(dir, "gap.csv")
	if err := os.WriteFile(gap, []byte(strings.Join(keep, "\n")), 0o644); err != nil {
		t.Fatal(err)
	}
	csvPath := filepath.Join(dir, "checked.csv")
	out, stderr, code := runCLI(t, "vernier", "--csv", csvPath, gap)
	if code != exitFailed || strings.Count(strings.TrimSpace(stderr), "\n") != 0 || !strings.Contains(stderr, "observer Tomas: not checked: no calibration line") {
		t.Errorf("exit %d, stderr %q", code, stderr)
	}
	for _, want := range []string{"bench1 / Tomas: not checked", "bench2 / Wen: check or re-measure yellow 1: neighbouring line", "bench3 / Olu: check or re-measure H-gamma: wrong whole degree"} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q\n%s", want, out)
		}
	}
	if b, err := os.ReadFile(csvPath); err != nil || !strings.Contains(string(b), "bench1,Tomas,") || !strings.Contains(string(b), "not checked") {
		t.Errorf("CSV: %v\n%s", err, b)
	}

	out = filepath.Join(dir, "results")
	_, stderr, code = runCLI(t, "batch", "--quiet", "--readings", gap, "--out", out, makeLab(t))
	doc := readBatch(t, out)
	failed := false
	for _, f := range doc.Failures {
		failed = failed || strings.Contains(f.Reason, "observer Tomas: not checked")
	}
	if code != exitFailed || !failed || len(doc.Vernier) != 4 {
		t.Errorf("batch: exit %d, Tomas among the failures %v, %d observers (want 4); stderr %q", code, failed, len(doc.Vernier), stderr)
	}
	if html, err := os.ReadFile(filepath.Join(out, "report.html")); err != nil || !strings.Contains(string(html), "bench1 / Tomas: not checked") || !strings.Contains(string(html), "bench3 / Olu: d = ") {
		t.Errorf("report: %v, Tomas not shown as unchecked beside the others", err)
	}
}
