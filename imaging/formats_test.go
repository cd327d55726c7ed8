package imaging

import (
	"bytes"
	"encoding/json"
	"image"
	"image/jpeg"
	"image/png"
	"io"
	"math"
	"os"
	"path/filepath"
	"testing"

	"gocv.io/x/gocv"
	"golang.org/x/image/tiff"

	"lineshot/imaging/synth"
	"lineshot/peaks"
)

// withOrientation inserts an EXIF APP1 segment with the given Orientation
// tag (TIFF tag 0x0112) right after a JPEG's SOI marker.
func withOrientation(jpg []byte, o byte) []byte {
	app1 := []byte{0xff, 0xe1, 0, 0, 'E', 'x', 'i', 'f', 0, 0,
		'M', 'M', 0, 0x2a, 0, 0, 0, 8, // big-endian TIFF header, IFD0 at 8
		0, 1, // one entry
		0x01, 0x12, 0, 3, 0, 0, 0, 1, 0, o, 0, 0, // Orientation, SHORT, 1, value
		0, 0, 0, 0} // no next IFD
	n := len(app1) - 2
	app1[2], app1[3] = byte(n>>8), byte(n)
	out := append([]byte{}, jpg[:2]...)
	out = append(out, app1...)
	return append(out, jpg[2:]...)
}

// A phone held upright stores the frame sideways with EXIF Orientation 6
// (rotate 90° clockwise to display). lineshot measures the upright image:
// the band comes out vertical and every line lands where the rotated truth
// puts it.
func TestEXIFOrientation(t *testing.T) {
	p := synth.Params{Width: 1280, Height: 720, TiltDeg: 2, Seed: 8, Emissions: mercury}
	img, tr, err := synth.Render(p)
	if err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	jpeg.Encode(&buf, img, &jpeg.Options{Quality: 92})
	path := filepath.Join(t.TempDir(), "upright.jpg")
	os.WriteFile(path, withOrientation(buf.Bytes(), 6), 0o644)
	s, err := Extract(path, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if s.FrameW != 720 || s.FrameH != 1280 {
		t.Fatalf("decoded as %dx%d; the EXIF orientation was not applied", s.FrameW, s.FrameH)
	}
	r, err := peaks.Find(s.Profile, peaks.Options{})
	if err != nil {
		t.Fatal(err)
	}
	for _, l := range tr.Lines {
		// 90° clockwise: stored (x, y) is displayed at (H−1−y, x).
		wx, wy := float64(p.Height-1)-l.Y, l.X
		best := nearestLine(s, r.Peaks, wx, wy)
		if best > 0.3 {
			t.Errorf("%.2f nm: nearest line %.3f px from the rotated truth", l.NM, best)
		}
	}
}

// Progressive JPEG (written by OpenCV) decodes and measures like baseline.
func TestProgressiveJPEG(t *testing.T) {
	path, tr := writeJPEG(t, synth.Params{Width: 1280, Height: 720, Seed: 9, Emissions: mercury}, 95)
	m := gocv.IMRead(path, gocv.IMReadColor)
	defer m.Close()
	prog := filepath.Join(t.TempDir(), "progressive.jpg")
	if !gocv.IMWriteWithParams(prog, m, []int{gocv.IMWriteJpegQuality, 95, gocv.IMWriteJpegProgressive, 1}) {
		t.Fatal("OpenCV wrote no progressive JPEG")
	}
	raw, _ := os.ReadFile(prog)
	if !bytes.Contains(raw[:2000], []byte{0xff, 0xc2}) {
		t.Fatal("the file has no progressive (SOF2) frame")
	}
	s, err := Extract(prog, Options{})
	if err != nil {
		t.Fatal(err)
	}
	r, _ := peaks.Find(s.Profile, peaks.Options{})
	for _, l := range tr.Lines {
		best := nearestLine(s, r.Peaks, l.X, l.Y)
		if best > 0.3 {
			t.Errorf("%.2f nm: %.3f px off", l.NM, best)
		}
	}
}

// CMYK and progressive JPEGs as other software writes them (made once with
// ImageMagick 6.9 from a simulated photo; testdata/README.md): both are
// measured, every line within 0.3 px of the truth.
func TestCMYKAndProgressiveFiles(t *testing.T) {
	raw, err := os.ReadFile(filepath.Join("..", "testdata", "formats", "mercury.truth.json"))
	if err != nil {
		t.Fatal(err)
	}
	var tr synth.Truth
	if err := json.Unmarshal(raw, &tr); err != nil {
		t.Fatal(err)
	}
	for _, name := range []string{"mercury-cmyk.jpg", "mercury-progressive.jpg"} {
		s, err := Extract(filepath.Join("..", "testdata", "formats", name), Options{})
		if err != nil {
			t.Errorf("%s: %v", name, err)
			continue
		}
		r, _ := peaks.Find(s.Profile, peaks.Options{})
		for _, l := range tr.Lines {
			best := nearestLine(s, r.Peaks, l.X, l.Y)
			if best > 0.3 {
				t.Errorf("%s: %.2f nm %.3f px off", name, l.NM, best)
			}
		}
	}
}

// TIFF (16-bit colour, as raw converters write) is measured like the PNG
// it was made from, within 0.1 px; its header's size is checked against
// the pixel cap before OpenCV decodes it (a cap of 1000 px refuses it).
func TestTIFF16(t *testing.T) {
	p := synth.Params{Width: 960, Height: 540, LinesPerMM: 600, TiltDeg: 2, Seed: 31, Emissions: mercury}
	img, _, err := synth.Render(p)
	if err != nil {
		t.Fatal(err)
	}
	d := deep(img)
	pngPath := writeImageFile(t, "a.png", func(w io.Writer) error { return png.Encode(w, d) })
	tifPath := writeImageFile(t, "a.tif", func(w io.Writer) error { return tiff.Encode(w, d, nil) })
	a, err := Extract(pngPath, Options{})
	if err != nil {
		t.Fatal(err)
	}
	b, err := Extract(tifPath, Options{})
	if err != nil {
		t.Fatal(err)
	}
	ra, _ := peaks.Find(a.Profile, peaks.Options{})
	rb, _ := peaks.Find(b.Profile, peaks.Options{})
	if len(ra.Peaks) == 0 || len(ra.Peaks) != len(rb.Peaks) {
		t.Fatalf("PNG %d lines, TIFF %d", len(ra.Peaks), len(rb.Peaks))
	}
	for i := range ra.Peaks {
		if d := math.Abs(ra.Peaks[i].Center - rb.Peaks[i].Center); d > 0.1 {
			t.Errorf("line %d: TIFF %.3f px from PNG", i, d)
		}
	}
	if _, err := Extract(tifPath, Options{MaxPixels: 1000}); err == nil || !contains(err.Error(), "exceeds the limit") {
		t.Errorf("TIFF over the pixel cap: %v", err)
	}
}

// WriteJPEG's output decodes (with Go's decoder) to the image given,
// within JPEG's loss, orientation and colour order kept.
func TestWriteJPEG(t *testing.T) {
	img := image.NewRGBA(image.Rect(0, 0, 64, 32))
	for y := 0; y < 32; y++ {
		for x := 0; x < 64; x++ {
			img.Pix[img.PixOffset(x, y)+0] = uint8(4 * x) // red ramps along x
			img.Pix[img.PixOffset(x, y)+1] = uint8(8 * y) // green along y
			img.Pix[img.PixOffset(x, y)+2] = 40
			img.Pix[img.PixOffset(x, y)+3] = 255
		}
	}
	var buf bytes.Buffer
	if err := WriteJPEG(&buf, img.SubImage(image.Rect(0, 0, 64, 32)).(*image.RGBA), 95); err != nil {
		t.Fatal(err)
	}
	got, err := jpeg.Decode(&buf)
	if err != nil {
		t.Fatal(err)
	}
	if got.Bounds() != img.Bounds() {
		t.Fatalf("bounds %v, want %v", got.Bounds(), img.Bounds())
	}
	var worst float64
	for y := 0; y < 32; y++ {
		for x := 0; x < 64; x++ {
			r, g, b, _ := got.At(x, y).RGBA()
			want := img.RGBAAt(x, y)
			for _, d := range []float64{float64(r>>8) - float64(want.R), float64(g>>8) - float64(want.G), float64(b>>8) - float64(want.B)} {
				worst = math.Max(worst, math.Abs(d))
			}
		}
	}
	if worst > 12 {
		t.Errorf("worst channel difference %.0f codes after a quality-95 round trip", worst)
	}
}
