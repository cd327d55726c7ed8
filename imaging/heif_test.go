package imaging

import (
	"image"
	"image/jpeg"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"unicode"
	"unicode/utf8"

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
			jp := filepath.Join(dir, strings.Fields(c.name)[0]+".jpg")
			f, err := os.Create(jp)
			if err != nil {
				t.Fatal(err)
			}
			jpeg.Encode(f, img, &jpeg.Options{Quality: 90})
			f.Close()
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
