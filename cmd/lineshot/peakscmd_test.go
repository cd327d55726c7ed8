package main

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

func TestPeaksCommandOnCSV(t *testing.T) {
	dir := t.TempDir()
	var b strings.Builder
	b.WriteString("wavelength_nm,counts\n")
	for i := 0; i < 600; i++ {
		x := 400 + 0.5*float64(i)
		v := 50 + 900*math.Exp(-(x-486.13)*(x-486.13)/(2*0.8*0.8)) + 300*math.Exp(-(x-656.28)*(x-656.28)/(2*0.8*0.8)) + 2*math.Sin(float64(i)*2.1)
		fmt.Fprintf(&b, "%.2f,%.4f\n", x, v)
	}
	path := filepath.Join(dir, "scan.csv")
	os.WriteFile(path, []byte(b.String()), 0o644)
	out, stderr, code := runCLI(t, "peaks", "--profile", path, "--json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var doc struct {
		Lines []struct{ Position, FWHM float64 } `json:"lines"`
	}
	if err := json.Unmarshal([]byte(out), &doc); err != nil {
		t.Fatal(err)
	}
	want := []float64{486.13, 656.28}
	if len(doc.Lines) != 2 {
		t.Fatalf("%d lines: %s", len(doc.Lines), out)
	}
	for k, l := range doc.Lines {
		if math.Abs(l.Position-want[k]) > 0.02 || math.Abs(l.FWHM-0.8*2.3548) > 0.1 {
			t.Errorf("line %d: %.3f FWHM %.3f, truth %.2f FWHM %.3f", k, l.Position, l.FWHM, want[k], 0.8*2.3548)
		}
	}
}

func TestParseProfileCSVErrors(t *testing.T) {
	cases := map[string]string{
		"1\n2\nthree\n4\n5\n6\n7\n8\n": "line 3",
		"1,2\n2,3\n3\n":                "line 3: 1 columns",
		"1,5\n1,6\n":                   "does not increase",
		"1\n2\n3\n":                    "at least 8",
		"1,2,3\n":                      "3 columns",
	}
	for in, want := range cases {
		_, _, err := parseProfileCSV(strings.NewReader(in))
		if err == nil || !strings.Contains(err.Error(), want) {
			t.Errorf("%q: error %v, want %q", in, err, want)
		}
	}
	dir := t.TempDir()
	bad := filepath.Join(dir, "bad.csv")
	os.WriteFile(bad, []byte("x\n1\n2\nNaN\n"), 0o644)
	_, stderr, code := runCLI(t, "peaks", "--profile", bad)
	if code != exitFailed || !strings.Contains(stderr, bad) || strings.Count(strings.TrimSpace(stderr), "\n") != 0 {
		t.Errorf("exit %d, stderr %q", code, stderr)
	}
}

func FuzzParseProfileCSV(f *testing.F) {
	f.Add("1\n2\n3\n4\n5\n6\n7\n8\n9\n")
	f.Add("pos,val\n1,2\n2,3\n3,4\n4,5\n5,6\n6,7\n7,8\n8,9\n")
	f.Add("# comment\n1e3;2\n")
	f.Fuzz(func(t *testing.T, s string) {
		pos, y, err := parseProfileCSV(strings.NewReader(s))
		if err != nil {
			return
		}
		if pos != nil && len(pos) != len(y) {
			t.Fatalf("%d positions for %d values", len(pos), len(y))
		}
		for i := 1; i < len(pos); i++ {
			if pos[i] <= pos[i-1] {
				t.Fatal("positions not increasing")
			}
		}
		for _, v := range y {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				t.Fatal("non-finite value accepted")
			}
		}
	})
}
