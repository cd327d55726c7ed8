package imaging

import (
	"bytes"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"gocv.io/x/gocv"

	"lineshot/imaging/synth"
)

// jpegSamplingFactor is OpenCV's IMWRITE_JPEG_SAMPLING_FACTOR (4.5.5 on;
// gocv v0.32 has no name for it): 0x221111 is 4:2:0, 0x111111 4:4:4.
const jpegSamplingFactor = 7

// jpegKinds writes the same w×h photo as the kinds of JPEG the row decoder
// takes (qualities, 4:2:0, 4:2:2 and 4:4:4 chroma, progressive, restart
// markers, grey, an upright Exif block) into a fresh folder.
func jpegKinds(t *testing.T, w, h int) []string {
	t.Helper()
	dir := t.TempDir()
	src, _ := writeJPEG(t, synth.Params{Width: w, Height: h, TiltDeg: 2, Seed: 3, Emissions: mercury}, 90)
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
	return names
}

// TestDecodeRowsAsImread: the row decoder gives imread's frame byte for
// byte (baseline, progressive, grey, odd sizes, 4:4:4 and 4:2:0 chroma),
// and leaves what it does not take (a photo to be turned) to imread.
func TestDecodeRowsAsImread(t *testing.T) {
	for _, p := range jpegKinds(t, 1001, 1283) {
		want := imread(p)
		var stripes [][2]int
		got, ok, err := decodeRows(p, func(m gocv.Mat) (func(y0, y1 int), func()) {
			return func(y0, y1 int) { stripes = append(stripes, [2]int{y0, y1}) }, nil
		}, nil)
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
		m, ok, err := decodeRows(p, nil, nil)
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
			m, small, _, _, err := decodeAndReduce(src, "jpeg", workers, nil)
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
		if m, ok, err := decodeRows(p, nil, nil); err == nil && ok {
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

// sentinelFrame is a w×h 8-bit BGR Mat filled with a byte no test photo's
// rows are made of throughout, to tell rows written from rows left alone.
func sentinelFrame(t *testing.T, w, h int) (gocv.Mat, []uint8) {
	t.Helper()
	m, err := newMatUnset(h, w, gocv.MatTypeCV8UC3, true)
	if err != nil {
		t.Fatal(err)
	}
	px, _ := m.DataPtrUint8()
	for i := range px {
		px[i] = 0xA5
	}
	return m, px
}

// untouchedRow reports whether row y of px (rows of stride bytes) still
// holds only the sentinel.
func untouchedRow(px []uint8, stride, y int) bool {
	for _, b := range px[y*stride : (y+1)*stride] {
		if b != 0xA5 {
			return false
		}
	}
	return true
}

// TestRowsIntoAsWhole: rows decoded alone (libjpeg passing over the rows
// above, decodeRowsInto) and rows decoded ahead (rowsAhead, steered by its
// first request) are imread's rows byte for byte, for every kind of JPEG
// the row decoder takes (rowsAhead declines a progressive one), at row
// ranges that start and end inside a block row; no other row is written
// by decodeRowsInto, and rowsAhead writes a row only as imread's.
func TestRowsIntoAsWhole(t *testing.T) {
	const w, h = 1001, 1283
	for _, p := range jpegKinds(t, w, h) {
		name := filepath.Base(p)
		want := imread(p)
		wb, _ := want.DataPtrUint8()
		stride := 3 * w
		for _, r := range [][2]int{{0, 1}, {0, 40}, {15, 17}, {301, 777}, {1000, h}, {h - 1, h}} {
			m, px := sentinelFrame(t, w, h)
			if err := decodeRowsInto(p, m, r[0], r[1]); err != nil {
				t.Fatalf("%s rows %v: %v", name, r, err)
			}
			for y := 0; y < h; y++ {
				inside := y >= r[0] && y < r[1]
				if inside && !bytes.Equal(px[y*stride:(y+1)*stride], wb[y*stride:(y+1)*stride]) {
					t.Fatalf("%s rows %v: row %d differs from imread's", name, r, y)
				}
				if !inside && !untouchedRow(px, stride, y) {
					t.Fatalf("%s rows %v: row %d was written", name, r, y)
				}
			}
			m.Close()
		}
		for _, r := range [][2]int{{1100, 1200}, {3, 90}, {700, h}} {
			m, px := sentinelFrame(t, w, h)
			a := decodeAhead(p, m)
			got := a.get(r[0], r[1])
			// (A progressive JPEG is declined: band first leaves it whole.)
			if progressive := name == "progressive.jpg"; got == progressive {
				t.Fatalf("%s: rows %v decoded ahead: %v", name, r, got)
			}
			a.stop()
			// A second request is refused, even for rows the decoder made:
			// by then the caller may have given them back.
			if a.get(r[0], r[1]) {
				t.Fatalf("%s: rows %v served twice", name, r)
			}
			for y := 0; y < h; y++ {
				same := bytes.Equal(px[y*stride:(y+1)*stride], wb[y*stride:(y+1)*stride])
				if got && y >= r[0] && y < r[1] && !same || !same && !untouchedRow(px, stride, y) {
					t.Fatalf("%s ahead, rows %v: row %d neither imread's nor left alone", name, r, y)
				}
			}
			m.Close()
		}
		want.Close()
	}
	// Stopped before any request: it ends (a 12 MP frame takes longer to
	// decode than the test to stop it), a request after does not wait,
	// and what was written is imread's.
	p, _ := writeJPEG(t, synth.Params{Width: 4032, Height: 3024, Seed: 8, Emissions: mercury}, 90)
	want := imread(p)
	defer want.Close()
	wb, _ := want.DataPtrUint8()
	m, px := sentinelFrame(t, 4032, 3024)
	defer m.Close()
	a := decodeAhead(p, m)
	a.stop()
	got := a.get(2900, 3024)
	for y := 0; y < 3024; y++ {
		row := px[y*3*4032 : (y+1)*3*4032]
		if !bytes.Equal(row, wb[y*3*4032:(y+1)*3*4032]) && (!untouchedRow(px, 3*4032, y) || got && y >= 2900) {
			t.Fatalf("stopped decoder: row %d neither imread's nor left alone (rows claimed %v)", y, got)
		}
	}
}

// TestDecodeReduced: libjpeg's DCT scaling gives the band search a frame
// close to the block averages of the whole decode (the mean difference
// under 0.6 codes for every kind of JPEG; at most a code for a grey one,
// whose pixels no chroma upsampling touches; colour differs more at sharp
// coloured edges), of ⌊w/k⌋ × ⌊h/k⌋ whole blocks, also where k does not
// divide a side; and declines progressive JPEGs and factors DCT scaling
// does not make.
func TestDecodeReduced(t *testing.T) {
	for _, size := range [][2]int{{1024, 768}, {1001, 1283}} {
		w, h := size[0], size[1]
		for _, p := range jpegKinds(t, w, h) {
			name := fmt.Sprintf("%dx%d %s", w, h, filepath.Base(p))
			if filepath.Base(p) == "progressive.jpg" {
				if small, _, _, ok, err := decodeReduced(p, 4, nil); ok || err != nil {
					small.Close()
					t.Errorf("%s: ok %v, %v; want declined", name, ok, err)
				}
				continue
			}
			whole := imread(p)
			fb, _ := whole.DataPtrUint8()
			for _, k := range []int{2, 4, 8} {
				small, gw, gh, ok, err := decodeReduced(p, k, nil)
				if err != nil || !ok || gw != w || gh != h || small.Cols() != w/k || small.Rows() != h/k {
					t.Fatalf("%s, k %d: ok %v, %v, frame %dx%d, reduced %dx%d", name, k, ok, err, gw, gh, small.Cols(), small.Rows())
				}
				sb, _ := small.DataPtrUint8()
				sw := w / k
				worst, sum := 0.0, 0.0
				for y := 0; y < h/k; y++ {
					for x := 0; x < sw; x++ {
						for c := 0; c < 3; c++ {
							s := 0
							for dy := 0; dy < k; dy++ {
								for dx := 0; dx < k; dx++ {
									s += int(fb[3*((y*k+dy)*w+x*k+dx)+c])
								}
							}
							d := math.Abs(float64(sb[3*(y*sw+x)+c]) - float64(s)/float64(k*k))
							worst, sum = math.Max(worst, d), sum+d
						}
					}
				}
				mean := sum / float64(3*sw*(h/k))
				if mean > 0.6 || filepath.Base(p) == "grey.jpg" && worst > 1 {
					t.Errorf("%s, k %d: %.3f codes from the block averages on average, %.2f at worst", name, k, mean, worst)
				}
				small.Close()
			}
			whole.Close()
		}
	}
	p := jpegKinds(t, 1024, 768)[0]
	for _, k := range []int{1, 3, 5} {
		if small, _, _, ok, err := decodeReduced(p, k, nil); ok || err != nil {
			small.Close()
			t.Errorf("k %d: ok %v, %v; want declined", k, ok, err)
		}
	}
}

// fillParts splits rows so that each part's cost (its start·r for the
// rows passed over, plus its length) is the same, within a row or so, and
// the parts cover the rows in order.
func TestFillParts(t *testing.T) {
	for _, c := range []struct {
		y0, y1, n int
		r         float64
	}{{1065, 1960, 2, 0.4}, {0, 3024, 2, 0.4}, {0, 100, 3, 0.5}, {2000, 3000, 4, 0.3}, {10, 11, 2, 0.4}, {5, 50, 0, 0.4}} {
		b := fillParts(c.y0, c.y1, c.n, c.r)
		want := max(1, min(c.n, c.y1-c.y0))
		if len(b) != want+1 || b[0] != c.y0 || b[len(b)-1] != c.y1 {
			t.Fatalf("%+v: bounds %v", c, b)
		}
		lo, hi := math.Inf(1), math.Inf(-1)
		for i := 0; i+1 < len(b); i++ {
			if b[i+1] <= b[i] {
				t.Fatalf("%+v: bounds %v not increasing", c, b)
			}
			cost := float64(b[i])*c.r + float64(b[i+1]-b[i])
			lo, hi = math.Min(lo, cost), math.Max(hi, cost)
		}
		if hi-lo > 1.5 {
			t.Errorf("%+v: bounds %v, costs from %.1f to %.1f", c, b, lo, hi)
		}
	}
}

// A JPEG whose data was damaged in the middle (zeros over part of it, as a
// failed copy leaves) still ends with its end marker, and libjpeg decodes
// past the damage, as imread does, without a word: the measurement now
// says so, in the strip's warnings or in its error, for a photo decoded
// whole (one worker and two) and one decoded band first; a sound photo
// carries no such line, nor one padded between two segments.
func TestDamagedJPEGSaysSo(t *testing.T) {
	for _, p := range []synth.Params{
		{Width: 1920, Height: 1080, TiltDeg: 2, Seed: 71, Emissions: mercury},
		{Width: 4032, Height: 3024, TiltDeg: 2, Seed: 72, Emissions: mercury},
	} {
		sound, _ := writeJPEG(t, p, 90)
		raw, err := os.ReadFile(sound)
		if err != nil {
			t.Fatal(err)
		}
		for i := len(raw) / 2; i < len(raw)/2+len(raw)/100; i++ {
			raw[i] = 0
		}
		damaged := filepath.Join(t.TempDir(), "damaged.jpg")
		if err := os.WriteFile(damaged, raw, 0o644); err != nil {
			t.Fatal(err)
		}
		// Padding between segments, as some cameras write: libjpeg warns
		// of extraneous bytes before the next marker (here the start of
		// the scan), and every pixel is as it was.
		good, _ := os.ReadFile(sound)
		sos := bytes.Index(good, []byte{0xff, 0xda})
		if sos < 0 {
			t.Fatal("no start of scan")
		}
		padded := filepath.Join(t.TempDir(), "padded.jpg")
		if err := os.WriteFile(padded, slices.Concat(good[:sos], make([]byte, 16), good[sos:]), 0o644); err != nil {
			t.Fatal(err)
		}
		for _, workers := range []int{1, 2} {
			for _, f := range []string{sound, padded} {
				s, err := Extract(f, Options{Workers: workers})
				if err != nil || s.Damage != "" {
					t.Errorf("%dx%d %s, %d workers: %v, damage %q", p.Width, p.Height, filepath.Base(f), workers, err, s.Damage)
				}
			}
			s, err := Extract(damaged, Options{Workers: workers})
			said := err != nil && strings.Contains(err.Error(), "JPEG data is damaged") ||
				err == nil && strings.Contains(s.Damage, "JPEG data is damaged") && slices.Contains(s.Warnings, s.Damage)
			if !said {
				t.Errorf("%dx%d damaged, %d workers: %v, damage %q", p.Width, p.Height, workers, err, s.Damage)
			}
		}
	}
}
