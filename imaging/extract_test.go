package imaging

import (
	"bytes"
	"errors"
	"image"
	"image/color"
	"image/draw"
	"image/jpeg"
	"image/png"
	"io"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"sync"
	"testing"

	"gocv.io/x/gocv"

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
	f.Add(withOrientation(buf.Bytes(), 1)) // the row decoder's Exif reading
	f.Add(withOrientation(buf.Bytes(), 6))
	f.Add([]byte("\xff\xd8\xff\xe0 not really"))
	f.Add([]byte("\x89PNG\r\n\x1a\n"))
	// testdata/fuzz/FuzzExtractBytes holds a HEIC seed (this photo
	// through WriteHEIC, quality 50) and its first half: libheif's
	// container reading and HEVC decoding. Kept as files, so that the
	// fuzzing processes never load the HEVC encoder.
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

// The kept image (Strip.Image) is for people to check the measurement by
// eye, so it must show each line where the profile has it and in its own
// colour: on a synthetic mercury photo (truth from the simulator), at full
// width and shrunk by 1.2 (bilinear) and by 2.4 (area averaging), every
// strong line's column in the image holds the brightest pixel of its
// neighbourhood, within a pixel of where the strip puts it; the green line
// (546 nm) is green, the blue one (436 nm) blue, the yellow pair neither
// blue nor dim (the strongest line's core is not clipped to white); and the
// brightest samples reach white.
func TestKeptImageShowsTheLines(t *testing.T) {
	p := synth.Params{Width: 1920, Height: 1080, LinesPerMM: 600, TiltDeg: 4, Seed: 5, Emissions: mercury}
	path, tr := writeJPEG(t, p, 92)
	for _, maxW := range []int{0, 1600, 800} {
		s, err := Extract(path, Options{KeepImage: true, ImageMaxWidth: maxW})
		if err != nil {
			t.Fatal(err)
		}
		img := s.Image
		if img == nil {
			t.Fatalf("max width %d: no image kept", maxW)
		}
		W, H := img.Bounds().Dx(), img.Bounds().Dy()
		L := len(s.Profile)
		if maxW > 0 && W != maxW || maxW == 0 && W != L {
			t.Fatalf("max width %d: image %d px wide for a %d-sample strip", maxW, W, L)
		}
		sn, cs := math.Sincos(s.AngleDeg * math.Pi / 180)
		row := H / 2
		px := func(x int) (r, g, b int) {
			c := img.RGBAAt(x, row)
			return int(c.R), int(c.G), int(c.B)
		}
		var top uint8
		for _, v := range img.Pix {
			top = max(top, v)
		}
		if top < 250 {
			t.Errorf("max width %d: brightest code %d; the white point is not reached", maxW, top)
		}
		for _, l := range tr.Lines {
			if l.NM < 400 || (l.NM > 410 && l.NM < 430) || (l.NM > 440 && l.NM < 540) {
				continue // the weak lines
			}
			// The line's place along the strip, then in the image's columns.
			u := (l.X-s.Origin[0])*cs + (l.Y-s.Origin[1])*sn
			c := (u+0.5)*float64(W)/float64(L) - 0.5
			ci := int(math.Round(c))
			// Within half the way to the next line (the yellow pair lies
			// a few columns apart in the smallest image).
			reach := 4
			for _, o := range tr.Lines {
				uo := (o.X-s.Origin[0])*cs + (o.Y-s.Origin[1])*sn
				if d := math.Abs(uo-u) * float64(W) / float64(L); o.NM != l.NM && d < 9 {
					reach = min(reach, int(d/2))
				}
			}
			best, bv := -1, -1
			for x := max(0, ci-reach); x <= min(W-1, ci+reach); x++ {
				r, g, b := px(x)
				if v := r + g + b; v > bv {
					best, bv = x, v
				}
			}
			if math.Abs(float64(best)-c) > 1.01 {
				t.Errorf("max width %d: %.1f nm expected at column %.2f, brightest at %d", maxW, l.NM, c, best)
			}
			r, g, b := px(best)
			switch {
			case l.NM > 540 && l.NM < 550 && !(g > r+40 && g > b+40):
				t.Errorf("max width %d: the green line shows as (%d, %d, %d)", maxW, r, g, b)
			case l.NM > 430 && l.NM < 440 && !(b > r && b > g):
				t.Errorf("max width %d: the blue line shows as (%d, %d, %d)", maxW, r, g, b)
			case l.NM > 570 && !(r > b && g > b && r+g > 150):
				t.Errorf("max width %d: the yellow line %.1f nm shows as (%d, %d, %d)", maxW, l.NM, r, g, b)
			}
		}
	}
}

// reduceArea's halvings agree with OpenCV's one-step area reduction to
// within one code on a noisy random frame (each halving rounds), for
// factors 2, 4 and 8, and exactly with the whole frame halved k times
// (they go in stripes of rows); a size the factor does not divide takes
// the one-step path and agrees exactly.
func TestReduceAreaHalvings(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for _, c := range []struct{ w, h, k int }{{640, 480, 2}, {1024, 768, 4}, {2048, 1536, 8}, {1030, 770, 4}, {1000, 1004, 4}} {
		img := image.NewRGBA(image.Rect(0, 0, c.w, c.h))
		for i := range img.Pix {
			img.Pix[i] = uint8(rng.IntN(256))
		}
		m, err := gocv.ImageToMatRGB(img)
		if err != nil {
			t.Fatal(err)
		}
		sw, sh := c.w/c.k, c.h/c.k
		got, err := reduceArea(m, c.k, sw, sh)
		if err != nil {
			t.Fatal(err)
		}
		want := gocv.NewMat()
		gocv.Resize(m, &want, image.Pt(sw, sh), 0, 0, gocv.InterpolationArea)
		if got.Cols() != sw || got.Rows() != sh {
			t.Fatalf("%dx%d by %d: %dx%d, want %dx%d", c.w, c.h, c.k, got.Cols(), got.Rows(), sw, sh)
		}
		g, _ := got.DataPtrUint8()
		w, _ := want.DataPtrUint8()
		worst := 0
		for i := range w {
			worst = max(worst, abs(int(g[i])-int(w[i])))
		}
		exact := c.w%c.k != 0 || c.h%c.k != 0
		if worst > 1 || exact && worst != 0 {
			t.Errorf("%dx%d by %d: differs from the one-step reduction by up to %d codes", c.w, c.h, c.k, worst)
		}
		if !exact {
			// Halved in stripes: exactly the whole frame halved k times.
			whole := m.Clone()
			for f := c.k; f > 1; f /= 2 {
				next := gocv.NewMat()
				gocv.Resize(whole, &next, image.Pt(whole.Cols()/2, whole.Rows()/2), 0, 0, gocv.InterpolationArea)
				whole.Close()
				whole = next
			}
			h, _ := whole.DataPtrUint8()
			for i := range h {
				if g[i] != h[i] {
					t.Errorf("%dx%d by %d: sample %d is %d, the whole frame halved gives %d", c.w, c.h, c.k, i, g[i], h[i])
					break
				}
			}
			whole.Close()
		}
		m.Close()
		got.Close()
		want.Close()
	}
}

// The region buffers live in C memory (matPool): one not given back stays
// allocated for the life of the process, so every path through an
// extraction must return each one. After a plain photo, a saturated one
// (the colour path), a lit bench, several bands, an averaged stack with a
// dark frame, a photo with no band and a 16-bit frame, nothing is out.
func TestPoolBuffersComeBack(t *testing.T) {
	plain := synth.Params{Width: 1280, Height: 720, LinesPerMM: 600, TiltDeg: 3, Seed: 21, Emissions: mercury}
	over := plain
	over.PeakLevel, over.Seed = 6, 22
	lit := plain
	lit.Seed, lit.Glows = 23, []synth.Glow{{X: 600, Y: 250, SigmaPX: 120, Level: 0.12}}
	two := plain
	two.Seed, two.Stacked = 24, []synth.StackedLamp{{Emissions: hydrogen, OffsetPX: 160}}
	dark := plain
	dark.Seed, dark.PeakLevel = 25, 1e-9 // the lamp off
	check := func(what string) {
		t.Helper()
		if n, m := f32Pool.outstanding(), u8Pool.outstanding(); n != 0 || m != 0 {
			t.Errorf("after %s: %d float and %d byte buffers not given back", what, n, m)
		}
	}
	for name, p := range map[string]synth.Params{"a plain photo": plain, "a saturated photo": over, "a lit bench": lit} {
		path, _ := writeJPEG(t, p, 92)
		s, err := Extract(path, Options{})
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		if name == "a saturated photo" && s.Saturated == 0 {
			t.Errorf("%s: nothing saturated, the colour path was not taken", name)
		}
		if name == "a lit bench" && !s.StrayLight {
			t.Errorf("%s: not taken for a lit bench", name)
		}
		check(name)
	}
	path, _ := writeJPEG(t, two, 92)
	if ss, err := ExtractBands(path, Options{}); err != nil || len(ss) != 2 {
		t.Fatalf("two bands: %d strips, %v", len(ss), err)
	}
	check("two bands")
	img, _, err := synth.Render(plain)
	if err != nil {
		t.Fatal(err)
	}
	png16 := writeImageFile(t, "deep.png", func(w io.Writer) error { return png.Encode(w, deep(img)) })
	if _, err := Extract(png16, Options{}); err != nil {
		t.Fatalf("16-bit: %v", err)
	}
	check("a 16-bit frame")
	a, _ := writeJPEG(t, plain, 92)
	d, _ := writeJPEG(t, dark, 92)
	if _, err := ExtractStack(Stack{Frames: []string{a, a}, Dark: []string{d}}, Options{}); err != nil {
		t.Fatalf("stack: %v", err)
	}
	check("a stack with a dark frame")
	if _, err := Extract(d, Options{}); err == nil {
		t.Fatal("a photo of the lamp off gave a band")
	}
	check("a photo with no band")
}

// The pools hand out buffers with whatever they held (and fresh ones as
// allocated, not cleared): an extraction must read nothing it did not
// write. With every spare buffer of both pools filled with NaN and 0xff
// bytes, the same photos give the same strips to the last bit.
func TestPoolBuffersNeedNoClearing(t *testing.T) {
	plain := synth.Params{Width: 1280, Height: 720, LinesPerMM: 600, TiltDeg: 3, Seed: 31, Emissions: mercury}
	over := plain
	over.PeakLevel, over.Seed = 6, 32
	for _, c := range []struct {
		name string
		p    synth.Params
		opt  Options
	}{{"a plain photo", plain, Options{}}, {"a saturated photo", over, Options{}}, {"a plain photo, summed channels", plain, Options{Profile: ProfileSum}}} {
		name, opt := c.name, c.opt
		path, _ := writeJPEG(t, c.p, 92)
		want, err := Extract(path, opt)
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		f32Pool.mu.Lock()
		for _, m := range f32Pool.free {
			b, _ := m.DataPtrFloat32()
			for i := range b {
				b[i] = float32(math.NaN())
			}
		}
		f32Pool.mu.Unlock()
		u8Pool.mu.Lock()
		for _, m := range u8Pool.free {
			b, _ := m.DataPtrUint8()
			for i := range b {
				b[i] = 0xff
			}
		}
		u8Pool.mu.Unlock()
		if len(f32Pool.free) == 0 {
			t.Fatalf("%s: no spare buffers to fill", name)
		}
		got, err := Extract(path, opt)
		if err != nil {
			t.Fatalf("%s, buffers filled: %v", name, err)
		}
		if !slices.Equal(got.Profile, want.Profile) || got.Saturated != want.Saturated || got.AngleDeg != want.AngleDeg {
			t.Errorf("%s: the strip changed with the buffers' old contents (saturated %g against %g)", name, got.Saturated, want.Saturated)
		}
	}
}

// A Mat too large to allocate is an error, not a crash (OpenCV throws).
func TestNewMatUnsetTooLarge(t *testing.T) {
	m, err := newMatUnset(1<<30, 1<<30, gocv.MatTypeCV8UC3, true)
	if err == nil {
		m.Close()
		t.Fatal("a 3 EB Mat was allocated")
	}
	m, err = newMatUnset(3024, 4032, gocv.MatTypeCV8UC3, true)
	if err != nil || m.Rows() != 3024 || m.Cols() != 4032 || m.Type() != gocv.MatTypeCV8UC3 {
		t.Fatalf("a 12 MP frame: %v", err)
	}
	m.Close()
}

// A pool reuses the smallest spare buffer that holds a request, keeps at
// most maxSpare spares within maxSpareBytes (freeing the largest first),
// and ignores slices it did not hand out.
func TestMatPoolReuseAndBounds(t *testing.T) {
	p := newMatPool[float32](gocv.MatTypeCV32FC1)
	a, b := p.get(1000), p.get(5000)
	a[0], b[0] = 1, 2
	p.put(a)
	p.put(b)
	p.put(make([]float32, 10)) // not the pool's
	if c := p.get(900); &c[0] != &a[0] {
		t.Error("a request for 900 did not get the spare of 1000")
	} else {
		p.put(c)
	}
	if c := p.get(4000); &c[0] != &b[0] {
		t.Error("a request for 4000 did not get the spare of 5000")
	} else {
		p.put(c)
	}
	huge := p.get(maxSpareBytes/4 + 1) // more bytes than spares may hold
	p.put(huge)
	var many [][]float32
	for i := 0; i < maxSpare+3; i++ {
		many = append(many, p.get(100+i))
	}
	for _, s := range many {
		p.put(s)
	}
	bytes := 0
	for _, f := range p.free {
		bytes += 4 * f.Cols()
	}
	if len(p.free) > maxSpare || bytes > maxSpareBytes || p.outstanding() != 0 {
		t.Errorf("%d spares of %d bytes, %d out; at most %d spares, %d bytes", len(p.free), bytes, p.outstanding(), maxSpare, maxSpareBytes)
	}
	for _, f := range p.free {
		if f.Cols() > maxSpareBytes/4 {
			t.Error("the oversized buffer was kept")
		}
	}
}

// medMADFew gives exactly what two selections give (the median, then the
// median of the absolute deviations from it), for every count a strip
// column can have and with ties (values on a coarse grid).
func TestMedMADFewMatchesSelection(t *testing.T) {
	rng := rand.New(rand.NewPCG(4, 4))
	for trial := 0; trial < 3000; trial++ {
		n := 1 + trial%30
		v := make([]float64, n)
		for i := range v {
			if trial%3 == 0 {
				v[i] = float64(rng.IntN(5)) / 4 // many ties
			} else {
				v[i] = rng.NormFloat64()
			}
		}
		w := append([]float64(nil), v...)
		med := peaks.MedianInPlace(w)
		for i := range w {
			w[i] = math.Abs(w[i] - med)
		}
		mad := peaks.MedianInPlace(w)
		gm, gd := medMADFew(append([]float64(nil), v...))
		if gm != med || gd != mad {
			t.Fatalf("%v: medMADFew %v, %v; selections %v, %v", v, gm, gd, med, mad)
		}
	}
}

// The process keeps one malloc arena however many threads allocate (the
// constructor in threads.cpp): photos measured side by side, as a batch
// does, would otherwise each leave freed memory in their thread's arena.
func TestOneMallocArena(t *testing.T) {
	path, _ := writeJPEG(t, synth.Params{Width: 1200, Height: 800, TiltDeg: 1, Seed: 3, Emissions: mercury}, 90)
	var wg sync.WaitGroup
	for range 4 {
		wg.Go(func() {
			for range 3 {
				if _, err := Extract(path, Options{Workers: 2}); err != nil {
					t.Error(err)
				}
			}
		})
	}
	wg.Wait()
	if n := mallocArenas(); n != 1 {
		t.Fatalf("%d malloc arenas after photos measured side by side, want 1", n)
	}
}

// crossBandRegion measures a band at any direction, nearly level ones
// included (where the columns a row's band coordinate allows run past
// int's range before they are clamped): a band of rows 40-59 across a
// region, at angles down to 1e-16°.
func TestCrossBandRegionNearlyLevel(t *testing.T) {
	const w, h = 400, 100
	p := plane{w: w, h: h, pix: make([]float32, w*h)}
	for y := 40; y < 60; y++ {
		for x := 0; x < w; x++ {
			p.pix[y*w+x] = 1
		}
	}
	for _, ang := range []float64{0, 1e-16, -1e-16, 1e-9, 0.01} {
		vc, hh, ok := crossBandRegion(p, image.Rect(0, 0, w, h), ang, 0, 50, 40, true, 2)
		if !ok || math.Abs(vc-49.5) > 0.6 || math.Abs(hh-10) > 1.5 {
			t.Errorf("angle %g°: centre %.2f, half-height %.2f, ok %v; want about 49.5 and 10", ang, vc, hh, ok)
		}
	}
}

// Giving back the rows far from the band changes nothing: Extract with
// the whole frame decoded (which gives them back, frames of 12 MP) and the
// same decoded frame measured with every row held agree to the last bit,
// for a level band and a tilted one through a barrel-distorting lens
// (bowed).
func TestRowsGivenBackChangeNothing(t *testing.T) {
	for _, p := range []synth.Params{
		{Width: 4032, Height: 3024, TiltDeg: 0, Seed: 31, Emissions: mercury},
		{Width: 4032, Height: 3024, TiltDeg: 5, Seed: 33, Emissions: mercury, RadialK1: -0.08},
	} {
		path, _ := writeJPEG(t, p, 92)
		got, err := Extract(path, Options{wholeFrame: true})
		if err != nil {
			t.Fatal(err)
		}
		m := gocv.IMRead(path, gocv.IMReadColor|gocv.IMReadAnyDepth)
		want, err := extractMat(m, Options{}.withProfile(true)) // as Extract chooses for a JPEG
		m.Close()
		if err != nil {
			t.Fatal(err)
		}
		if len(got.Profile) != len(want.Profile) || got.AngleDeg != want.AngleDeg || got.Bow != want.Bow {
			t.Fatalf("tilt %g°: %d samples at %v° bow %+v; all rows held: %d at %v° bow %+v", p.TiltDeg, len(got.Profile), got.AngleDeg, got.Bow, len(want.Profile), want.AngleDeg, want.Bow)
		}
		for i := range got.Profile {
			if got.Profile[i] != want.Profile[i] {
				t.Fatalf("tilt %g°: profile sample %d is %v, %v with all rows held", p.TiltDeg, i, got.Profile[i], want.Profile[i])
			}
		}
	}
}

// A step that needs rows the frame gave back gets them by decoding the
// photo again: the rows read as a fresh decode's, and are held for good.
func TestFrameNeedDecodesAgain(t *testing.T) {
	path, _ := writeJPEG(t, synth.Params{Width: 4032, Height: 3024, TiltDeg: 1, Seed: 34, Emissions: mercury}, 90)
	load := func() gocv.Mat { return gocv.IMRead(path, gocv.IMReadColor) }
	ref := load()
	defer ref.Close()
	want, _ := ref.DataPtrUint8()
	m := load()
	defer m.Close()
	f, err := newFrame(m)
	if err != nil {
		t.Fatal(err)
	}
	f.reload = func() (gocv.Mat, error) { return load(), nil }
	defer f.release()
	f.keepRows(400, 500)
	row := 3 * f.w
	if f.kept != [2]int{400, 500} {
		t.Fatalf("kept %v, want [400 500] (a 12 MP frame is above mmapCeiling)", f.kept)
	}
	zero := true
	for _, b := range f.bytes8[100*row : 101*row] {
		zero = zero && b == 0
	}
	if !zero {
		t.Error("row 100 still holds its pixels after rows outside 400-500 were given back")
	}
	if err := f.need(410, 490); err != nil || f.reloaded {
		t.Fatalf("rows held: need gave %v, decoded again %v", err, f.reloaded)
	}
	if err := f.need(90, 120); err != nil {
		t.Fatal(err)
	}
	if !f.reloaded || f.kept[1] != 0 {
		t.Fatalf("after need(90, 120): decoded again %v, kept %v", f.reloaded, f.kept)
	}
	for i := 90 * row; i < 120*row; i++ {
		if f.bytes8[i] != want[i] {
			t.Fatalf("byte %d is %d after decoding again, %d in a fresh decode", i, f.bytes8[i], want[i])
		}
	}
}

// linearRegion's quick path (8-bit, one channel) makes its clip mask in a
// second pass, only when something is clipped: the mask and the plane are
// the general path's, bit for bit, on a frame with clipped pixels.
func TestLinearRegionClipMask(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 7))
	img := image.NewRGBA(image.Rect(0, 0, 300, 200))
	for i := range img.Pix {
		img.Pix[i] = uint8(rng.IntN(256)) // about 2 % of samples at 250 and up
	}
	m, err := gocv.ImageToMatRGB(img)
	if err != nil {
		t.Fatal(err)
	}
	defer m.Close()
	fr, err := newFrame(m)
	if err != nil {
		t.Fatal(err)
	}
	tables := tablesFor(256, false)
	for _, c := range []struct {
		profile string
		roi     image.Rectangle
	}{{ProfileLuma, image.Rect(17, 23, 281, 190)}, {ProfileLuma, image.Rect(17, 23, 282, 190)}, {ProfileSum, image.Rect(17, 23, 281, 190)}, {ProfileSum, image.Rect(17, 23, 282, 190)}} {
		profile, roi := c.profile, c.roi // an even and an odd width (the quick rows go two pixels a step)
		qp, _, qc := linearRegion(fr, roi, tables, clipCode8, profile, false, 2)
		gp, grgb, gc := linearRegion(fr, roi, tables, clipCode8, profile, true, 2)
		if qc == nil || gc == nil || len(qc) != len(gc) {
			t.Fatalf("%s: clip masks %d and %d long, want both", profile, len(qc), len(gc))
		}
		for i := range gc {
			if qc[i] != gc[i] || qp.pix[i] != gp.pix[i] {
				t.Fatalf("%s: pixel %d: mask %b plane %v, general path %b %v", profile, i, qc[i], qp.pix[i], gc[i], gp.pix[i])
			}
		}
		f32Pool.put(qp.pix)
		f32Pool.put(gp.pix)
		f32Pool.put(grgb)
		u8Pool.put(qc)
		u8Pool.put(gc)
	}
	// One clipped sample, in an odd-width region's last column (each
	// channel in turn): the quick path still makes the mask; none, no mask.
	for ch := 0; ch < 4; ch++ {
		flat := image.NewRGBA(image.Rect(0, 0, 40, 10))
		for i := range flat.Pix {
			flat.Pix[i] = 100
		}
		if ch < 3 {
			flat.Pix[flat.PixOffset(34, 5)+ch] = 255
		}
		fm, err := gocv.ImageToMatRGB(flat)
		if err != nil {
			t.Fatal(err)
		}
		ff, err := newFrame(fm)
		if err != nil {
			t.Fatal(err)
		}
		for _, profile := range []string{ProfileLuma, ProfileSum} {
			qp, _, qc := linearRegion(ff, image.Rect(2, 1, 35, 9), tables, clipCode8, profile, false, 1)
			want := uint8(0)
			if ch < 3 {
				want = 1 << ch // bit 0 R, 1 G, 2 B
			}
			switch {
			case want == 0 && qc != nil:
				t.Errorf("%s: nothing clipped, but a mask", profile)
			case want != 0 && (qc == nil || qc[4*33+32] != want):
				t.Errorf("%s: channel %d clipped at the last column: mask %v", profile, ch, qc)
			}
			f32Pool.put(qp.pix)
			u8Pool.put(qc)
		}
		fm.Close()
	}
}

// encodeStrip's bytes are, per sample, the sRGB code of its linear value
// scaled so that the 99.99th percentile of all samples is white, written
// out directly here (per sample, not through a per-code table): B, G, R in
// the codes become R, G, B, 255 in the image; for 8- and 16-bit codes.
func TestEncodeStripBytes(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 9))
	check := func(name string, codes []int, lut []float32, got *image.RGBA, L, H int) {
		t.Helper()
		sorted := slices.Clone(codes)
		slices.Sort(sorted)
		top := math.Max(float64(lut[sorted[int(0.9999*float64(len(codes)-1))]]), 1e-6)
		tab := srgbTable()
		for i := 0; i < L*H; i++ {
			for k, src := range []int{2, 1, 0} {
				v := int(float64(lut[codes[3*i+src]]) * float64(len(tab)-1) / top)
				want := tab[max(0, min(len(tab)-1, v))]
				if g := got.Pix[4*i+k]; g != want {
					t.Fatalf("%s: pixel %d channel %d: %d, want %d", name, i, k, g, want)
				}
			}
			if got.Pix[4*i+3] != 255 {
				t.Fatalf("%s: pixel %d not opaque", name, i)
			}
		}
	}
	L, H := 97, 13
	c8, c16 := make([]uint8, 3*L*H), make([]uint16, 3*L*H)
	i8, i16 := make([]int, len(c8)), make([]int, len(c16))
	for i := range c8 {
		c8[i] = uint8(rng.IntN(120)) // mostly dim, a few bright
		if rng.IntN(200) == 0 {
			c8[i] = uint8(200 + rng.IntN(56))
		}
		c16[i] = uint16(c8[i])*257 + uint16(rng.IntN(257))
		i8[i], i16[i] = int(c8[i]), int(c16[i])
	}
	lut8, lut16 := linearLUT(256, false), linearLUT(65536, false)
	check("8-bit", i8, lut8, encodeStrip(c8, lut8, L, H), L, H)
	check("16-bit", i16, lut16, encodeStrip(c16, lut16, L, H), L, H)
}

// A band image whose pixels were given back (Strip.ReleaseImage) lends them
// to the next strip's: filled with garbage in between, the next image of
// the same photo is the same picture, drawn into that same buffer; and
// the pool keeps a few buffers at most.
func TestReleasedImagePixels(t *testing.T) {
	path, _ := writeJPEG(t, synth.Params{Width: 960, Height: 540, LinesPerMM: 600, TiltDeg: 2, Seed: 41, Emissions: mercury}, 92)
	opt := Options{KeepImage: true}
	first, err := Extract(path, opt)
	if err != nil || first.Image == nil {
		t.Fatalf("no band image: %v", err)
	}
	want := slices.Clone(first.Image.Pix)
	buf := first.Image.Pix
	for i := range buf {
		buf[i] = 0xab
	}
	first.ReleaseImage()
	if first.Image != nil {
		t.Fatal("ReleaseImage left the image in place")
	}
	again, err := Extract(path, opt)
	if err != nil || again.Image == nil {
		t.Fatalf("no band image the second time: %v", err)
	}
	if &again.Image.Pix[0] != &buf[0] {
		t.Error("the released pixels were not lent to the next image")
	}
	if !slices.Equal(again.Image.Pix, want) {
		t.Error("the image drawn into released pixels differs")
	}
	for range 10 {
		imagePix.put(make([]uint8, 16))
	}
	if n := len(imagePix.free); n > 4 {
		t.Errorf("the pool keeps %d buffers", n)
	}
}

// TestBandFirstAsWholeFrame: the band-first decode (a reduced decode for
// the band search, then only the band's rows at full size) measures a
// 12 MP photo (a 9 MP 16:9 one, whose height the reduction by 4 does not
// divide, and a 16 MP one, searched at a quarter where the whole frame is
// reduced by 5) as well as decoding the whole frame does, with one worker
// and with two (the rows decoded ahead): a level band across the middle in
// the same direction within 0.01° and its lines within 0.02 px of the
// whole frame's along the band; bands above and below the middle, seen by a pitched
// camera (curved, leaning lines), and one under room light sloping across
// the frame, with their lines along the band within checkAlongBand's
// limits of the truth, 0.15 px RMS and 0.4 px worst, as the whole frame's
// are. Each time the frame's background level and σ (slabLevels) within
// 5 % and 20 % of the whole frame's (and 1e-5), its stray light read the
// same, the room light's range within 10 % (and 1e-4). (Both levels are
// whole codes of reduced frames, a code apart at this background: the
// whole 16:9 frame, reduced by a ratio that is not whole, read 0.00992
// where the rest read 0.01033, the simulator's background being 0.01.)
func TestBandFirstAsWholeFrame(t *testing.T) {
	for _, c := range []struct {
		name string
		p    synth.Params
	}{
		{"middle", synth.Params{Width: 4032, Height: 3024, TiltDeg: 3, Seed: 41, Emissions: mercury}},
		{"high", synth.Params{Width: 4032, Height: 3024, LinesPerMM: 1000, TiltDeg: -2, PitchDeg: 10, FocalPX: 3000, Seed: 42, Emissions: hydrogen}},
		{"low", synth.Params{Width: 4032, Height: 3024, LinesPerMM: 1000, TiltDeg: 1, PitchDeg: -10, FocalPX: 3000, LineHeightPX: 500, Seed: 43, Emissions: mercury}},
		{"room light", synth.Params{Width: 4032, Height: 3024, LinesPerMM: 600, TiltDeg: -4, BackgroundGradient: 0.02, Seed: 44, Emissions: hydrogen}},
		// 16:9: 2250 rows, which 4 does not divide.
		{"16:9", synth.Params{Width: 4000, Height: 2250, TiltDeg: 2.5, Seed: 47, Emissions: mercury}},
		// 16 MP: reduced by 5 when decoded whole, searched at a quarter.
		{"16 MP", synth.Params{Width: 4624, Height: 3472, TiltDeg: -3.5, Seed: 48, Emissions: hydrogen}},
		{"16 MP room light", synth.Params{Width: 4624, Height: 3472, TiltDeg: 2, BackgroundGradient: 0.03, Seed: 49, Emissions: mercury}},
	} {
		path, tr := writeJPEG(t, c.p, 92)
		cfg := image.Config{Width: c.p.Width, Height: c.p.Height}
		along := func(s Strip) (alongErrors, peaks.Result) {
			r, err := peaks.Find(s.Profile, peaks.Options{Clipped: s.Clipped})
			if err != nil {
				t.Fatal(err)
			}
			var e alongErrors
			e.add(s, r.Peaks, tr)
			return e, r
		}
		whole, err := Extract(path, Options{wholeFrame: true})
		if err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		we, wr := along(whole)
		for _, workers := range []int{1, 2} {
			opt := Options{Workers: workers}.withProfile(true)
			ss, ok, err := extractBandFirst(path, cfg, opt)
			if err != nil || !ok {
				t.Fatalf("%s, %d workers: band first: ok %v, %v", c.name, workers, ok, err)
			}
			s := ss[0]
			e, r := along(s)
			t.Logf("%s, %d workers: %d lines along the band RMS %.3f px, worst %.3f (whole frame %d, %.3f, %.3f); direction %.4f° (%.4f°)",
				c.name, workers, e.n, e.rms(), e.worst, we.n, we.rms(), we.worst, s.AngleDeg, whole.AngleDeg)
			if e.n < 3 || e.n < we.n || e.rms() > 0.15 || e.worst > 0.4 {
				t.Errorf("%s, %d workers: %d lines, RMS %.3f px, worst %.3f px along the band", c.name, workers, e.n, e.rms(), e.worst)
			}
			if math.Abs(s.Background-whole.Background) > 0.05*whole.Background+1e-5 || math.Abs(s.Noise-whole.Noise) > 0.2*whole.Noise+1e-5 ||
				s.StrayLight != whole.StrayLight || math.Abs(s.BackgroundRange-whole.BackgroundRange) > 0.1*whole.BackgroundRange+1e-4 {
				t.Errorf("%s, %d workers: background %.5f, σ %.5f, range %.5f, stray light %v; the whole frame's %.5f, %.5f, %.5f, %v", c.name, workers,
					s.Background, s.Noise, s.BackgroundRange, s.StrayLight, whole.Background, whole.Noise, whole.BackgroundRange, whole.StrayLight)
			}
			if c.p.PitchDeg != 0 {
				continue
			}
			if d := math.Abs(s.AngleDeg - whole.AngleDeg); d > 0.01 {
				t.Errorf("%s, %d workers: direction %.4f°, %.4f° from the whole frame", c.name, workers, s.AngleDeg, whole.AngleDeg)
			}
			sn, cs := math.Sincos(whole.AngleDeg * math.Pi / 180)
			worst := 0.0
			for _, wp := range wr.Peaks {
				if wp.SNR < 20 {
					continue
				}
				wx, wy := whole.ToImage(wp.Center)
				bd := math.Inf(1)
				for _, p := range r.Peaks {
					x, y := s.ToImage(p.Center)
					bd = math.Min(bd, math.Abs((x-wx)*cs+(y-wy)*sn)) // along the band
				}
				worst = math.Max(worst, bd)
			}
			if worst > 0.02 {
				t.Errorf("%s, %d workers: a line %.3f px from the whole frame's", c.name, workers, worst)
			}
		}
	}
}

// A large photo with no band fails band first as it does whole, naming the
// file, with the decoder ahead stopped (the race detector in test.sh
// watches the frame's rows), with one worker and with two; a photo to be
// turned is left to imread, a progressive one decoded whole; and rows of
// a photo that changed size since its reduced decode are refused.
func TestBandFirstFailures(t *testing.T) {
	dark := writeImageFile(t, "dark.jpg", func(w io.Writer) error {
		return jpeg.Encode(w, image.NewGray(image.Rect(0, 0, 4032, 3024)), &jpeg.Options{Quality: 90})
	})
	for _, workers := range []int{1, 2} {
		_, err := Extract(dark, Options{Workers: workers})
		if !errors.Is(err, ErrNoBand) || !strings.HasPrefix(err.Error(), dark+": ") {
			t.Errorf("dark 12 MP photo, %d workers: %v", workers, err)
		}
	}
	path, _ := writeJPEG(t, synth.Params{Width: 4032, Height: 3024, TiltDeg: 2, Seed: 45, Emissions: mercury}, 90)
	cfg := image.Config{Width: 4032, Height: 3024}
	// (Two workers: the race detector in test.sh sees the rows decoded
	// ahead handed over and given back.)
	_, ok, err := extractBandFirst(path, cfg, Options{Workers: 2}.withProfile(true))
	if err != nil || !ok {
		t.Fatalf("band first: ok %v, %v", ok, err)
	}
	// A photo whose Exif block asks for turning goes to imread, turned, as
	// when decoded whole.
	raw, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	turned := filepath.Join(t.TempDir(), "turned.jpg")
	if err := os.WriteFile(turned, withOrientation(raw, 3), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, ok, err := extractBandFirst(turned, cfg, Options{Workers: 2}.withProfile(true)); ok || err != nil {
		t.Errorf("turned photo taken band first: ok %v, %v", ok, err)
	}
	a, errA := Extract(turned, Options{})
	b, errB := Extract(turned, Options{wholeFrame: true})
	if errA != nil || errB != nil || !slices.Equal(a.Profile, b.Profile) || math.Abs(a.AngleDeg-2) > 0.05 {
		t.Errorf("turned photo: %v, %v; %.3f° (the band turned by 180° lies at 2°)", errA, errB, a.AngleDeg)
	}
	// A progressive JPEG is decoded whole (each decoder of one would read
	// and hold every scan first).
	img := gocv.IMRead(path, gocv.IMReadColor)
	prog := filepath.Join(t.TempDir(), "progressive.jpg")
	if !gocv.IMWriteWithParams(prog, img, []int{gocv.IMWriteJpegQuality, 90, gocv.IMWriteJpegProgressive, 1}) {
		t.Fatal("cannot write the progressive JPEG")
	}
	img.Close()
	if _, ok, err := extractBandFirst(prog, cfg, Options{Workers: 2}.withProfile(true)); ok || err != nil {
		t.Errorf("progressive photo taken band first: ok %v, %v", ok, err)
	}
	if _, err := Extract(prog, Options{}); err != nil {
		t.Errorf("progressive photo: %v", err)
	}
	// The photo swapped for a smaller one between the reduced decode and
	// the band's rows: the rows' decoder notices.
	m, _ := newMatUnset(3024, 4032, gocv.MatTypeCV8UC3, true)
	defer m.Close()
	small, _ := writeJPEG(t, synth.Params{Width: 640, Height: 480, Seed: 46, Emissions: mercury}, 90)
	if err := decodeRowsInto(small, m, 100, 200); err == nil || !strings.Contains(err.Error(), "changed") {
		t.Errorf("rows of a photo of another size: %v", err)
	}
}

// Any frame, past the decoders: the band search, the straightening and the
// profiles on pixels made from the bytes (a frame of 16-271 × 16-271 px,
// sizes from the first two bytes, the rest the pixels, repeated), one band
// or all, one worker or two: a strip or an error, never a panic or a hang.
// Many more frames a second than FuzzExtractBytes, whose inputs rarely
// decode, reach this code. The band search's hang on a profile of spikes
// (TestBandEdgesInOrder) was found through the decoder, after minutes.
func FuzzBandSearch(f *testing.F) {
	img, _, _ := synth.Render(synth.Params{Width: 96, Height: 64, Emissions: mercury, NoNoise: true})
	rgba := image.NewRGBA(img.Bounds())
	draw.Draw(rgba, rgba.Bounds(), img, image.Point{}, draw.Src)
	seed := []byte{96 - 16, 64 - 16, 0}
	for i := 0; i < len(rgba.Pix); i += 4 {
		seed = append(seed, rgba.Pix[i+2], rgba.Pix[i+1], rgba.Pix[i])
	}
	f.Add(seed)
	f.Add([]byte{0, 0, 1, 255, 0, 0, 0, 255})
	f.Add([]byte{200, 3, 3, 0, 0, 0, 255, 255, 255, 0})
	f.Fuzz(func(t *testing.T, b []byte) {
		if len(b) < 4 {
			return
		}
		w, h := 16+int(b[0]), 16+int(b[1])
		mode := b[2]
		src := b[3:]
		px := make([]byte, 3*w*h)
		for i := range px {
			px[i] = src[i%len(src)]
		}
		m, err := gocv.NewMatFromBytes(h, w, gocv.MatTypeCV8UC3, px)
		if err != nil {
			t.Fatal(err)
		}
		defer m.Close()
		opt := Options{Workers: 1 + int(mode&1)}
		if _, err := extractBandsMat(m, opt, mode&2 != 0, rowSource{}, nil); err != nil && strings.Contains(err.Error(), "\n") {
			t.Fatalf("error on more than one line: %v", err)
		}
	})
}
