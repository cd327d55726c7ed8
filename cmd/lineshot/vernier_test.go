package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
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
