package imaging

import (
	"fmt"
	"image"
	"image/color"
	"image/jpeg"
	"image/png"
	"io"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"gocv.io/x/gocv"

	"lineshot/imaging/synth"
	"lineshot/peaks"
)

// dimLamp is a faint mercury lamp on a noisy webcam: single frames are
// noise-limited.
func dimLamp(seed uint64) synth.Params {
	return synth.Params{Width: 960, Height: 540, LinesPerMM: 600, TiltDeg: 2, PeakLevel: 0.15, ReadNoise: 12,
		FullWell: 4000, Seed: seed, Emissions: mercury}
}

// writePNG writes img to dir/name.
func writePNG(t *testing.T, dir, name string, img image.Image) string {
	t.Helper()
	path := filepath.Join(dir, name)
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if err := png.Encode(f, img); err != nil {
		t.Fatal(err)
	}
	return path
}

// addStray adds a stripe of stray light (a lit edge of the bench seen
// through the grating housing: a vertical bar crossing the band, linear
// level v of full scale) to img, in linear intensity.
func addStray(img *image.RGBA, x0, x1 int, v float64) {
	for y := 0; y < img.Bounds().Dy(); y++ {
		for x := x0; x < x1; x++ {
			c := img.RGBAAt(x, y)
			enc := func(u uint8) uint8 {
				l := srgbToLinear(float64(u)/255) + v
				return uint8(math.Round(255 * linearToSRGB(math.Min(1, l))))
			}
			img.SetRGBA(x, y, color.RGBA{enc(c.R), enc(c.G), enc(c.B), 255})
		}
	}
}

// lineStats measures strip s against the truth: RMS centre error of the
// lines found (px, original image), the profile's noise relative to the
// brightest line, and the peaks found farther than 2 px from every truth
// line.
func lineStats(t *testing.T, s Strip, tr synth.Truth) (rms, relNoise float64, stray []float64) {
	t.Helper()
	r, err := peaks.Find(s.Profile, peaks.Options{Clipped: s.Clipped})
	if err != nil {
		t.Fatal(err)
	}
	var ss float64
	n, top := 0, 0.0
	for _, l := range tr.Lines {
		if d := acrossLine(s, r.Peaks, l); d < 1.5 {
			ss += d * d
			n++
		}
	}
	for _, p := range r.Peaks {
		top = math.Max(top, p.Height)
		x, y := s.ToImage(p.Center)
		near := false
		for _, l := range tr.Lines {
			if math.Hypot(l.X-x, l.Y-y) < 2 {
				near = true
			}
		}
		if !near {
			stray = append(stray, p.Center)
		}
	}
	return math.Sqrt(ss / float64(max(1, n))), r.Noise / top, stray
}

// acrossLine is the distance from the truth line l to the nearest measured
// line across it, in the photo: how far its centre is off, leaving out how
// far along the line the band's centre line crosses it (the band's height,
// which moves no wavelength; nearestLine counts both). Measured lines more
// than 200 px along it count as none.
func acrossLine(s Strip, ps []peaks.Peak, l synth.TruthLine) float64 {
	best := math.Inf(1)
	for _, p := range ps {
		px, py := s.ToImage(p.Center)
		dx, dy := px-l.X, py-l.Y
		if math.Abs(dx*l.Dir[0]+dy*l.Dir[1]) > 200 {
			continue
		}
		best = math.Min(best, math.Abs(dx*l.Dir[1]-dy*l.Dir[0]))
	}
	return best
}

// Eight frames of a dim lamp averaged: the profile's noise falls by about
// √8 = 2.83 against one frame (the simulator draws independent noise per
// frame); the centres stay on the truth. Eight dark frames with the same
// stray light remove the stray stripe that the averaged frames show as a
// line.
func TestStackAveragesAndSubtractsDark(t *testing.T) {
	dir := t.TempDir()
	var frames []string
	var truth synth.Truth
	const n = 8
	for k := 0; k < n; k++ {
		img, tr, err := synth.Render(dimLamp(uint64(100 + k)))
		if err != nil {
			t.Fatal(err)
		}
		truth = tr
		addStray(img, 700, 703, 0.004)
		frames = append(frames, writePNG(t, dir, "f"+string(rune('a'+k))+".png", img))
	}
	// The dark frames: the same camera and stray light, the lamp off (its
	// lines rendered at a strength of nothing).
	var darks []string
	for k := 0; k < n; k++ {
		dp := dimLamp(uint64(900 + k))
		dp.PeakLevel = 1e-9
		darkImg, _, err := synth.Render(dp)
		if err != nil {
			t.Fatal(err)
		}
		addStray(darkImg, 700, 703, 0.004)
		darks = append(darks, writePNG(t, dir, "dark"+string(rune('a'+k))+".png", darkImg))
	}

	one, err := ExtractStack(Stack{Frames: frames[:1]}, Options{})
	if err != nil {
		t.Fatal(err)
	}
	all, err := ExtractStack(Stack{Frames: frames}, Options{})
	if err != nil {
		t.Fatal(err)
	}
	sub, err := ExtractStack(Stack{Frames: frames, Dark: darks}, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if all.Frames != n || sub.DarkFrames != n {
		t.Errorf("frames counted %d (dark %d), want %d (%d)", all.Frames, sub.DarkFrames, n, n)
	}
	rms1, noise1, stray1 := lineStats(t, one, truth)
	rmsN, noiseN, strayN := lineStats(t, all, truth)
	rmsD, _, strayD := lineStats(t, sub, truth)
	gain := noise1 / noiseN
	t.Logf("one frame: RMS %.3f px, noise/peak %.4f, stray %v; %d frames: RMS %.3f px, noise/peak %.4f (÷%.2f), stray %v; dark subtracted: RMS %.3f px, stray %v",
		rms1, noise1, stray1, n, rmsN, noiseN, gain, strayN, rmsD, strayD)
	if gain < 2.2 || gain > 3.5 {
		t.Errorf("averaging %d frames lowered the noise by %.2f, expected about %.2f", n, gain, math.Sqrt(n))
	}
	// (Across the lines: 0.018-0.024 px measured, 0.057-0.065 when the
	// offset along the lines counted too.)
	if rmsN > 0.06 || rmsD > 0.06 {
		t.Errorf("stacked centres off the truth by %.3f px RMS (dark subtracted: %.3f)", rmsN, rmsD)
	}
	// One dim frame alone still meets the target for lines at SNR 10-50
	// (0.4 px): a band's centre line measured on too few of its rows had
	// picked noise for lines and put this frame 1.02 px off.
	if rms1 > 0.4 {
		t.Errorf("one dim frame: centres off the truth by %.3f px RMS", rms1)
	}
	if len(strayN) == 0 {
		t.Errorf("the stray stripe should show as a line without the dark frame (test is not testing)")
	}
	if len(strayD) > 0 {
		t.Errorf("dark frame subtracted, yet lines where the truth has none: %v", strayD)
	}
}

// Frames of a video file (written here with OpenCV's own Motion-JPEG
// encoder) are averaged like stills.
func TestStackReadsVideo(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "lamp.avi")
	p := dimLamp(1)
	p.PeakLevel = 0.5
	vw, err := gocv.VideoWriterFile(path, "MJPG", 10, p.Width, p.Height, true)
	if err != nil || !vw.IsOpened() {
		t.Skipf("this OpenCV cannot write Motion-JPEG video: %v", err)
	}
	var truth synth.Truth
	for k := 0; k < 6; k++ {
		p.Seed = uint64(200 + k)
		img, tr, err := synth.Render(p)
		if err != nil {
			t.Fatal(err)
		}
		truth = tr
		m, err := gocv.ImageToMatRGB(img)
		if err != nil {
			t.Fatal(err)
		}
		if err := vw.Write(m); err != nil {
			t.Fatal(err)
		}
		m.Close()
	}
	vw.Close()
	s, err := ExtractStack(Stack{Frames: []string{path}}, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if s.Frames != 6 {
		t.Errorf("%d frames read, 6 written", s.Frames)
	}
	rms, _, stray := lineStats(t, s, truth)
	t.Logf("video: %d frames, RMS %.3f px, stray %v", s.Frames, rms, stray)
	if rms > 0.2 {
		t.Errorf("centres off the truth by %.3f px RMS", rms)
	}
	if len(stray) > 0 {
		t.Errorf("lines where the truth has none: %v", stray)
	}
	// A dark bench averaged: its noise all but gone, yet no lit bench
	// (the scene has no stray light).
	if s.StrayLight {
		t.Errorf("the averaged video was taken for a lit bench (background range %.5f, noise %.5f)", s.BackgroundRange, s.Noise)
	}

	// Frames of another size, and a file that is no video, are refused
	// with the file named.
	small := writePNG(t, dir, "small.png", image.NewRGBA(image.Rect(0, 0, 64, 48)))
	if _, err := ExtractStack(Stack{Frames: []string{path, small}}, Options{}); err == nil || !contains(err.Error(), "small.png") {
		t.Errorf("mixed sizes: %v", err)
	}
	bogus := filepath.Join(dir, "bogus.mp4")
	os.WriteFile(bogus, []byte("not a video at all"), 0o644)
	if _, err := ExtractStack(Stack{Frames: []string{bogus}}, Options{}); err == nil || !contains(err.Error(), "bogus.mp4") {
		t.Errorf("bogus video: %v", err)
	}
}

// Extra noise over part of the frame (stray light's shot noise, a hot
// region of the sensor) shows in Strip.NoiseShape: several times the
// typical level there, about 1 elsewhere.
func TestNoiseShapeFollowsTheFrame(t *testing.T) {
	img, _, err := synth.Render(synth.Params{Width: 1280, Height: 720, LinesPerMM: 600, Seed: 8, Emissions: mercury})
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(1, 1))
	for y := 0; y < 720; y++ {
		for x := 600; x < 800; x++ {
			c := img.RGBAAt(x, y)
			n := func(u uint8) uint8 { return uint8(math.Max(0, math.Min(255, float64(u)+12*rng.NormFloat64()))) }
			img.SetRGBA(x, y, color.RGBA{n(c.R), n(c.G), n(c.B), 255})
		}
	}
	path := writePNG(t, t.TempDir(), "noisy.png", img)
	s, err := Extract(path, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if len(s.NoiseShape) != len(s.Profile) {
		t.Fatalf("noise shape of %d values for %d samples", len(s.NoiseShape), len(s.Profile))
	}
	var in, out []float64
	for i, v := range s.NoiseShape {
		x, _ := s.ToImage(float64(i))
		switch {
		case x > 620 && x < 780:
			in = append(in, v)
		case x < 550 || x > 850:
			out = append(out, v)
		}
	}
	mi, mo := peaks.MedianInPlace(in), peaks.MedianInPlace(out)
	t.Logf("noise shape: %.2f in the noisy columns, %.2f elsewhere", mi, mo)
	if mi < 3 || mo < 0.7 || mo > 1.3 {
		t.Errorf("noise shape %.2f in the noisy columns, %.2f elsewhere", mi, mo)
	}
}

// noiseShape takes a scatter of 0 as a measure (a background the
// compression left flat), not as a column without one: a row of columns
// mostly flat, with scatter only where lines ring, has no shape at all;
// columns with too few samples (negative) take their neighbours'.
func TestNoiseShapeOfFlatBackground(t *testing.T) {
	const L = 400
	flat := make([]float64, L)
	for _, i := range []int{50, 51, 52, 120, 121, 200, 201, 202, 203} {
		flat[i] = 0.004 // beside a line: the compression's ringing
	}
	for i := 0; i < L; i++ {
		if flat[i] == 0 && i%5 < 2 {
			flat[i] = 1e-5 // two columns in five a code apart
		}
	}
	if s, share := noiseShape(flat); s != nil || share < 0.5 {
		var top float64
		for _, v := range s {
			top = math.Max(top, v)
		}
		t.Errorf("a mostly flat background gave a noise shape (up to %.3g)", top)
	}
	// Real scatter, unmeasured columns among it, three times as much over
	// columns 250-330: the shape follows it.
	rng := rand.New(rand.NewPCG(2, 2))
	sp := make([]float64, L)
	for i := range sp {
		sp[i] = 0.01 * (1 + 0.2*rng.NormFloat64())
		if i >= 250 && i < 330 {
			sp[i] *= 3
		}
		if i%7 == 0 {
			sp[i] = -1
		}
	}
	s, _ := noiseShape(sp)
	if len(s) != L {
		t.Fatalf("noise shape of %d values for %d columns", len(s), L)
	}
	if s[100] < 0.8 || s[100] > 1.25 || s[290] < 2.4 || s[290] > 3.6 || s[7*40] < 2.4 {
		t.Errorf("noise shape %.2f at column 100, %.2f and %.2f in the noisier columns (want about 1 and 3)", s[100], s[290], s[280])
	}
}

// A stack whose photos show different spectra (another lamp's photo among
// them, or the camera moved between them) is named in a warning; exposures
// of one setup, bright or dim and noisy, differing in brightness, are not.
func TestStackMismatch(t *testing.T) {
	dir := t.TempDir()
	still := func(name string, p synth.Params) string {
		img, _, err := synth.Render(p)
		if err != nil {
			t.Fatal(err)
		}
		return writeImageFile(t, name, func(w io.Writer) error { return jpeg.Encode(w, img, &jpeg.Options{Quality: 90}) })
	}
	webcam := func(seed uint64, lamp []synth.Emission, level float64) synth.Params {
		return synth.Params{Width: 1280, Height: 720, LinesPerMM: 600, TiltDeg: 3, PeakLevel: level, Seed: seed, Emissions: lamp}
	}
	// The camera turned by 0.025° between the photos: the lines 2.2 px
	// along (synth's own aim and focal length, the turn added).
	moved := webcam(5, mercury, 0.8)
	d := 1e6 / moved.LinesPerMM
	lo, hi := math.Asin(380/d), math.Asin(720/d)
	moved.CameraAngleDeg = (lo+hi)/2*180/math.Pi + 0.025
	moved.FocalPX = 0.85 * float64(moved.Width) / (math.Tan(hi-(lo+hi)/2) - math.Tan(lo-(lo+hi)/2))
	hg := []string{still("hg1.jpg", webcam(1, mercury, 0.8)), still("hg2.jpg", webcam(2, mercury, 0.5)), still("hg3.jpg", webcam(3, mercury, 0.3))}
	h := still("h1.jpg", webcam(4, hydrogen, 0.8))
	mv := still("hg-moved.jpg", moved)
	// 16-bit PNGs (as a raw converter writes them): two of mercury, one
	// of hydrogen.
	var deepStack []string
	for k, p := range []synth.Params{webcam(6, mercury, 0.8), webcam(7, mercury, 0.6), webcam(8, hydrogen, 0.8)} {
		img, _, err := synth.Render(p)
		if err != nil {
			t.Fatal(err)
		}
		deepStack = append(deepStack, writePNG(t, dir, fmt.Sprintf("deep%d.png", k), deep(img)))
	}
	var dim []string
	for k := 0; k < 4; k++ {
		img, _, err := synth.Render(dimLamp(uint64(300 + k)))
		if err != nil {
			t.Fatal(err)
		}
		dim = append(dim, writePNG(t, dir, fmt.Sprintf("dim%d.png", k), img))
	}
	for _, c := range []struct {
		name   string
		frames []string
		odd    []string // the files the warning names
	}{
		{"one lamp, three exposures", hg, nil},
		{"dim noisy frames", dim, nil},
		{"a hydrogen photo among mercury ones", append(append([]string{}, hg...), h), []string{"h1.jpg"}},
		{"two photos of two lamps", []string{hg[0], h}, []string{"hg1.jpg", "h1.jpg"}},
		{"the camera moved", []string{hg[0], hg[1], mv}, []string{"hg-moved.jpg"}},
		{"16-bit photos, one of another lamp", deepStack, []string{"deep2.png"}},
		{"16-bit photos of one lamp", deepStack[:2], nil},
	} {
		t.Run(c.name, func(t *testing.T) {
			s, err := ExtractStack(Stack{Frames: c.frames}, Options{})
			if err != nil {
				t.Fatal(err)
			}
			a, err := accumulate(c.frames, 600, Options{}, true)
			if err != nil {
				t.Fatal(err)
			}
			dep := stackDepartures(a.files, s)
			t.Logf("departures %.3f", dep)
			var warning string
			for _, w := range s.Warnings {
				if strings.Contains(w, "spectrum") {
					warning = w
				}
			}
			if len(c.odd) == 0 {
				if warning != "" {
					t.Errorf("one setup, yet: %s", warning)
				}
				for i, d := range dep {
					if d > mismatchLimit/2 {
						t.Errorf("%s departs by %.3f: too near the limit %.2f for exposures of one setup", c.frames[i], d, mismatchLimit)
					}
				}
				return
			}
			if warning == "" {
				t.Fatalf("no warning; strip warnings %q", s.Warnings)
			}
			t.Log(warning)
			for i, f := range c.frames {
				named := strings.Contains(warning, filepath.Base(f))
				want := slices.Contains(c.odd, filepath.Base(f))
				if named != want {
					t.Errorf("%s named %v, want %v", filepath.Base(f), named, want)
				}
				if want && dep[i] < 2*mismatchLimit {
					t.Errorf("%s departs by only %.3f: too near the limit %.2f", f, dep[i], mismatchLimit)
				}
				if !want && dep[i] > mismatchLimit/2 {
					t.Errorf("%s, one of the stack's own, departs by %.3f: too near the limit %.2f", f, dep[i], mismatchLimit)
				}
			}
		})
	}
}
