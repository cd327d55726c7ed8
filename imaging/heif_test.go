package imaging

import (
	"fmt"
	"image"
	"image/jpeg"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"unicode"
	"unicode/utf8"

	"gocv.io/x/gocv"

	"lineshot/imaging/synth"
)

// writeHEICFile renders p and writes it as HEIC (quality q) to dir/name.
func writeHEICFile(t *testing.T, dir, name string, p synth.Params, q int) (string, synth.Truth, image.Image) {
	t.Helper()
	img, tr, err := synth.Render(p)
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(dir, name)
	if err := WriteHEIC(path, img, q); err != nil {
		t.Fatal(err)
	}
	return path, tr, img
}

// HEIC photos (an iPhone's default) are measured as accurately as the same
// photo saved as a JPEG: the lines' centres against the simulator's truth,
// within the suite's limit for bright lines (0.15 px RMS), and no line
// where the truth has none.
func TestHEICMeasured(t *testing.T) {
	dir := t.TempDir()
	for _, c := range []struct {
		name string
		p    synth.Params
	}{
		{"mercury", synth.Params{Width: 1280, Height: 720, LinesPerMM: 600, TiltDeg: 3, Seed: 41, Emissions: mercury}},
		{"hydrogen, rolled", synth.Params{Width: 1280, Height: 720, LinesPerMM: 600, TiltDeg: -11, Seed: 42, Emissions: hydrogen}},
	} {
		t.Run(c.name, func(t *testing.T) {
			path, tr, img := writeHEICFile(t, dir, strings.Fields(c.name)[0]+".heic", c.p, 90)
			s, err := Extract(path, Options{})
			if err != nil {
				t.Fatal(err)
			}
			if s.FrameW != c.p.Width || s.FrameH != c.p.Height {
				t.Errorf("frame %dx%d, the photo %dx%d", s.FrameW, s.FrameH, c.p.Width, c.p.Height)
			}
			rms, _, stray := lineStats(t, s, tr)
			jp := writeImageFile(t, strings.Fields(c.name)[0]+".jpg", func(w io.Writer) error { return jpeg.Encode(w, img, &jpeg.Options{Quality: 90}) })
			sj, err := Extract(jp, Options{})
			if err != nil {
				t.Fatal(err)
			}
			rmsJ, _, _ := lineStats(t, sj, tr)
			t.Logf("HEIC: %.3f px RMS, band %.3f°; the same photo as JPEG: %.3f px RMS, band %.3f°", rms, s.AngleDeg, rmsJ, sj.AngleDeg)
			if rms > 0.15 {
				t.Errorf("HEIC: lines %.3f px RMS off the truth", rms)
			}
			if len(stray) > 0 {
				t.Errorf("HEIC: lines where the truth has none: %v", stray)
			}
		})
	}
}

// A HEIC photo over the pixel cap is refused from its header, before it is
// decoded; a cut-short or garbled one gets an error naming it, whatever its
// name says.
func TestHEICRefused(t *testing.T) {
	dir := t.TempDir()
	path, _, _ := writeHEICFile(t, dir, "big.heic", synth.Params{Width: 1280, Height: 720, Seed: 43, Emissions: mercury}, 60)
	if _, err := Extract(path, Options{MaxPixels: 500_000}); err == nil || !strings.Contains(err.Error(), "1280x720 pixels exceeds the limit") || !strings.Contains(err.Error(), path) {
		t.Errorf("over the cap: %v", err)
	}
	raw, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	cut := filepath.Join(dir, "cut.heic")
	os.WriteFile(cut, raw[:len(raw)/2], 0o644)
	garbled := append([]byte(nil), raw...)
	for i := 64; i < len(garbled); i += 97 {
		garbled[i] ^= 0x5a
	}
	bad := filepath.Join(dir, "garbled.jpg") // a HEIC whatever its name
	os.WriteFile(bad, garbled, 0o644)
	head := filepath.Join(dir, "head.heic")
	os.WriteFile(head, raw[:40], 0o644)
	for _, p := range []string{cut, bad, head} {
		s, err := Extract(p, Options{})
		if err == nil {
			// libheif may decode a damaged picture; then the strip must
			// still come from this file, not be made up.
			t.Logf("%s: measured (%d px profile)", filepath.Base(p), len(s.Profile))
			continue
		}
		if msg := err.Error(); !strings.Contains(msg, p) || strings.Count(msg, "\n") > 0 || !strings.Contains(msg, "HEIF") || !utf8.ValidString(msg) || strings.ContainsFunc(msg, unicode.IsControl) {
			t.Errorf("%s: error should name the file and the reason on one line: %q", p, msg)
		}
		t.Logf("%s: %v", filepath.Base(p), err)
	}
}

// A HEIC photo whose container says to turn it (a phone held upright
// stores its pixels sideways) is measured turned: the frame and the lines
// as the simulator made them upright.
func TestHEICTurned(t *testing.T) {
	dir := t.TempDir()
	p := synth.Params{Width: 960, Height: 540, LinesPerMM: 600, TiltDeg: 2, Seed: 44, Emissions: mercury}
	img, tr, err := synth.Render(p)
	if err != nil {
		t.Fatal(err)
	}
	b := img.Bounds()
	// stored(x, y) for each orientation: the pixels a viewer turns into
	// img. The EXIF tag's meaning (common practice): 6, the stored 0th row
	// is the picture's right side and its 0th column the top (turned a
	// quarter clockwise to show); 8, the 0th row is the left side and the
	// 0th column the bottom; 3, a half turn.
	for _, c := range []struct {
		orientation int
		w, h        int
		from        func(x, y int) (int, int) // stored pixel → img pixel
	}{
		{6, b.Dy(), b.Dx(), func(x, y int) (int, int) { return b.Dx() - 1 - y, x }},
		{3, b.Dx(), b.Dy(), func(x, y int) (int, int) { return b.Dx() - 1 - x, b.Dy() - 1 - y }},
		{8, b.Dy(), b.Dx(), func(x, y int) (int, int) { return y, b.Dy() - 1 - x }},
	} {
		stored := image.NewRGBA(image.Rect(0, 0, c.w, c.h))
		for y := 0; y < c.h; y++ {
			for x := 0; x < c.w; x++ {
				sx, sy := c.from(x, y)
				stored.Set(x, y, img.At(sx, sy))
			}
		}
		path := filepath.Join(dir, fmt.Sprintf("turned%d.heic", c.orientation))
		if err := writeHEIC(path, stored, 8, 90, c.orientation); err != nil {
			t.Fatal(err)
		}
		s, err := Extract(path, Options{})
		if err != nil {
			t.Fatal(err)
		}
		rms, _, stray := lineStats(t, s, tr)
		t.Logf("orientation %d: frame %dx%d, band %.3f°, lines %.3f px RMS", c.orientation, s.FrameW, s.FrameH, s.AngleDeg, rms)
		if s.FrameW != p.Width || s.FrameH != p.Height || rms > 0.15 || len(stray) > 0 {
			t.Errorf("orientation %d: frame %dx%d, lines %.3f px RMS off, stray %v", c.orientation, s.FrameW, s.FrameH, rms, stray)
		}
	}
}

// A 10-bit HEIC photo (as newer phones store HDR photos) is read at 16 bits
// a channel, full scale kept full scale, and measured as the 8-bit one is.
func TestHEIC10Bit(t *testing.T) {
	dir := t.TempDir()
	p := synth.Params{Width: 960, Height: 540, LinesPerMM: 600, TiltDeg: -3, Seed: 45, Emissions: hydrogen}
	img, tr, err := synth.Render(p)
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(dir, "deep.heic")
	if err := writeHEIC(path, deep(img), 10, 90, 1); err != nil {
		t.Fatal(err)
	}
	if _, _, depth, err := heifSize(path); err != nil || depth != 10 {
		t.Fatalf("written at %d bits (%v), want 10", depth, err)
	}
	m, err := decodeHEIF(path, DefaultMaxPixels)
	if err != nil {
		t.Fatal(err)
	}
	typ := m.Type()
	// The decoded levels against the picture's own, 16-bit: within the
	// HEVC coding's error, and the scale the same (a wrong shift reads
	// 1/64 or 64 times).
	var sum, sumRef float64
	px, _ := m.DataPtrUint16()
	ref := deep(img)
	for y := 0; y < p.Height; y += 7 {
		for x := 0; x < p.Width; x += 7 {
			c := ref.RGBA64At(x, y)
			o := 3 * (y*p.Width + x)
			sum += float64(px[o]) + float64(px[o+1]) + float64(px[o+2])
			sumRef += float64(c.B) + float64(c.G) + float64(c.R)
		}
	}
	m.Close()
	if typ != gocv.MatTypeCV16UC3 || math.Abs(sum/sumRef-1) > 0.02 {
		t.Errorf("decoded as type %v, level %.4f of the picture's", typ, sum/sumRef)
	}
	s, err := Extract(path, Options{})
	if err != nil {
		t.Fatal(err)
	}
	rms, _, stray := lineStats(t, s, tr)
	t.Logf("10-bit HEIC: level %.4f of the picture's, lines %.3f px RMS", sum/sumRef, rms)
	if rms > 0.15 || len(stray) > 0 {
		t.Errorf("lines %.3f px RMS off, stray %v", rms, stray)
	}
}
