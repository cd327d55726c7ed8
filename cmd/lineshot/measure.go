package main

import (
	"cmp"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"image"
	"io"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"

	"lineshot/calibrate"
	"lineshot/imaging"
	"lineshot/peaks"
)

const measureUsage = `Usage: lineshot measure [options] PHOTO...

Finds the emission lines in each photo, measures their centres to a fraction
of a pixel, identifies them against reference lamp lines and converts them to
air wavelengths. Without --calibration-from each photo calibrates itself from
its own lamp (identified automatically). With it, the calibration of the same
fixed setup is applied, and a hydrogen photo gets a Rydberg fit.

Examples:
  lineshot measure mercury.jpg
  lineshot measure --calibration-from mercury.jpg hydrogen.jpg
  lineshot measure --calibration-from mercury.jpg --save-calibration bench2.json
  lineshot measure --calibration-from bench2.json --json hydrogen.jpg
  lineshot measure --lamp helium --line 587.562@1310.4 helium.jpg
  lineshot measure -c bench2.json --stack --dark off1.jpg --dark off2.jpg h1.jpg h2.jpg h3.jpg
  lineshot measure -c bench2.json hydrogen-dim.mp4      # a video's frames are averaged

A photo may be a video (AVI, MP4, MOV, MKV, WebM ...): its frames are
averaged. --stack averages the photos given as exposures of one setup
(and warns when one of them shows another spectrum); --dark subtracts dark
frames (lamp off, same exposure), averaged.
`

type measureConfig struct {
	lamp       string
	calLamp    string
	pins       []calibrate.Pin
	model      string
	minSNR     float64
	linear     bool
	tolNM      float64
	floorPX    float64
	linesPerMM float64
	extra      []calibrate.Lamp // from --lines files
	saveStrip  string
	imageOpts  imaging.Options
	// dark are dark frames (lamp off) subtracted from the measured photos;
	// frames are further exposures averaged with each measured photo
	// (--stack). Calibration photos get neither.
	dark, frames []string
	// bands measures every band of a photo (--bands); sameFrame says the
	// calibration came from another band of the same photo, so its band's
	// place says nothing about the setup moving.
	bands, sameFrame bool
}

// lamps returns the built-in lamps and the user's.
func (c measureConfig) lamps() []calibrate.Lamp { return append(calibrate.Lamps(), c.extra...) }

// lampByName looks among the user's lamps, then the built-in ones.
func (c measureConfig) lampByName(name string) (calibrate.Lamp, error) {
	for _, l := range c.extra {
		if strings.EqualFold(l.Name, name) {
			return l, nil
		}
	}
	return calibrate.LampByName(name)
}

// calibrationLamps are the candidates for a calibration photo: the named
// one, or every lamp with sharp known lines (hydrogen only when named).
func (c measureConfig) calibrationLamps() []calibrate.Lamp {
	if c.calLamp != "" {
		l, _ := c.lampByName(c.calLamp)
		return []calibrate.Lamp{l}
	}
	return append([]calibrate.Lamp{calibrate.Mercury(), calibrate.Helium(), calibrate.Neon(), calibrate.Sodium(), calibrate.CFL()}, c.extra...)
}

func readLampFile(path string) (calibrate.Lamp, error) {
	f, err := os.Open(path)
	if err != nil {
		return calibrate.Lamp{}, err
	}
	defer f.Close()
	name := strings.TrimSuffix(filepath.Base(path), filepath.Ext(path))
	l, err := calibrate.ReadLines(f, name)
	if err != nil {
		return calibrate.Lamp{}, fmt.Errorf("%s: %w", path, err)
	}
	return l, nil
}

func runMeasure(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlags("measure", measureUsage, stderr)
	calFrom := fs.StringArrayP("calibration-from", "c", nil, "calibration photo of the same setup (repeat for several lamps: one fit), or a calibration JSON saved earlier")
	saveCal := fs.String("save-calibration", "", "write the calibration to this JSON file")
	lamp := fs.StringP("lamp", "l", "", "lamp of the measured photos (mercury, hydrogen, helium, neon, sodium); default: recognised")
	calLamp := fs.String("calibration-lamp", "", "lamp of the calibration photo; default: recognised among mercury, helium, neon, sodium")
	pins := fs.StringArray("line", nil, "pin a line as NM@PX (air nm at profile position px); repeatable")
	model := fs.String("model", "", "dispersion model: poly1, poly2, poly3, grating or grating-lens (with radial lens distortion); default: chosen by AICc")
	lpm := fs.Float64("lines-per-mm", 0, "nominal grating ruling; the grating model then treats it as a measurement (±3 %)")
	lineFiles := fs.StringArray("lines", nil, "extra reference lamp from a CSV line list (header with nm[,name,strength,sigma_nm,source]); the lamp is named after the file; repeatable")
	minSNR := fs.Float64("min-snr", 5, "least line height and prominence, in units of the profile noise (1-1000)")
	tol := fs.Float64("match-tolerance", 1.0, "largest distance in nm between a calibrated line and its reference line")
	floor := fs.Float64("position-floor", 0, "least systematic centroid uncertainty, px, added in quadrature; the calibration estimates its own from its residuals")
	linear := fs.Bool("linear", false, "pixel values are linear in intensity (do not undo the sRGB curve)")
	roi := fs.String("roi", "", "look for the band only in this rectangle of the photo: X,Y,WIDTH,HEIGHT in pixels")
	angle := fs.String("angle", "", "take this dispersion direction (degrees, + turns clockwise on screen) instead of finding it")
	saveStrip := fs.String("save-strip", "", "save the straightened band with the measured lines marked (JPEG; with several photos, the last)")
	asJSON := fs.Bool("json", false, "print a JSON document instead of tables")
	dark := fs.StringArray("dark", nil, "dark frame (lamp off, same exposure; a still or a video) subtracted from the measured photos; repeat to average several")
	bands := fs.Bool("bands", false, "the photos may hold several bands (lamps photographed together, one above the other): measure each; without -c, the calibration-lamp bands calibrate the others")
	stack := fs.Bool("stack", false, "the photos are exposures of one setup: average them and measure them as one (a video file is always averaged)")
	if err := parse(fs, args); err != nil {
		return err
	}
	if fs.NArg() == 0 && (len(*calFrom) == 0 || *saveCal == "") {
		fs.Usage()
		return usagef("measure: no photo given")
	}
	for _, d := range *dark {
		// Subtracted from itself, a photo has no band left ("no spectrum
		// band found" said nothing of why).
		for _, p := range fs.Args() {
			if sameFile(d, p) {
				return usagef("measure: --dark %s is also a photo to measure (%s): a dark frame is a photo taken with the lamp off", d, p)
			}
		}
	}
	inputs := slices.Concat(fs.Args(), *calFrom, *lineFiles, *dark)
	if err := cmp.Or(
		clobbers("measure", "--save-calibration", *saveCal, inputs...),
		clobbers("measure", "--save-strip", *saveStrip, inputs...),
		outside("measure", "position-floor", *floor, 0, 5, " px"),
		outside("measure", "min-snr", *minSNR, 1, 1000, " (noise σ)"),
		outside("measure", "match-tolerance", *tol, 0.01, 50, " nm"),
		outside("measure", "lines-per-mm", *lpm, 0, 10000, ""),
	); err != nil {
		return err
	}
	cfg := measureConfig{lamp: *lamp, calLamp: *calLamp, model: *model, minSNR: *minSNR, linear: *linear, tolNM: *tol, floorPX: *floor,
		linesPerMM: *lpm, imageOpts: imaging.Options{Linear: *linear}, dark: *dark, bands: *bands}
	photos := fs.Args()
	if *stack && len(photos) > 1 {
		cfg.frames, photos = photos[1:], photos[:1]
	}
	if *roi != "" {
		var x, y, w, h int
		if n, err := fmt.Sscanf(*roi, "%d,%d,%d,%d", &x, &y, &w, &h); err != nil || n != 4 || w < 8 || h < 4 || x < 0 || y < 0 {
			return usagef("measure: --roi %q: want X,Y,WIDTH,HEIGHT in pixels", *roi)
		}
		cfg.imageOpts.ROI = image.Rect(x, y, x+w, y+h)
	}
	if *angle != "" {
		a, err := strconv.ParseFloat(*angle, 64)
		if err != nil || !(math.Abs(a) <= 90) { // (NaN too)
			return usagef("measure: --angle %q: want degrees between -90 and 90", *angle)
		}
		cfg.imageOpts.FixAngle, cfg.imageOpts.AngleDeg = true, a
	}
	if *saveStrip != "" {
		cfg.imageOpts.KeepImage, cfg.imageOpts.ImageMaxWidth = true, stripImageWidth
		cfg.saveStrip = *saveStrip
	}
	for _, p := range *lineFiles {
		l, err := readLampFile(p)
		if err != nil {
			return err
		}
		cfg.extra = append(cfg.extra, l)
	}
	for _, s := range *pins {
		p, err := parsePin(s)
		if err != nil {
			return usagef("measure: --line %q: %v", s, err)
		}
		cfg.pins = append(cfg.pins, p)
	}
	for _, l := range []string{cfg.lamp, cfg.calLamp} {
		if l != "" {
			if _, err := cfg.lampByName(l); err != nil {
				return usagef("measure: %v", err)
			}
		}
	}
	switch cfg.model {
	case "", calibrate.ModelPoly1, calibrate.ModelPoly2, calibrate.ModelPoly3, calibrate.ModelGrating, calibrate.ModelLens:
	default:
		return usagef("measure: --model %q: want poly1, poly2, poly3, grating or grating-lens", cfg.model)
	}

	doc := document{Tool: "lineshot", Schema: 1}
	var cal *calibration
	if len(*calFrom) > 0 {
		c, res, err := buildCalibration(*calFrom, cfg)
		doc.Calibrations = append(doc.Calibrations, res...)
		if err != nil {
			if !*asJSON {
				printResults(stdout, doc)
			}
			return err
		}
		cal = &c
		if *saveCal != "" {
			if err := writeJSONAtomic(*saveCal, c); err != nil {
				return err
			}
		}
	}
	failed, measured := 0, 0
	for _, path := range photos {
		if ctx.Err() != nil {
			// Interrupted (Ctrl-C, SIGTERM): the photos measured so far
			// are printed (a complete JSON document of them with --json),
			// not thrown away.
			break
		}
		measured++
		results := []imageResult{}
		if cfg.bands {
			results = measureBands(path, cal, cfg)
		} else {
			results = append(results, measureOne(path, cal, cfg))
		}
		for _, r := range results {
			if r.Error != "" {
				failed++
				say(stderr, "lineshot: %s", r.Error)
			}
			doc.Images = append(doc.Images, r)
		}
	}
	if *asJSON {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		if err := enc.Encode(doc); err != nil {
			return err
		}
	} else {
		printResults(stdout, doc)
	}
	if measured < len(photos) {
		say(stderr, "lineshot: interrupted: %d of %d photos measured, their results given; run again for the rest", measured, len(photos))
		return errReported
	}
	if failed > 0 {
		return errReported
	}
	return nil
}

func parsePin(s string) (calibrate.Pin, error) {
	a, b, ok := strings.Cut(s, "@")
	if !ok {
		return calibrate.Pin{}, errors.New("want NM@PX, e.g. 546.074@1234.5")
	}
	nm, err1 := strconv.ParseFloat(strings.TrimSpace(a), 64)
	px, err2 := strconv.ParseFloat(strings.TrimSpace(b), 64)
	if err1 != nil || err2 != nil || nm <= 0 || !finite(px) {
		return calibrate.Pin{}, errors.New("want two numbers NM@PX, e.g. 546.074@1234.5")
	}
	return calibrate.Pin{NM: nm, PX: px}, nil
}

// calibration is a dispersion with the band geometry of the photo it came
// from, so that it applies to other photos of the same fixed setup: a line
// at original-image (x, y) lies at position (x−Ox)·cos θ + (y−Oy)·sin θ.
type calibration struct {
	Schema   int        `json:"lineshot_calibration"`
	Source   string     `json:"source"`
	Lamp     string     `json:"lamp"`
	AngleDeg float64    `json:"angle_deg"`
	Origin   [2]float64 `json:"origin_xy"`
	FrameW   int        `json:"frame_width"`
	FrameH   int        `json:"frame_height"`
	// AcrossPX is the calibration band's mean distance across the band
	// direction from the optical axis (the frame's centre), px.
	AcrossPX   float64              `json:"across_px,omitempty"`
	Dispersion calibrate.Dispersion `json:"dispersion"`
}

func (c calibration) position(x, y float64) float64 {
	sn, cs := math.Sincos(c.AngleDeg * math.Pi / 180)
	return (x-c.Origin[0])*cs + (y-c.Origin[1])*sn
}

// across is how far (x, y) lies across the band direction from the optical
// axis, taken at the frame's centre (as the grating model's principal
// point is): what the dispersion needs for a band other than its own.
func (c calibration) across(x, y float64) float64 {
	sn, cs := math.Sincos(c.AngleDeg * math.Pi / 180)
	cx, cy := float64(c.FrameW-1)/2, float64(c.FrameH-1)/2
	return -(x-cx)*sn + (y-cy)*cs
}

// at is the dispersion for a line at original-image (x, y).
func (c calibration) at(x, y float64) calibrate.Dispersion {
	return c.Dispersion.Across(c.across(x, y))
}

// buildCalibration reads a saved calibration (one .json) or measures one
// or more calibration photos of the same setup (several lamps: one fit
// over all their lines, expressed in the first photo's band geometry).
// It also returns the photos' results.
func buildCalibration(paths []string, cfg measureConfig) (calibration, []imageResult, error) {
	if len(paths) == 1 && strings.EqualFold(filepath.Ext(paths[0]), ".json") {
		c, err := readCalibration(paths[0])
		return c, nil, err
	}
	var ids []selfID
	var results []imageResult
	for _, p := range paths {
		if strings.EqualFold(filepath.Ext(p), ".json") {
			return calibration{}, results, usagef("measure: %s: a saved calibration cannot be combined with other calibration inputs", p)
		}
		ccfg := cfg
		ccfg.lamp = cfg.calLamp
		ccfg.dark, ccfg.frames = nil, nil
		// Hydrogen is tried too, to be recognised: a hydrogen photo given
		// as the calibration was taken for neon (its three Balmer lines fit
		// somewhere in neon's many, confidence 0.75), and the hydrogen
		// lines were then "measured" against it without a word.
		lamps := cfg.calibrationLamps()
		if cfg.calLamp == "" {
			lamps = append(lamps, calibrate.Hydrogen())
		}
		id, r := identifySelf(p, ccfg, lamps)
		if r.Error == "" && cfg.calLamp == "" && id.id.Lamp == "hydrogen" {
			r.Error = fmt.Sprintf("%s: this is a hydrogen lamp (its Balmer lines, confidence %.2f), not a calibration lamp: calibrate with a mercury (or helium, neon) photo of the same setup, or give --calibration-lamp hydrogen to calibrate on the Balmer lines themselves", p, r.LampScore)
		}
		if r.Error != "" {
			results = append(results, r)
			return calibration{}, results, fmt.Errorf("calibration %s", r.Error)
		}
		ids = append(ids, id)
		results = append(results, r)
	}
	return combineCalibration(ids, results, paths, cfg)
}

// combineCalibration fits one dispersion to the identified lines of one or
// more calibration photos of a setup, in the first photo's band geometry,
// and applies it to each photo's result.
func combineCalibration(ids []selfID, results []imageResult, paths []string, cfg measureConfig) (calibration, []imageResult, error) {
	first := ids[0].m.strip
	cal := calibration{Schema: 1, Source: strings.Join(paths, " + "), AngleDeg: first.AngleDeg, Origin: first.Origin,
		FrameW: first.FrameW, FrameH: first.FrameH}
	var pts []calibrate.Point
	var lamps []string
	fopt := calibrate.FitOptions{Model: cfg.model, OpticalCenterPX: cal.position(float64(first.FrameW-1)/2, float64(first.FrameH-1)/2),
		LinesPerMM: cfg.linesPerMM, EstimateFloor: true}
	// Each photo's orders (zero order, both first orders, second order) from its own
	// lines; then every point in the first photo's geometry.
	sets := make([]calibrate.OrderSet, len(ids))
	anySigned := false
	for k, id := range ids {
		o := fopt
		o.OpticalCenterPX, o.EstimateFloor = id.m.strip.OpticalCenter, false
		sets[k] = calibrate.FindOrders(id.m.calPeaks(), id.id, id.lamp, o)
		anySigned = anySigned || sets[k].Signed()
	}
	for k, id := range ids {
		lamps = append(lamps, id.id.Lamp)
		set := sets[k].Points
		// A photo with one first order joining a signed fit: its lines are
		// on the side where m·λ rises with position, as the others' are.
		m := 0
		if anySigned && !sets[k].Signed() {
			m = oneSidedOrder(set)
		}
		for _, p := range set {
			x, y := id.m.strip.ToImage(p.PX)
			p.PX, p.AcrossPX = cal.position(x, y), cal.across(x, y)
			if m != 0 {
				p.Order = m
			}
			pts = append(pts, p)
		}
		if k > 0 {
			results[k].Warnings = append(results[k].Warnings, setupMoved(id.m.strip, cal)...)
		}
	}
	cal.Lamp = strings.Join(lamps, "+")
	for _, p := range pts {
		cal.AcrossPX += p.AcrossPX / float64(len(pts))
	}
	d, err := calibrate.FitDispersion(pts, fopt)
	if err != nil {
		results[0].Error = fmt.Sprintf("%s: dispersion fit: %v", paths[0], err)
		return calibration{}, results, fmt.Errorf("calibration %s", results[0].Error)
	}
	cal.Dispersion = d
	for k, id := range ids {
		applyCalibration(&results[k], cal, id.lamp, cfg, sets[k].Matches)
	}
	return cal, results, nil
}

// oneSidedOrder is the sign of the first order that calibration points of
// one side of the zero order belong to in a signed fit, where m·λ rises
// with position: +1 when their wavelengths rise with position, else −1.
func oneSidedOrder(pts []calibrate.Point) int {
	lo, hi := 0, 0
	for i, p := range pts {
		if p.PX < pts[lo].PX {
			lo = i
		}
		if p.PX > pts[hi].PX {
			hi = i
		}
	}
	if pts[hi].NM < pts[lo].NM {
		return -1
	}
	return 1
}

func readCalibration(path string) (calibration, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return calibration{}, err
	}
	var c calibration
	dec := json.NewDecoder(strings.NewReader(string(b)))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&c); err != nil {
		return calibration{}, fmt.Errorf("%s: not a lineshot calibration: %v", path, err)
	}
	if err := c.validate(); err != nil {
		return calibration{}, fmt.Errorf("%s: %v", path, err)
	}
	return c, nil
}

// validate rejects a calibration file that was edited into nonsense rather
// than half-using it.
func (c calibration) validate() error {
	d := c.Dispersion
	if c.Schema != 1 {
		return fmt.Errorf("unknown calibration format version %d", c.Schema)
	}
	k := map[string]int{calibrate.ModelPoly1: 2, calibrate.ModelPoly2: 3, calibrate.ModelPoly3: 4, calibrate.ModelGrating: 3, calibrate.ModelLens: 4}[d.Model]
	if k == 0 || len(d.Params) != k || len(d.Cov) != k {
		return fmt.Errorf("dispersion model %q with %d parameters is not valid", d.Model, len(d.Params))
	}
	for _, row := range d.Cov {
		if len(row) != k {
			return errors.New("covariance matrix has the wrong shape")
		}
	}
	if !(d.Scale > 0) || math.IsNaN(c.AngleDeg) {
		return errors.New("scale or angle missing")
	}
	check := []float64{d.MinPX, (d.MinPX + d.MaxPX) / 2, d.MaxPX}
	if d.Signed {
		check = check[:1:1] // the middle may be the zero order
		check = append(check, d.MaxPX)
	}
	for _, p := range check {
		w, _ := d.Resolve(p)
		if math.IsNaN(w) || w < 100 || w > 3000 {
			return fmt.Errorf("gives %.1f nm at %.0f px: not a plausible calibration", w, p)
		}
	}
	return nil
}

// imageResult is the JSON record of one photo. Field names are part of the
// documented output format.
type imageResult struct {
	File        string             `json:"file"`
	Lamp        string             `json:"lamp"`
	LampScore   float64            `json:"lamp_confidence"`
	Lines       []lineResult       `json:"lines"`
	Calibration *calibrationOut    `json:"calibration,omitempty"`
	Rydberg     *calibrate.Rydberg `json:"rydberg,omitempty"`
	Quality     *quality           `json:"quality,omitempty"`
	Warnings    []string           `json:"warnings,omitempty"`
	Error       string             `json:"error,omitempty"`
}

type lineResult struct {
	X               float64 `json:"x"`
	Y               float64 `json:"y"`
	PositionPX      float64 `json:"position_px"`
	PositionErrPX   float64 `json:"position_err_px"`
	WavelengthNM    float64 `json:"wavelength_nm"` // air
	WavelengthErrNM float64 `json:"wavelength_err_nm"`
	VacuumNM        float64 `json:"vacuum_nm"`
	FWHMPX          float64 `json:"fwhm_px"`
	Height          float64 `json:"height"`
	SNR             float64 `json:"snr"`
	Saturated       bool    `json:"saturated"`
	Channel         string  `json:"channel,omitempty"` // R, G or B: a saturated line measured in this unclipped channel
	ID              string  `json:"id"`
	RefNM           float64 `json:"ref_nm,omitempty"`
	DeltaNM         float64 `json:"delta_nm,omitempty"` // measured − reference
	N               int     `json:"n,omitempty"`
	// Order is the signed diffraction order (±1) when the calibration
	// spans the zero order or both first orders; the zero order itself
	// is the line with ID "zero order".
	Order int `json:"order,omitempty"`
}

type calibrationOut struct {
	From       string               `json:"from"`
	Lamp       string               `json:"lamp"`
	Dispersion calibrate.Dispersion `json:"dispersion"`
	Grating    *gratingOut          `json:"grating,omitempty"`
}

type gratingOut struct {
	DNM      float64 `json:"d_over_m_nm"`
	LinesMM  float64 `json:"lines_per_mm_order1"`
	AngleDeg float64 `json:"camera_angle_deg"`
	FocalPX  float64 `json:"focal_px"`
}

type quality struct {
	AngleDeg        float64       `json:"angle_deg"`
	Band            [4][2]float64 `json:"band_corners_xy"`
	BandHalfHeight  float64       `json:"band_half_height_px"`
	Background      float64       `json:"background"`
	BackgroundRange float64       `json:"background_range"`
	StrayLight      bool          `json:"stray_light,omitempty"`
	Noise           float64       `json:"frame_noise"`
	ProfileNoise    float64       `json:"profile_noise"`
	Saturated       float64       `json:"saturated_fraction"`
	ResidualTiltDeg float64       `json:"residual_tilt_deg"`
	ResidualTiltErr float64       `json:"residual_tilt_err_deg,omitempty"`
	Frames          int           `json:"frames_averaged,omitempty"` // exposures averaged (video, --stack)
	DarkFrames      int           `json:"dark_frames,omitempty"`     // dark frames subtracted
}

type document struct {
	Tool         string        `json:"tool"`
	Schema       int           `json:"schema"`
	Calibrations []imageResult `json:"calibration_photos,omitempty"`
	Images       []imageResult `json:"images"`
}

// measured is a photo's strip and peaks, before any wavelength is known.
type measured struct {
	strip imaging.Strip
	found peaks.Result
}

func extractAndFind(path string, cfg measureConfig) (measured, error) {
	var s imaging.Strip
	var err error
	if len(cfg.dark) > 0 || len(cfg.frames) > 0 || imaging.IsVideo(path) {
		s, err = imaging.ExtractStack(imaging.Stack{Frames: append([]string{path}, cfg.frames...), Dark: cfg.dark}, cfg.imageOpts)
	} else {
		s, err = imaging.Extract(path, cfg.imageOpts)
	}
	if err != nil {
		return measured{}, err
	}
	return findLines(s, path, cfg)
}

// findLines measures the lines of a straightened band; path names it in
// errors.
func findLines(s imaging.Strip, path string, cfg measureConfig) (measured, error) {
	fail := func(err error) (measured, error) {
		return measured{}, imaging.WithDamage(fmt.Errorf("%s: %w", path, err), s.Damage)
	}
	r, err := peaks.Find(s.Profile, peaks.Options{MinSNR: cfg.minSNR, Clipped: s.Clipped, NoiseShape: s.NoiseShape, Workers: cfg.imageOpts.Workers})
	if err != nil {
		return fail(err)
	}
	fromUnclippedChannel(s, &r, cfg.minSNR, cfg.imageOpts.Workers)
	if len(r.Peaks) == 0 {
		return fail(fmt.Errorf("no line stands above the noise (threshold %.1fσ)", cfg.minSNR))
	}
	if w := noNoise(r); w != "" {
		// In place of the band's warning of a flat background, the
		// same cause gone further.
		s.Warnings = slices.DeleteFunc(slices.Clone(s.Warnings), func(w string) bool { return strings.HasPrefix(w, imaging.FlatBackgroundWarning) })
		s.Warnings = append(s.Warnings, w)
	}
	if cfg.saveStrip != "" {
		if err := writeStripImage(cfg.saveStrip, measured{strip: s, found: r}, false); err != nil {
			return measured{}, err
		}
	}
	// The fit's σ is the statistical part; a user-given floor adds a
	// systematic part (the calibration adds the one it measures).
	for i := range r.Peaks {
		r.Peaks[i].Sigma = math.Hypot(r.Peaks[i].Sigma, cfg.floorPX)
	}
	return measured{strip: s, found: r}, nil
}

// noNoise warns when the profile shows no noise to speak of: none at all,
// or the strongest line more than a million times it. A photo compressed
// hard (a JPEG of quality 40, measured: noise exactly 0) has had its noise
// smoothed away; the detection threshold, a multiple of the noise, then
// lets the compression's ringing beside strong lines pass for lines (20
// found for a hydrogen lamp's 5), and the uncertainties rest on their
// floors alone. No real camera's photo is that clean.
func noNoise(r peaks.Result) string {
	top := 0.0
	for _, p := range r.Peaks {
		top = math.Max(top, p.Height)
	}
	if r.Noise > 0 && top < 1e6*r.Noise {
		return ""
	}
	return "the profile shows no noise (the photo's compression smoothed it away): the compression's ringing beside strong lines may pass for lines, and the uncertainties rest on their floors; save the photo at a higher quality"
}

// fromUnclippedChannel measures each saturated line again in the colour
// channel where it is brightest without a clipped sample within two FWHM
// of its centre (in a phone photo a green line clipped in G often stands
// well exposed in R or B), and takes that channel's centre and σ (marking
// the line's Channel) when the profile's own fit, made on the unclipped
// flanks alone, is the weaker: no model fit (a plain centroid), or a σ
// more than twice the channel's with the two centres agreeing within 3σ.
// On simulated photos with a Gaussian blur the flank fit was as good as
// the channel's (0.02-0.03 px either way) and the channel's, from
// chroma-subsampled JPEG, was once 0.9 px off with a σ of 0.02 px: so the
// flanks are preferred whenever they hold. workers is the photo's share
// of the CPUs (peaks.Options.Workers).
func fromUnclippedChannel(s imaging.Strip, r *peaks.Result, minSNR float64, workers int) {
	if s.Channels[0] == nil || s.ChannelClipped[0] == nil {
		return
	}
	var found [3]*peaks.Result
	for i := range r.Peaks {
		p := &r.Peaks[i]
		if !p.Saturated {
			continue
		}
		n := len(s.Channels[0])
		lo, hi := max(0, int(p.Center-2*p.FWHM)), min(n-1, int(p.Center+2*p.FWHM)+1)
		best, bestH := -1, 0.0
		for c := 0; c < 3; c++ {
			clipped := false
			for j := lo; j <= hi; j++ {
				clipped = clipped || s.ChannelClipped[c][j]
			}
			if clipped {
				continue
			}
			for j := lo; j <= hi; j++ {
				if v := s.Channels[c][j]; v > bestH {
					best, bestH = c, v
				}
			}
		}
		if best < 0 {
			continue
		}
		if found[best] == nil {
			res, err := peaks.Find(s.Channels[best], peaks.Options{MinSNR: minSNR, Clipped: s.ChannelClipped[best], Workers: workers})
			if err != nil {
				continue
			}
			found[best] = &res
		}
		for _, q := range found[best].Peaks {
			if math.Abs(q.Center-p.Center) > math.Max(1, p.FWHM/2) || q.Saturated || q.SNR < 10 {
				continue
			}
			agree := math.Abs(q.Center-p.Center) < 3*math.Hypot(p.Sigma, q.Sigma)
			if p.Method == "centroid" || (p.Sigma > 2*q.Sigma && agree) {
				p.Center, p.Sigma, p.Channel = q.Center, q.Sigma, "RGB"[best:best+1]
			}
			break
		}
	}
}

func (m measured) baseResult(path string) imageResult {
	r := imageResult{File: path, Quality: &quality{
		AngleDeg: m.strip.AngleDeg, Band: m.strip.Band, BandHalfHeight: m.strip.BandHalfHeight,
		Background: m.strip.Background, BackgroundRange: m.strip.BackgroundRange, StrayLight: m.strip.StrayLight, Noise: m.strip.Noise,
		Frames: m.strip.Frames, DarkFrames: m.strip.DarkFrames, ProfileNoise: m.found.Noise, Saturated: m.strip.Saturated,
	}}
	for _, p := range m.found.Peaks {
		x, y := m.strip.ToImage(p.Center)
		r.Lines = append(r.Lines, lineResult{X: x, Y: y, PositionPX: p.Center, PositionErrPX: p.Sigma, FWHMPX: p.FWHM,
			Height: p.Height, SNR: p.SNR, Saturated: p.Saturated, Channel: p.Channel})
	}
	r.Warnings = append(r.Warnings, m.strip.Warnings...)
	r.Quality.ResidualTiltDeg = m.strip.ResidualTiltDeg
	if e := m.strip.ResidualTiltErrDeg; !math.IsInf(e, 0) && !math.IsNaN(e) {
		r.Quality.ResidualTiltErr = e
	}
	if m.strip.Saturated > 0.001 {
		r.Warnings = append(r.Warnings, fmt.Sprintf("%.1f%% of the band's pixels are saturated: saturated lines were measured on their flanks", 100*m.strip.Saturated))
	}
	return r
}

func (m measured) calPeaks() []calibrate.Peak {
	out := make([]calibrate.Peak, len(m.found.Peaks))
	for i, p := range m.found.Peaks {
		out[i] = calibrate.Peak{PX: p.Center, SigmaPX: p.Sigma, Height: p.Height}
	}
	return out
}

// selfID is a photo identified against reference lamps with no hints.
type selfID struct {
	m    measured
	id   calibrate.Identification
	lamp calibrate.Lamp
}

// identifySelf measures a photo's lines and identifies them against the
// candidate lamps (the one named by cfg.lamp when set). On failure the
// result carries the error.
func identifySelf(path string, cfg measureConfig, lamps []calibrate.Lamp) (selfID, imageResult) {
	m, err := extractAndFind(path, cfg)
	if err != nil {
		return selfID{}, imageResult{File: path, Error: err.Error()}
	}
	return identify(m, path, cfg, lamps)
}

// identify is identifySelf on a photo already measured.
func identify(m measured, path string, cfg measureConfig, lamps []calibrate.Lamp) (selfID, imageResult) {
	r := m.baseResult(path)
	if cfg.lamp != "" {
		l, _ := cfg.lampByName(cfg.lamp)
		lamps = []calibrate.Lamp{l}
	}
	// A "band" a few pixels across is one line image seen lengthwise: the
	// photo holds a single line, whose profile is no spectrum to match.
	single := m.strip.BandHalfHeight < 6 && len(cfg.pins) == 0
	for _, p := range cfg.pins {
		// A pin holds the peak nearest its position: one far outside the
		// profile held the last peak, and a mercury photo pinned at
		// 546@99999999999 came out as a compact fluorescent lamp.
		if n := len(m.strip.Profile); p.PX < 0 || p.PX > float64(n-1) {
			r.Error = fmt.Sprintf("%s: --line %g@%g: the position lies outside the profile (0-%d px)", path, p.NM, p.PX, n-1)
			return selfID{}, r
		}
	}
	var ids []calibrate.Identification
	if !single {
		ids = calibrate.Classify(m.calPeaks(), lamps, calibrate.IdentifyOptions{Pins: cfg.pins, Workers: cfg.imageOpts.Workers})
	}
	if len(ids) == 0 {
		if hasLamp(lamps, "sodium") && oneYellowLine(m, path, cfg, single) {
			r.Lamp, r.LampScore = "sodium", 0.5
			at := ""
			if single {
				// The profile ran along the line image: its samples are no
				// lines. Say where the one line is instead.
				x, y := m.strip.ToImage(profileCentroid(m.strip.Profile))
				at = fmt.Sprintf(" at (%.0f, %.0f)", x, y)
				r.Lines = nil
			}
			r.Warnings = append(r.Warnings, fmt.Sprintf("one yellow line%s and nothing else: a sodium lamp, recognised by its colour (its D pair has no pattern to identify, nor a band direction of its own); measure it with a calibration of the setup (-c) for its wavelength", at))
			return selfID{m: m, id: calibrate.Identification{Lamp: "sodium"}}, r
		}
		r.Error = fmt.Sprintf("%s: the %d lines found match no known lamp's pattern (name the lamp with --lamp, or pin a line with --line)", path, len(m.found.Peaks))
		return selfID{}, r
	}
	var lamp calibrate.Lamp
	for _, l := range lamps {
		if l.Name == ids[0].Lamp {
			lamp = l
		}
	}
	r.Lamp, r.LampScore = ids[0].Lamp, confidence(ids)
	if w := lampDoubt(ids); w != "" { // (a lamp named is the only one tried)
		r.Warnings = append(r.Warnings, w)
	}
	if cfg.lamp != "" && r.LampScore < namedLampPoor {
		// The lamp was named and its lines explain the photo poorly: say
		// so, with what the photo is taken for unnamed.
		w := fmt.Sprintf("the lines match the lamp named, %s, poorly (confidence %.2f)", r.Lamp, r.LampScore)
		if best := calibrate.Classify(m.calPeaks(), cfg.lamps(), calibrate.IdentifyOptions{Workers: cfg.imageOpts.Workers}); len(best) > 0 && best[0].Lamp != r.Lamp {
			w += fmt.Sprintf("; unnamed, the photo is recognised as %s (confidence %.2f)", best[0].Lamp, confidence(best))
		}
		r.Warnings = append(r.Warnings, w+": is it the right lamp?")
	}
	return selfID{m: m, id: ids[0], lamp: lamp}, r
}

// lampInDoubt is the confidence below which a lamp recognised unnamed is
// said to be in doubt, when the runner-up reads the lines differently: it
// scores two thirds of the best or more.
const lampInDoubt = 0.6

// lampDoubt is the warning for a lamp recognised with little to choose
// between it and another that gives the photo's lines other wavelengths,
// or "" (see doubtedBy).
func lampDoubt(ids []calibrate.Identification) string {
	other, c, ok := doubtedBy(ids)
	if !ok {
		return ""
	}
	return fmt.Sprintf("the lamp is in doubt: recognised as %s (confidence %.2f), but the lines fit %s nearly as well, with other wavelengths; if it is not %s, name the lamp (--lamp, or in a batch a settings line 'lamp: FILE LAMP')",
		ids[0].Lamp, c, other.Lamp, ids[0].Lamp)
}

// doubtedBy returns the first runner-up that scores close enough to the
// best identification (confidence against it under lampInDoubt) and reads
// the lines as other wavelengths, with that confidence. A lamp whose lines
// the best lamp's include (a fluorescent lamp's mercury lines beside a
// mercury lamp's) gives the peaks both match the same wavelengths: the
// calibration is the same whichever is meant, and it raises no doubt.
func doubtedBy(ids []calibrate.Identification) (other calibrate.Identification, conf float64, ok bool) {
	for _, other := range ids[1:] {
		c := confidence([]calibrate.Identification{ids[0], other})
		if c >= lampInDoubt {
			break // the rest score lower still
		}
		if !sameReading(ids[0], other) {
			return other, c, true
		}
	}
	return calibrate.Identification{}, 0, false
}

// sameReading reports whether two identifications give every peak both
// match the same wavelength (within 0.5 nm), and share at least two.
func sameReading(a, b calibrate.Identification) bool {
	at := map[int]float64{}
	for _, m := range a.Matches {
		at[m.Peak] = m.Line.NM
	}
	shared := 0
	for _, m := range b.Matches {
		if nm, ok := at[m.Peak]; ok {
			if math.Abs(nm-m.Line.NM) > 0.5 {
				return false
			}
			shared++
		}
	}
	return shared >= 2
}

// namedLampPoor is the confidence below which a lamp named with --lamp
// (or --calibration-lamp) is said to fit poorly: on the demo photos the
// right lamp named scored 0.86-1.00 and a wrong one 0.00-0.13.
const namedLampPoor = 0.3

// oneYellowLine reports whether a photo holds a single strong line (at
// least 85 % of the height of everything at SNR ≥ 20, or single: the band
// found is one line image seen lengthwise) whose light is
// yellow: red and green both present (green 0.2-1.5 times red) and blue
// under a tenth of the whole. A single yellow line is a sodium lamp's D
// pair (common practice: no other lamp lineshot knows shows one yellow
// line alone; helium's and mercury's yellow lines come with others). The
// colour needs the band's channels, so the photo is measured again with
// them when they were not kept.
func oneYellowLine(m measured, path string, cfg measureConfig, single bool) bool {
	var total, top float64
	for _, p := range m.found.Peaks {
		if p.SNR >= 20 {
			total += p.Height
			top = math.Max(top, p.Height)
		}
	}
	if !single && (total == 0 || top < 0.85*total) {
		return false
	}
	s := m.strip
	if s.Channels[0] == nil {
		if _, err := os.Stat(path); err != nil {
			return false
		}
		o := cfg.imageOpts
		o.Channels = true
		var err error
		if s, err = imaging.Extract(path, o); err != nil || s.Channels[0] == nil {
			return false
		}
	}
	var rgb [3]float64
	for c := range rgb {
		for _, v := range s.Channels[c] {
			rgb[c] += math.Max(0, v)
		}
	}
	sum := rgb[0] + rgb[1] + rgb[2]
	if sum <= 0 || rgb[0] <= 0 {
		return false
	}
	g := rgb[1] / rgb[0]
	return rgb[2]/sum < 0.1 && g >= 0.2 && g <= 1.5
}

// profileCentroid is the position of a profile's centre of light.
func profileCentroid(p []float64) float64 {
	var sw, sx float64
	for i, v := range p {
		if v > 0 {
			sw += v
			sx += v * float64(i)
		}
	}
	if sw == 0 {
		return float64(len(p)) / 2
	}
	return sx / sw
}

func hasLamp(lamps []calibrate.Lamp, name string) bool {
	for _, l := range lamps {
		if l.Name == name {
			return true
		}
	}
	return false
}

// measureSelf measures a photo that calibrates itself: its lines are
// identified with no hints and the dispersion is fitted to them.
func measureSelf(path string, cfg measureConfig) imageResult {
	m, err := extractAndFind(path, cfg)
	if err != nil {
		return imageResult{File: path, Error: err.Error()}
	}
	return measureSelfFrom(m, path, cfg)
}

// measureSelfFrom is measureSelf on a photo already measured.
func measureSelfFrom(m measured, path string, cfg measureConfig) imageResult {
	s, r := identify(m, path, cfg, cfg.lamps())
	if r.Error != "" || len(s.id.Matches) == 0 {
		return r // failed, or recognised without lines to calibrate on (sodium by colour)
	}
	// The photo is its own calibration photo: one photo's calibration.
	_, res, err := combineCalibration([]selfID{s}, []imageResult{r}, []string{path}, cfg)
	if r = res[0]; err != nil {
		return r
	}
	if s.id.Lamp == "hydrogen" {
		r.Warnings = append(r.Warnings, "calibrated on its own Balmer lines, so no Rydberg constant is fitted: calibrate with a mercury (or helium) photo of the same setup (--calibration-from)")
	}
	return r
}

// confidence turns the best two lamp scores into a plain 0-1 figure: the
// best score's share of the two.
func confidence(ids []calibrate.Identification) float64 {
	if len(ids) == 1 {
		return ids[0].Score
	}
	a, b := ids[0].Score, ids[1].Score
	if a+b == 0 {
		return 0
	}
	return a / (a + b)
}

// measureOne measures a photo, with the calibration of its setup when one
// is given.
func measureOne(path string, cal *calibration, cfg measureConfig) imageResult {
	if cal == nil {
		return measureSelf(path, cfg)
	}
	m, err := extractAndFind(path, cfg)
	if err != nil {
		return imageResult{File: path, Error: err.Error()}
	}
	return measureWith(alongCalibration(m, path, *cal, cfg), path, *cal, cfg)
}

// measureBands measures every band of a photo on its own. With a
// calibration each band is measured with it; without one, the bands whose
// lines identify a calibration lamp (not hydrogen) are fitted together
// into one calibration, as several calibration photos of a setup are,
// and it is applied to the other bands. Each result is named after the
// photo and its band.
func measureBands(path string, cal *calibration, cfg measureConfig) []imageResult {
	strips, err := imaging.ExtractBands(path, cfg.imageOpts)
	if err != nil {
		return []imageResult{{File: path, Error: err.Error()}}
	}
	name := func(s imaging.Strip) string {
		return fmt.Sprintf("%s [band %d of %d]", path, s.BandIndex+1, s.BandCount)
	}
	var ms []measured
	var out []imageResult
	for _, s := range strips {
		m, err := findLines(s, name(s), cfg)
		if err != nil {
			out = append(out, imageResult{File: name(s), Error: err.Error()})
			continue
		}
		ms = append(ms, m)
	}
	if cal != nil {
		for _, m := range ms {
			out = append(out, measureWith(m, name(m.strip), *cal, cfg))
		}
		return out
	}
	// Sort the bands: calibration lamps, and the rest.
	var calIDs []selfID
	var calRes []imageResult
	var calNames []string
	var others []measured
	for _, m := range ms {
		s, r := identify(m, name(m.strip), cfg, cfg.lamps())
		if r.Error != "" || s.id.Lamp == "hydrogen" {
			others = append(others, m)
			continue
		}
		calIDs, calRes, calNames = append(calIDs, s), append(calRes, r), append(calNames, name(m.strip))
	}
	if len(calIDs) == 0 {
		// No calibration lamp among the bands: each calibrates itself.
		for _, m := range ms {
			out = append(out, measureSelfFrom(m, name(m.strip), cfg))
		}
		return out
	}
	ccfg := cfg
	if ccfg.model == "" && len(others) > 0 {
		// Only the grating model knows how lines move in a band away
		// from the calibration band's (conical diffraction, Across).
		ccfg.model = calibrate.ModelGrating
	}
	c, res, err := combineCalibration(calIDs, calRes, calNames, ccfg)
	out = append(out, res...)
	if err != nil {
		for _, m := range others {
			out = append(out, measureSelfFrom(m, name(m.strip), cfg))
		}
		return out
	}
	bcfg := cfg
	bcfg.sameFrame = true
	for _, m := range others {
		out = append(out, measureWith(m, name(m.strip), c, bcfg))
	}
	return out
}

// alongCalibration measures a photo again along the calibration's band
// direction when the band found runs across it (more than 20° off): a lamp
// with one bright line, such as sodium, shows no band of its own, and the
// length of its line image is taken for one. A small turn is left alone
// (setupMoved warns about it).
func alongCalibration(m measured, path string, cal calibration, cfg measureConfig) measured {
	d := math.Mod(math.Abs(m.strip.AngleDeg-cal.AngleDeg), 180)
	if d > 90 {
		d = 180 - d
	}
	if d <= 20 || cfg.imageOpts.FixAngle {
		return m
	}
	c := cfg
	c.imageOpts.FixAngle, c.imageOpts.AngleDeg = true, cal.AngleDeg
	if m2, err := extractAndFind(path, c); err == nil {
		return m2
	}
	return m
}

// measureWith applies a setup's calibration to a photo already measured,
// recognises its lamp and fits R when it is hydrogen.
func measureWith(m measured, path string, cal calibration, cfg measureConfig) imageResult {
	r := m.baseResult(path)
	if !cfg.sameFrame {
		r.Warnings = append(r.Warnings, setupMoved(m.strip, cal)...)
	}
	// Which lamp is it? The one whose lines the calibrated wavelengths hit
	// best, weighted by the heights of the lines they explain.
	lamps := cfg.lamps()
	if cfg.lamp != "" {
		l, _ := cfg.lampByName(cfg.lamp)
		lamps = []calibrate.Lamp{l}
	}
	nm, sig := make([]float64, len(r.Lines)), make([]float64, len(r.Lines))
	side := make([]int, len(r.Lines))
	var total float64
	for i, l := range r.Lines {
		p, d := cal.position(l.X, l.Y), cal.at(l.X, l.Y)
		nm[i], side[i] = d.Resolve(p)
		sig[i] = d.Sigma(p, l.PositionErrPX)
		total += l.Height
	}
	best, bestScore, second := calibrate.Lamp{}, -1.0, 0.0
	for _, l := range lamps {
		var s float64
		// Each explained line counts by its height, less the further it
		// lies from its reference (a lamp whose line is 0.1 nm away beats
		// one whose line is 0.9 nm away; both are within tolerance).
		for _, mt := range assignBySide(nm, sig, side, l, cfg.tolNM) {
			z := (nm[mt.Peak] - mt.Line.NM) / math.Max(cfg.tolNM, 4*sig[mt.Peak])
			s += r.Lines[mt.Peak].Height * math.Exp(-z*z/2)
		}
		s /= total
		if s > bestScore {
			best, second, bestScore = l, math.Max(second, bestScore), s
		} else {
			second = math.Max(second, s)
		}
	}
	r.Lamp = best.Name
	r.LampScore = bestScore
	if bestScore+second > 0 {
		r.LampScore = bestScore / (bestScore + second)
	}
	applyCalibration(&r, cal, best, cfg, nil)
	if best.Name == "hydrogen" {
		fitBalmer(&r, cal)
	}
	return r
}

// applyCalibration sets every line's wavelength and identifies it: first
// with the fixed matches (from pattern identification, which keep their
// labels even where a neighbouring line is nearer in wavelength), then each
// remaining peak with the nearest unused line of lamp.
func applyCalibration(r *imageResult, cal calibration, lamp calibrate.Lamp, cfg measureConfig, fixed []calibrate.Match) {
	d := cal.Dispersion
	nm, sig := make([]float64, len(r.Lines)), make([]float64, len(r.Lines))
	side := make([]int, len(r.Lines))
	lo, hi := d.MinPX, d.MaxPX
	span := hi - lo
	outside := 0
	zero := -1
	conical := 0.0 // largest conical-diffraction correction applied, nm
	beyond := 0    // lines the dispersion gives no wavelength
	for i := range r.Lines {
		l := &r.Lines[i]
		p, dl := cal.position(l.X, l.Y), cal.at(l.X, l.Y)
		// The centroid scatter the calibration found beyond the fits' own
		// σ applies to every photo of the setup.
		l.PositionErrPX = math.Hypot(l.PositionErrPX, d.FloorPX)
		// A line in another band than the calibration's (two lamps
		// stacked) is corrected for conical diffraction by the grating
		// model, whose principal point is assumed at the frame's centre
		// (common practice): a quarter of the correction counts as
		// uncertainty. In simulated photos the corrected lines landed
		// within 0.002 nm (PNG) to 0.04 nm (JPEG, calibration band off
		// the axis: a common offset of 15 % of the correction, not
		// explained yet) of NIST, from 0.17-0.27 nm uncorrected.
		if shift := math.Abs(dl.Wavelength(p) - d.Across(cal.AcrossPX).Wavelength(p)); shift > 0.001 {
			if sl := math.Abs(dl.Slope(p)); sl > 0 {
				l.PositionErrPX = math.Hypot(l.PositionErrPX, 0.25*shift/sl)
			}
			conical = math.Max(conical, shift)
		}
		l.WavelengthNM, side[i] = dl.Resolve(p)
		l.WavelengthErrNM = dl.Sigma(p, l.PositionErrPX)
		if !finite(l.WavelengthNM) || !finite(l.WavelengthErrNM) {
			// Past the grating model's reach (sin θ beyond 1: a
			// calibration far off, or a line far outside its range): no
			// wavelength. A NaN here once made the JSON encoder refuse the
			// whole document, and a batch lost its results.json.
			l.WavelengthNM, l.WavelengthErrNM, side[i] = 0, 0, 0
			nm[i], sig[i] = math.NaN(), 0
			beyond++
			continue
		}
		l.VacuumNM = calibrate.AirToVacuum(l.WavelengthNM)
		if d.Signed {
			l.Order = side[i]
		}
		nm[i], sig[i] = l.WavelengthNM, l.WavelengthErrNM
		// The zero order: the brightest line where m·λ = 0 within the
		// uncertainty (or a few nm, for a one-sided calibration
		// extrapolated there), or, when the calibration photo showed it,
		// the brightest line within a tenth of the calibrated span of
		// where it was (so that a moved camera is noticed).
		near := math.Abs(dl.Wavelength(p)) < math.Max(4*l.WavelengthErrNM, 3)
		if d.ZeroOrderPX != 0 {
			near = math.Abs(p-d.ZeroOrderPX) < 0.1*span
		}
		if near && (zero < 0 || l.Height > r.Lines[zero].Height) {
			zero = i
		}
		if p < lo-0.02*span || p > hi+0.02*span {
			outside++
		}
	}
	if zero >= 0 {
		l := &r.Lines[zero]
		l.ID, l.Order, l.WavelengthNM, l.VacuumNM = "zero order", 0, 0, 0
		nm[zero] = math.NaN()
		if d.ZeroOrderPX != 0 {
			// The zero order does not move with the lamp: a shift along
			// the band says the camera or grating turned.
			if dp := cal.position(l.X, l.Y) - d.ZeroOrderPX; math.Abs(dp) > math.Max(2, 4*l.PositionErrPX) {
				r.Warnings = append(r.Warnings, fmt.Sprintf("the zero order sits %.1f px from its place in the calibration photo: the camera or grating moved, recalibrate", dp))
			}
		}
	}
	type sideLine struct {
		nm          float64
		side, order int
	}
	usedLine, usedPeak := map[sideLine]bool{}, map[int]bool{}
	// label names a line; a second-order line (|Order| 2) is a lamp line
	// at twice its wavelength: its λ and σ are halved and it says so.
	label := func(mt calibrate.Match) {
		second := mt.Order == 2 || mt.Order == -2
		k := sideLine{mt.Line.NM, side[mt.Peak], 1}
		if second {
			k.order = 2
		}
		if usedLine[k] || usedPeak[mt.Peak] || mt.Peak == zero {
			return
		}
		usedLine[k], usedPeak[mt.Peak] = true, true
		l := &r.Lines[mt.Peak]
		l.ID, l.RefNM, l.N = mt.Line.Name, mt.Line.NM, mt.Line.N
		if second {
			l.ID += " (2nd order)"
			l.N = 0 // not in the Rydberg fit
			l.WavelengthNM, l.WavelengthErrNM = nm[mt.Peak]/2, sig[mt.Peak]/2
			l.VacuumNM = calibrate.AirToVacuum(l.WavelengthNM)
			l.Order = 2 * side[mt.Peak]
		}
		l.DeltaNM = l.WavelengthNM - mt.Line.NM
	}
	for _, mt := range fixed {
		label(mt)
	}
	for _, mt := range assignBySide(nm, sig, side, lamp, cfg.tolNM) {
		label(mt)
	}
	// Lines still unnamed may be the lamp's lines in the second order,
	// at twice their wavelength (past the red end of the first order).
	half, halfSig := make([]float64, len(nm)), make([]float64, len(nm))
	for i := range nm {
		half[i], halfSig[i] = math.NaN(), sig[i]/2
		if !usedPeak[i] && i != zero {
			half[i] = nm[i] / 2
		}
	}
	for _, mt := range assignBySide(half, halfSig, side, lamp, cfg.tolNM/2) {
		mt.Order = 2
		label(mt)
	}
	out := &calibrationOut{From: cal.Source, Lamp: cal.Lamp, Dispersion: d}
	if D, a, f, ok := d.Physical(); ok {
		out.Grating = &gratingOut{DNM: D, LinesMM: 1e6 / D, AngleDeg: a, FocalPX: f}
	}
	r.Calibration = out
	if conical > 0.01 {
		r.Warnings = append(r.Warnings, fmt.Sprintf("this band lies %.0f px across from the calibration band: its lines were corrected for conical diffraction by up to %.2f nm, and a quarter of that counts in their uncertainty",
			math.Abs(cal.across(r.Lines[0].X, r.Lines[0].Y)-cal.AcrossPX), conical))
	}
	if d.DOF == 0 {
		r.Warnings = append(r.Warnings, fmt.Sprintf("the calibration has no line to spare (%d lines for the %d parameters of its %s dispersion): it passes through them whatever they are, so nothing checks their identification, the fit or its uncertainties; more lamp lines in view (a longer exposure, a lamp with more lines) give a check",
			len(d.Residuals), len(d.Params), d.Model))
	}
	if d.Birge > 3 {
		r.Warnings = append(r.Warnings, fmt.Sprintf("the calibration lines do not follow one smooth dispersion (χ²/dof = %.1f): a line may be misidentified, or the calibration photos are not of one setup", d.Birge*d.Birge))
	}
	if outside > 0 {
		a, _ := d.Resolve(lo)
		b, _ := d.Resolve(hi)
		rng := fmt.Sprintf("%.0f-%.0f nm", a, b)
		if d.Signed {
			rng = fmt.Sprintf("up to %.0f nm on either side of the zero order", math.Max(a, b))
		}
		r.Warnings = append(r.Warnings, fmt.Sprintf("%d line(s) lie outside the calibrated range %s: their wavelengths are extrapolated (the uncertainty says by how much)",
			outside, rng))
	}
	if beyond > 0 {
		r.Warnings = append(r.Warnings, fmt.Sprintf("%d line(s) lie where the dispersion gives no wavelength (beyond the grating's reach): the calibration does not fit this photo, or they are no lines; shown without one", beyond))
	}
}

// finite reports whether v is a number other than ±Inf.
func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// assignBySide matches wavelengths to lamp's lines separately on each side
// of the zero order (side −1 or +1), so that a line seen in both first
// orders is identified in both. NaN wavelengths are left out.
func assignBySide(nm, sig []float64, side []int, lamp calibrate.Lamp, tolNM float64) []calibrate.Match {
	var out []calibrate.Match
	for _, sd := range []int{-1, 1} {
		var idx []int
		var w, s []float64
		for i := range nm {
			if side[i] == sd && !math.IsNaN(nm[i]) {
				idx, w, s = append(idx, i), append(w, nm[i]), append(s, sig[i])
			}
		}
		for _, mt := range calibrate.Assign(w, s, lamp, tolNM) {
			mt.Peak = idx[mt.Peak]
			out = append(out, mt)
		}
	}
	return out
}

// fitBalmer fits the Rydberg constant to the identified Balmer lines, with
// the covariance the shared calibration puts between them.
func fitBalmer(r *imageResult, cal calibration) {
	var in []calibrate.Balmer
	var ps, sps []float64
	var across float64
	for _, l := range r.Lines {
		if l.N >= 3 {
			in = append(in, calibrate.Balmer{N: l.N, AirNM: l.WavelengthNM, SigmaNM: l.WavelengthErrNM})
			ps = append(ps, cal.position(l.X, l.Y))
			sps = append(sps, l.PositionErrPX)
			across += cal.across(l.X, l.Y)
		}
	}
	if len(in) < 2 {
		r.Warnings = append(r.Warnings, fmt.Sprintf("only %d Balmer line identified: no Rydberg fit", len(in)))
		return
	}
	// One band: the covariance at its mean distance across.
	ryd, err := calibrate.FitRydberg(in, cal.Dispersion.Across(across/float64(max(1, len(in)))).Covariance(ps, sps))
	if err != nil {
		r.Warnings = append(r.Warnings, "Rydberg fit failed: "+err.Error())
		return
	}
	r.Rydberg = &ryd
	if ryd.DOF > 0 && ryd.ChiSq/float64(ryd.DOF) > 4 {
		r.Warnings = append(r.Warnings, fmt.Sprintf("the Balmer lines fit 1/λ = R(1/4 − 1/n²) poorly (χ²/dof = %.1f): a line may be misidentified or blended", ryd.ChiSq/float64(ryd.DOF)))
	}
	if ryd.InterceptSigma > 0 && math.Abs(ryd.Intercept) > 3*ryd.InterceptSigma {
		r.Warnings = append(r.Warnings, fmt.Sprintf("a free intercept fits at %.0f ± %.0f m⁻¹, not zero: the wavelengths carry a systematic offset (calibration drift?)", ryd.Intercept, ryd.InterceptSigma))
	}
}

// setupMoved compares a photo's band with the calibration photo's and says
// in plain words when the camera or grating seems to have moved.
func setupMoved(s imaging.Strip, cal calibration) []string {
	var w []string
	if cal.FrameW != 0 && (s.FrameW != cal.FrameW || s.FrameH != cal.FrameH) {
		w = append(w, fmt.Sprintf("this photo is %dx%d but the calibration photo was %dx%d: not the same setup, the calibration does not apply", s.FrameW, s.FrameH, cal.FrameW, cal.FrameH))
	}
	if d := math.Abs(s.AngleDeg - cal.AngleDeg); d > 0.2 {
		w = append(w, fmt.Sprintf("the band is turned by %.2f° against the calibration photo: the camera or grating moved, recalibrate", d))
	}
	sn, cs := math.Sincos(cal.AngleDeg * math.Pi / 180)
	dv := -(s.Origin[0]-cal.Origin[0])*sn + (s.Origin[1]-cal.Origin[1])*cs
	if math.Abs(dv) > math.Max(3, 0.5*s.BandHalfHeight) {
		w = append(w, fmt.Sprintf("the band sits %.1f px off its place in the calibration photo: the camera or grating moved, recalibrate", dv))
	}
	return w
}
