package imaging

import (
	"bytes"
	"image"
	"image/color"
	"image/jpeg"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"lineshot/imaging/synth"
	"lineshot/peaks"
)

// mercury lines, air nm (NIST Handbook Hg I, BAL50), with demo strengths.
var mercury = []synth.Emission{
	{NM: 404.6563, Strength: 0.5}, {NM: 407.7831, Strength: 0.1}, {NM: 435.8328, Strength: 1},
	{NM: 491.6068, Strength: 0.05}, {NM: 546.0735, Strength: 1}, {NM: 576.9598, Strength: 0.3}, {NM: 579.0663, Strength: 0.3},
}

func writeJPEG(t testing.TB, p synth.Params, q int) (string, synth.Truth) {
	t.Helper()
	img, tr, err := synth.Render(p)
	if err != nil {
		t.Fatal(err)
	}
	path := writeImageFile(t, "photo.jpg", func(w io.Writer) error { return jpeg.Encode(w, img, &jpeg.Options{Quality: q}) })
	return path, tr
}

// writeImageFile writes an image with enc into a file name in a fresh
// temporary folder and returns its path.
func writeImageFile(t testing.TB, name string, enc func(io.Writer) error) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), name)
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	if err := enc(f); err != nil {
		t.Fatal(err)
	}
	if err := f.Close(); err != nil {
		t.Fatal(err)
	}
	return path
}

// deep is img at 16 bits a channel (each 8-bit code scaled to 16 bits),
// as raw converters write.
func deep(img image.Image) *image.RGBA64 {
	out := image.NewRGBA64(img.Bounds())
	b := img.Bounds()
	for y := b.Min.Y; y < b.Max.Y; y++ {
		for x := b.Min.X; x < b.Max.X; x++ {
			r, g, bl, _ := img.At(x, y).RGBA()
			out.SetRGBA64(x, y, color.RGBA64{uint16(r), uint16(g), uint16(bl), 0xffff})
		}
	}
	return out
}

// Round trip through the simulator: every line is found and its centre,
// mapped back to the original image, lies within 0.3 px of the truth.
func TestExtractRoundTripTilts(t *testing.T) {
	for _, tilt := range []float64{0, 4, -8} {
		p := synth.Params{Width: 1920, Height: 1080, LinesPerMM: 600, TiltDeg: tilt, Seed: 11, Emissions: mercury}
		path, tr := writeJPEG(t, p, 90)
		s, err := Extract(path, Options{})
		if err != nil {
			t.Fatalf("tilt %g: %v", tilt, err)
		}
		if d := math.Abs(s.AngleDeg - tilt); d > 0.05 {
			t.Errorf("tilt %g: angle %.4f°", tilt, s.AngleDeg)
		}
		r, err := peaks.Find(s.Profile, peaks.Options{Clipped: s.Clipped})
		if err != nil {
			t.Fatal(err)
		}
		var worst float64
		for _, l := range tr.Lines {
			best := nearestLine(s, r.Peaks, l.X, l.Y)
			worst = math.Max(worst, best)
			if best > 0.3 {
				t.Errorf("tilt %g: line %.2f nm at (%.2f, %.2f): nearest peak %.3f px away", tilt, l.NM, l.X, l.Y, best)
			}
		}
		t.Logf("tilt %+g°: angle %.4f°, %d peaks, worst centre error %.3f px", tilt, s.AngleDeg, len(r.Peaks), worst)
	}
}

func TestExtractRejectsBadInput(t *testing.T) {
	dir := t.TempDir()
	text := filepath.Join(dir, "notes.jpg")
	os.WriteFile(text, []byte("these are not pixels"), 0o644)
	empty := filepath.Join(dir, "empty.png")
	os.WriteFile(empty, nil, 0o644)
	dark, _ := writeJPEG(t, synth.Params{Width: 640, Height: 480, PeakLevel: 1e-9, Emissions: mercury}, 90)
	for _, c := range []struct{ path, want string }{
		{filepath.Join(dir, "missing.jpg"), "no such file"},
		{text, "not an image"},
		{empty, "empty file"},
		{dir, "directory"},
		{dark, "no spectrum band"},
	} {
		_, err := Extract(c.path, Options{})
		if err == nil {
			t.Errorf("%s: accepted", c.path)
			continue
		}
		if msg := err.Error(); !contains(msg, c.path) || !contains(msg, c.want) {
			t.Errorf("%s: error %q should name the file and say %q", c.path, msg, c.want)
		}
	}
}

func contains(s, sub string) bool {
	return len(s) >= len(sub) && (s == sub || len(sub) == 0 || indexOf(s, sub) >= 0)
}

func indexOf(s, sub string) int {
	for i := 0; i+len(sub) <= len(s); i++ {
		if s[i:i+len(sub)] == sub {
			return i
		}
	}
	return -1
}

// Any bytes, named like a photo: Extract returns a strip or an error that
// names the file; it never panics or aborts inside OpenCV.
func FuzzExtractBytes(f *testing.F) {
	img, _, _ := synth.Render(synth.Params{Width: 64, Height: 48, Emissions: mercury, NoNoise: true})
	var buf bytes.Buffer
	jpeg.Encode(&buf, img, nil)
	f.Add(buf.Bytes())
	f.Add([]byte("\xff\xd8\xff\xe0 not really"))
	f.Add([]byte("\x89PNG\r\n\x1a\n"))
	f.Fuzz(func(t *testing.T, b []byte) {
		p := filepath.Join(t.TempDir(), "photo.jpg")
		os.WriteFile(p, b, 0o644)
		if _, err := Extract(p, Options{MaxPixels: 4_000_000}); err != nil && !strings.Contains(err.Error(), p) {
			t.Fatalf("error does not name the file: %v", err)
		}
	})
}

// nearestLine returns the distance in original-image pixels from (x, y) to
// the nearest of the peaks mapped back through the strip.
func nearestLine(s Strip, ps []peaks.Peak, x, y float64) float64 {
	best := math.Inf(1)
	for _, p := range ps {
		px, py := s.ToImage(p.Center)
		best = math.Min(best, math.Hypot(px-x, py-y))
	}
	return best
}
