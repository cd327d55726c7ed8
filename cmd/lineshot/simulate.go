package main

import (
	"fmt"
	"image"
	"image/jpeg"
	"image/png"
	"io"
	"path/filepath"
	"strconv"
	"strings"

	"lineshot/calibrate"
	"lineshot/imaging"
	"lineshot/imaging/synth"
)

const simulateUsage = `Usage: lineshot simulate [options] -o PHOTO.jpg|PHOTO.png|PHOTO.heic

Renders a synthetic photograph of a lamp seen through a transmission grating
by a pinhole camera, and writes the exact truth (every line's wavelength and
its x, y in the image) to PHOTO.truth.json beside it. Use it to plan a setup
("does this camera resolve the mercury yellow pair at 600 lines/mm?") and to
check lineshot against a known answer.

Examples:
  lineshot simulate --lamp mercury -o hg.jpg
  lineshot simulate --lamp hydrogen --lines-per-mm 300 --size 1280x720 --tilt -5 -o h.jpg
  lineshot simulate --lamp mercury --focal-px 1500 --psf 1.5 --quality 75 -o webcam-hg.jpg
  lineshot simulate --lamp mercury --lines-per-mm 300 --orders -1,0,1 --peak 0.5 -o both-sides.jpg
  lineshot simulate --lamp hydrogen --peak 0.1 --read-noise 15 --frames 20 -o dim.avi
  lineshot simulate --lamp mercury --second-lamp hydrogen -o two-bands.jpg
`

func runSimulate(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("simulate", simulateUsage, stderr)
	out := fs.StringP("output", "o", "", "photo to write (.jpg, .jpeg, .png or .heic), or a video (.avi, Motion-JPEG)")
	frames := fs.Int("frames", 8, "frames of a video (.avi): each with fresh noise")
	truthPath := fs.String("truth", "", "truth JSON to write; default: PHOTO with .truth.json")
	lamp := fs.StringP("lamp", "l", "mercury", "lamp: mercury, hydrogen, helium, neon, sodium, cfl")
	lpm := fs.Float64("lines-per-mm", 600, "grating lines per mm")
	order := fs.Int("order", 1, "diffraction order")
	orders := fs.IntSlice("orders", nil, "signed orders to render, e.g. -1,0,1 (0: the white zero order); default: --order alone")
	zeroGain := fs.Float64("zero-order-gain", 1, "zero order brightness per line relative to the first order")
	second := fs.String("second-lamp", "", "a second lamp whose band lies beside the first (two lamps photographed together)")
	secondOff := fs.Float64("second-offset", 0, "how far below the first band the second lies, px (negative: above); 0: a fifth of the image height")
	k1 := fs.Float64("distortion", 0, "lens radial distortion k1 (negative: barrel, as wide phone lenses; positive: pincushion)")
	pitch := fs.Float64("pitch", 0, "camera turned about its horizontal axis, degrees (positive looks down): line images converge")
	gradient := fs.Float64("background-gradient", 0, "room-light slope: background change from left to right edge, fraction of full scale")
	size := fs.String("size", "1920x1080", "image size WIDTHxHEIGHT in px")
	focal := fs.Float64("focal-px", 0, "camera focal length in px; 0: frame 380-720 nm across 85% of the width")
	camAngle := fs.Float64("camera-angle", 0, "angle of the camera axis from the grating normal, degrees; 0: aim at the middle of 380-720 nm")
	tilt := fs.Float64("tilt", 0, "roll of the camera about its axis, degrees")
	psf := fs.Float64("psf", 1.2, "blur σ of the optics, px")
	height := fs.Float64("line-height", 0, "length of each line image, px; 0: a tenth of the image height")
	peak := fs.Float64("peak", 0.8, "brightest line's peak as a fraction of full scale (above 1 saturates)")
	fullWell := fs.Float64("full-well", 6000, "electrons at full scale (sets the shot noise)")
	readNoise := fs.Float64("read-noise", 4, "read noise, electrons rms")
	bg := fs.Float64("background", 0.01, "uniform background, fraction of full scale")
	quality := fs.Int("quality", 90, "JPEG (or HEIC) quality 1-100")
	seed := fs.Uint64("seed", 1, "noise seed")
	if err := parse(fs, args); err != nil {
		return err
	}
	if *out == "" {
		fs.Usage()
		return usagef("simulate: -o PHOTO is required")
	}
	ext := strings.ToLower(filepath.Ext(*out))
	if ext != ".jpg" && ext != ".jpeg" && ext != ".png" && ext != ".heic" && ext != ".avi" {
		return usagef("simulate: %s: the photo must end in .jpg, .jpeg, .png or .heic (or .avi for a video)", *out)
	}
	if *frames < 1 || *frames > 1000 {
		return usagef("simulate: --frames %d outside 1-1000", *frames)
	}
	if *quality < 1 || *quality > 100 {
		return usagef("simulate: --quality %d outside 1-100", *quality)
	}
	w, h, err := parseSize(*size)
	if err != nil {
		return usagef("simulate: --size %q: %v", *size, err)
	}
	l, err := calibrate.LampByName(*lamp)
	if err != nil {
		return usagef("simulate: %v", err)
	}
	p := synth.Params{Width: w, Height: h, LinesPerMM: *lpm, Order: *order, FocalPX: *focal, CameraAngleDeg: *camAngle,
		TiltDeg: *tilt, PSFSigmaPX: *psf, LineHeightPX: *height, PeakLevel: *peak, FullWell: *fullWell,
		ReadNoise: *readNoise, Background: *bg, Seed: *seed, Emissions: emissions(l),
		Orders: *orders, ZeroOrderGain: *zeroGain, BackgroundGradient: *gradient, RadialK1: *k1, PitchDeg: *pitch}
	if *second != "" {
		l2, err := calibrate.LampByName(*second)
		if err != nil {
			return usagef("simulate: --second-lamp: %v", err)
		}
		off := *secondOff
		if off == 0 {
			off = float64(h) / 5
		}
		p.Stacked = []synth.StackedLamp{{Emissions: emissions(l2), OffsetPX: off}}
	}
	img, truth, err := synth.Render(p)
	if err != nil {
		return usagef("simulate: %v", err)
	}
	if ext == ".avi" {
		// Each frame the same scene with fresh noise; written beside the
		// target and renamed, as every output is.
		imgs := []image.Image{img}
		for k := 1; k < *frames; k++ {
			q := p
			q.Seed = p.Seed + uint64(k)
			f, _, err := synth.Render(q)
			if err != nil {
				return usagef("simulate: %v", err)
			}
			imgs = append(imgs, f)
		}
		if err := writeByPathAtomic(*out, ext, func(tmp string) error { return imaging.WriteVideo(tmp, imgs, 10) }); err != nil {
			return err
		}
	} else if ext == ".heic" {
		if err := writeByPathAtomic(*out, ext, func(tmp string) error { return imaging.WriteHEIC(tmp, img, *quality) }); err != nil {
			return err
		}
	} else if err := writeFileAtomic(*out, func(wr io.Writer) error {
		if ext == ".png" {
			return png.Encode(wr, img)
		}
		return jpeg.Encode(wr, img, &jpeg.Options{Quality: *quality})
	}); err != nil {
		return err
	}
	tp := *truthPath
	if tp == "" {
		tp = strings.TrimSuffix(*out, filepath.Ext(*out)) + ".truth.json"
	}
	doc := struct {
		Photo string `json:"photo"`
		Lamp  string `json:"lamp"`
		synth.Truth
	}{filepath.Base(*out), l.Name, truth}
	if err := writeJSONAtomic(tp, doc); err != nil {
		return err
	}
	in := 0
	for _, t := range truth.Lines {
		if t.InFrame {
			in++
		}
	}
	fmt.Fprintf(stdout, "wrote %s (%dx%d, %s, %d of %d lines in frame) and %s\n", *out, w, h, l.Name, in, len(truth.Lines), tp)
	return nil
}

// emissions turns a lamp's reference lines into lines to render. A
// compact fluorescent lamp is rendered as its mercury lines plus phosphor
// bands; band widths and all strengths are demo values (from memory).
func emissions(l calibrate.Lamp) []synth.Emission {
	if l.Name == "cfl" {
		return []synth.Emission{
			{NM: 404.6563, Strength: 0.25, Name: "Hg 404.66"}, {NM: 435.8328, Strength: 0.7, Name: "Hg 435.83"},
			{NM: 488, Strength: 0.25, Name: "Tb 488", FWHMNM: 6}, {NM: 542, Strength: 0.5, Name: "Tb 542", FWHMNM: 6},
			{NM: 546.0735, Strength: 1, Name: "Hg 546.07"}, {NM: 576.9598, Strength: 0.12, Name: "Hg 576.96"},
			{NM: 579.0663, Strength: 0.12, Name: "Hg 579.07"}, {NM: 611, Strength: 0.9, Name: "Eu 611", FWHMNM: 4},
		}
	}
	var e []synth.Emission
	for _, ln := range l.Lines {
		e = append(e, synth.Emission{NM: ln.NM, Strength: ln.Strength, Name: ln.Name})
	}
	return e
}

func parseSize(s string) (int, int, error) {
	a, b, ok := strings.Cut(strings.ToLower(s), "x")
	if !ok {
		return 0, 0, fmt.Errorf("want WIDTHxHEIGHT")
	}
	w, err1 := strconv.Atoi(a)
	h, err2 := strconv.Atoi(b)
	if err1 != nil || err2 != nil || w < 16 || h < 16 || w > 20000 || h > 20000 {
		return 0, 0, fmt.Errorf("want two whole numbers from 16 to 20000")
	}
	if w*h > imaging.DefaultMaxPixels {
		// (Rendering takes about 16 bytes a pixel: 6.3 GB at 20000x20000.)
		return 0, 0, fmt.Errorf("%d megapixels; lineshot measures photos of up to %d", w*h/1_000_000, imaging.DefaultMaxPixels/1_000_000)
	}
	return w, h, nil
}
