package main

import (
	"math"
	"os"
	"path/filepath"
	"testing"
)

// A bench photographed with an iPhone's default format: lineshot batch
// takes the HEIC photos (simulated, written through libheif) as it takes
// JPEGs: the mercury photo calibrates, each Balmer line of the hydrogen
// photo lands within 0.1 nm (or 3σ) of NIST (REFERENCE-DATA.md section 2).
func TestBatchReadsHEIC(t *testing.T) {
	root := filepath.Join(t.TempDir(), "class")
	bench := filepath.Join(root, "bench-7")
	if err := os.MkdirAll(bench, 0o755); err != nil {
		t.Fatal(err)
	}
	simulate(t, bench, "IMG_0101.HEIC", "--lamp", "mercury", "--size", "1280x720", "--tilt", "1.5", "--seed", "61")
	simulate(t, bench, "IMG_0102.HEIC", "--lamp", "hydrogen", "--size", "1280x720", "--tilt", "1.5", "--seed", "62")
	for _, n := range []string{"IMG_0101.truth.json", "IMG_0102.truth.json"} {
		os.Remove(filepath.Join(bench, n))
	}
	out := filepath.Join(t.TempDir(), "out")
	_, stderr, code := runCLI(t, "batch", "--quiet", "--out", out, root)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	doc := readBatch(t, out)
	if len(doc.Benches) != 1 || doc.Benches[0].Calibration == nil || len(doc.Benches[0].Photos) != 1 {
		t.Fatalf("benches %+v, failures %+v", doc.Benches, doc.Failures)
	}
	b := doc.Benches[0]
	if b.CalPhotos[0].Lamp != "mercury" || b.Photos[0].Lamp != "hydrogen" {
		t.Errorf("lamps %q and %q", b.CalPhotos[0].Lamp, b.Photos[0].Lamp)
	}
	n := 0
	for _, l := range b.Photos[0].Lines {
		if l.N >= 3 {
			n++
			if math.Abs(l.WavelengthNM-l.RefNM) > math.Max(0.1, 3*l.WavelengthErrNM) {
				t.Errorf("%s at %.3f ± %.3f nm, NIST %.4f", l.ID, l.WavelengthNM, l.WavelengthErrNM, l.RefNM)
			}
		}
	}
	if n < 4 || b.Rydberg == nil {
		t.Errorf("%d Balmer lines, Rydberg %v", n, b.Rydberg)
	}
}
