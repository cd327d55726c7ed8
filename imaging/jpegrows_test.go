package imaging

import (
	"bytes"
	"math"
	"os"
	"path/filepath"
	"testing"

	"gocv.io/x/gocv"

	"lineshot/imaging/synth"
)

// jpegSamplingFactor is OpenCV's IMWRITE_JPEG_SAMPLING_FACTOR (4.5.5 on;
// gocv v0.32 has no name for it): 0x221111 is 4:2:0, 0x111111 4:4:4.
const jpegSamplingFactor = 7

// TestDecodeRowsAsImread: the row decoder gives imread's frame byte for
// byte (baseline, progressive, grey, odd sizes, 4:4:4 and 4:2:0 chroma),
// and leaves what it does not take (a photo to be turned) to imread.
func TestDecodeRowsAsImread(t *testing.T) {
	dir := t.TempDir()
	src, _ := writeJPEG(t, synth.Params{Width: 1001, Height: 1283, TiltDeg: 2, Seed: 3, Emissions: mercury}, 90)
	img := gocv.IMRead(src, gocv.IMReadColor)
	defer img.Close()
	cases := map[string][]int{
		"q90.jpg":         {gocv.IMWriteJpegQuality, 90},
		"q75-420.jpg":     {gocv.IMWriteJpegQuality, 75, jpegSamplingFactor, 0x221111},
		"q95-444.jpg":     {gocv.IMWriteJpegQuality, 95, jpegSamplingFactor, 0x111111},
		"q80-422.jpg":     {gocv.IMWriteJpegQuality, 80, jpegSamplingFactor, 0x211111},
		"progressive.jpg": {gocv.IMWriteJpegQuality, 85, gocv.IMWriteJpegProgressive, 1},
		"restarts.jpg":    {gocv.IMWriteJpegQuality, 85, gocv.IMWriteJpegRstInterval, 4},
	}
	for name, params := range cases {
		p := filepath.Join(dir, name)
		if !gocv.IMWriteWithParams(p, img, params) {
			t.Fatalf("%s: cannot write", name)
		}
	}
	grey := gocv.NewMat()
	defer grey.Close()
	gocv.CvtColor(img, &grey, gocv.ColorBGRToGray)
	if !gocv.IMWrite(filepath.Join(dir, "grey.jpg"), grey) {
		t.Fatal("grey: cannot write")
	}
	// Exif orientation 1 (upright) is taken as it is.
	raw, err := os.ReadFile(filepath.Join(dir, "q90.jpg"))
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(dir, "exif-upright.jpg"), withOrientation(raw, 1), 0o644); err != nil {
		t.Fatal(err)
	}
	names, _ := filepath.Glob(filepath.Join(dir, "*.jpg"))
	if len(names) != len(cases)+2 {
		t.Fatalf("%d test photos", len(names))
	}
	for _, p := range names {
		want := imread(p)
		var stripes [][2]int
		got, ok, err := decodeRows(p, func(m gocv.Mat) (func(y0, y1 int), func()) {
			return func(y0, y1 int) { stripes = append(stripes, [2]int{y0, y1}) }, nil
		})
		if err != nil || !ok {
			t.Fatalf("%s: ok %v, %v", filepath.Base(p), ok, err)
		}
		a, _ := want.DataPtrUint8()
		b, _ := got.DataPtrUint8()
		if got.Cols() != want.Cols() || got.Rows() != want.Rows() || !bytes.Equal(a, b) {
			t.Errorf("%s: %dx%d, differs from imread's %dx%d", filepath.Base(p), got.Cols(), got.Rows(), want.Cols(), want.Rows())
		}
		if len(stripes) != 3 || stripes[0] != [2]int{0, 512} || stripes[2] != [2]int{1024, 1283} {
			t.Errorf("%s: stripes %v", filepath.Base(p), stripes)
		}
		want.Close()
		got.Close()
	}
}

// TestDecodeRowsLeavesTurnedPhotos: a photo whose Exif block asks for
// turning (or cannot be read) goes to imread, which turns it.
func TestDecodeRowsLeavesTurnedPhotos(t *testing.T) {
	dir := t.TempDir()
	src, _ := writeJPEG(t, synth.Params{Width: 320, Height: 200, Seed: 4, Emissions: mercury}, 90)
	raw, err := os.ReadFile(src)
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name   string
		orient byte
		cut    bool
		takes  bool
	}{{"upright", 1, false, true}, {"turned", 6, false, false}, {"mirrored", 2, false, false}, {"unreadable", 1, true, false}} {
		p := filepath.Join(dir, c.name+".jpg")
		b := withOrientation(raw, c.orient)
		if c.cut {
			b[2+19] = 9 // the directory claims nine entries; the block holds one
		}
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
		m, ok, err := decodeRows(p, nil)
		if err != nil || ok != c.takes {
			t.Errorf("%s: ok %v (want %v), %v", c.name, ok, c.takes, err)
		}
		if ok {
			m.Close()
		}
		w, h, err := Decode(p)
		want := [2]int{320, 200}
		if c.orient == 6 {
			want = [2]int{200, 320} // imread turned it
		}
		if err != nil || [2]int{w, h} != want {
			t.Errorf("%s: Decode %dx%d, %v; want %v", c.name, w, h, err, want)
		}
	}
}

// TestDecodeAndReduce: the reduction made stripe by stripe beside the
// decode (with two workers; with one the caller reduces) is reduceArea's of the whole
// decoded frame, byte for byte, and within one code of each k×k block's
// mean computed here; a frame whose reduction cannot go by stripes
// (4096×1038: 1038 is not a multiple of 4) is left to the caller.
func TestDecodeAndReduce(t *testing.T) {
	for _, size := range [][2]int{{4096, 1040}, {2048, 1536}, {4096, 1038}} {
		src, _ := writeJPEG(t, synth.Params{Width: size[0], Height: size[1], TiltDeg: 1, Seed: 6, Emissions: mercury}, 85)
		whole := imread(src)
		k, sw, sh := searchReduction(size[0], size[1])
		want, err := reduceArea(whole, k, sw, sh)
		if err != nil {
			t.Fatal(err)
		}
		wb, _ := want.DataPtrUint8()
		if byStripes(k, sw, sh, size[0], size[1]) {
			fb, _ := whole.DataPtrUint8()
			worst := 0.0
			for y := 0; y < sh; y++ {
				for x := 0; x < sw; x++ {
					for c := 0; c < 3; c++ {
						sum := 0
						for dy := 0; dy < k; dy++ {
							for dx := 0; dx < k; dx++ {
								sum += int(fb[3*((y*k+dy)*size[0]+x*k+dx)+c])
							}
						}
						worst = math.Max(worst, math.Abs(float64(wb[3*(y*sw+x)+c])-float64(sum)/float64(k*k)))
					}
				}
			}
			if worst > 1 {
				t.Errorf("%v: a reduced pixel %.2f codes from its block's mean", size, worst)
			}
		}
		for _, workers := range []int{1, 2} {
			m, small, _, _, err := decodeAndReduce(src, "jpeg", workers)
			if err != nil {
				t.Fatal(err)
			}
			if (workers > 1 && byStripes(k, sw, sh, size[0], size[1])) != (small != nil) {
				t.Errorf("%v, %d workers: reduced %v", size, workers, small != nil)
			}
			if small != nil {
				gb, _ := small.DataPtrUint8()
				if small.Cols() != sw || small.Rows() != sh || !bytes.Equal(gb, wb) {
					t.Errorf("%v, %d workers: the reduction differs from reduceArea's", size, workers)
				}
				small.Close()
			}
			m.Close()
		}
		want.Close()
		whole.Close()
	}
}

// TestDecodeRowsDamagedExif: every byte of an Exif block set to values
// that break its counts and offsets, one at a time, and a directory that
// claims more entries than the block holds: the row decoder reads no
// further than the block (test.sh runs this under -asan, which fails on a
// read past it: checked with a count check loosened by 40), takes the
// photo or leaves it to imread, and Decode still decodes it.
func TestDecodeRowsDamagedExif(t *testing.T) {
	img, _, err := synth.Render(synth.Params{Width: 64, Height: 48, Emissions: mercury, NoNoise: true})
	if err != nil {
		t.Fatal(err)
	}
	m, err := gocv.ImageToMatRGB(img)
	if err != nil {
		t.Fatal(err)
	}
	defer m.Close()
	buf, err := gocv.IMEncode(gocv.JPEGFileExt, m)
	if err != nil {
		t.Fatal(err)
	}
	raw := withOrientation(append([]byte(nil), buf.GetBytes()...), 1)
	buf.Close()
	p := filepath.Join(t.TempDir(), "photo.jpg")
	const seg = 2 + 2 + 6 + 8 + 2 + 12 + 4                      // marker, length, "Exif\0\0", TIFF header, count, one entry, next
	const count, tag = 2 + 4 + 6 + 8 + 1, 2 + 4 + 6 + 8 + 2 + 1 // low bytes (big-endian)
	type change struct{ at, to int }
	var changes [][]change
	for i := 2 + 4; i < 2+seg; i++ {
		for _, v := range []int{0x00, 0x01, 0x02, 0x7f, 0xfe, 0xff} {
			changes = append(changes, []change{{i, v}})
		}
	}
	// The one entry no longer the orientation, and the directory claiming
	// more entries than the block holds: a reader trusting the count
	// reads past the block.
	for n := 2; n <= 48; n++ {
		changes = append(changes, []change{{tag, 0x13}, {count, n}})
	}
	for _, ch := range changes {
		b := append([]byte(nil), raw...)
		for _, c := range ch {
			b[c.at] = byte(c.to)
		}
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
		if m, ok, err := decodeRows(p, nil); err == nil && ok {
			if m.Cols() != 64 || m.Rows() != 48 {
				t.Errorf("%v: %dx%d", ch, m.Cols(), m.Rows())
			}
			m.Close()
		}
		if w, h, err := Decode(p); err != nil || w*h != 64*48 {
			t.Errorf("%v: Decode %dx%d, %v", ch, w, h, err)
		}
	}
}
