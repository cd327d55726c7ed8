package imaging

import (
	"bytes"
	"errors"
	"fmt"
	"image"
	"image/color"
	_ "image/jpeg" // header checks before OpenCV decodes
	_ "image/png"
	"io"
	"math"
	"os"
	"runtime"
	"slices"
	"sort"
	"sync"
	"sync/atomic"
	"time"
	"unsafe"

	"gocv.io/x/gocv"
	"golang.org/x/sync/errgroup"
	// TIFF, BMP and WebP headers too, so that their declared size is
	// checked against the pixel cap before OpenCV allocates for it.
	_ "golang.org/x/image/bmp"
	"golang.org/x/image/tiff"
	_ "golang.org/x/image/webp"

	"lineshot/peaks"
)

// ErrNoBand is returned when no spectrum band stands out of the frame.
var ErrNoBand = errors.New("no spectrum band found")

// DefaultMaxPixels is the largest frame Extract decodes unless told
// otherwise: 120 megapixels, above any phone or camera of the day.
const DefaultMaxPixels = 120_000_000

// Options tunes Extract. The zero value is usable.
type Options struct {
	// MaxPixels caps the decoded frame size (a guard against decompression
	// bombs); 0 means DefaultMaxPixels.
	MaxPixels int
	// Linear says the pixel values are already linear in intensity (raw
	// conversions, scientific cameras); otherwise the sRGB curve is undone.
	Linear bool
	// KeepImage keeps the straightened band as an 8-bit image in Strip.Image,
	// for people to look at: it is warped from the decoded codes (cheap,
	// a byte a sample), not from the linear values the profiles use.
	KeepImage bool
	// ImageMaxWidth, when above 0, shrinks the kept image (area
	// averaging, both directions alike) to at most this many pixels
	// across: a report shows no more, and a 12 MP photo's full strip
	// would hold 8 MB per photo being measured.
	ImageMaxWidth int
	// Workers is how many goroutines share the work on one photo (the
	// region's linearisation, the straightened strip's columns); 0 means
	// one per CPU. A batch that measures a photo per CPU sets 1.
	Workers int
	// Channels straightens the linear R, G and B as well (Strip.Channels),
	// for colour tests; without it only the profile's channel is, unless
	// the band holds saturated pixels.
	Channels bool
	// ROI, when not empty, is the rectangle (original-image pixels) the band
	// must lie in; everything outside is ignored when looking for it.
	ROI image.Rectangle
	// FixAngle makes AngleDeg the dispersion direction instead of the one
	// found (degrees from +x towards +y).
	FixAngle bool
	AngleDeg float64
	// Profile chooses Strip.Profile: ProfileLuma, ProfileSum, or "" for
	// luma from JPEG files and the sum from every other format. JPEG keeps
	// luma at full resolution and quantises it finely, while colour (hence
	// each linear channel) is subsampled and coarsely quantised: on
	// synthetic quality-90 JPEGs the violet mercury lines' centres move by
	// up to 0.2 px in the channel sum and by 0.04 px in luma. Lossless
	// files keep the sum, whose signal-to-noise is better for violet lines.
	Profile string

	// wholeFrame decodes every photo whole, as before the band-first
	// decode (extractBandFirst): for tests that compare the two.
	wholeFrame bool
}

// withProfile returns o with its profile chosen when unset: luma for
// compressed input (JPEG, video: chroma subsampled), the channel sum
// otherwise (see Options.Profile).
func (o Options) withProfile(compressed bool) Options {
	if o.Profile == "" {
		o.Profile = ProfileSum
		if compressed {
			o.Profile = ProfileLuma
		}
	}
	return o
}

// Code values at and above which a pixel counts as clipped, for 8- and
// 16-bit input (a little below full scale: JPEG rounding).
const (
	clipCode8  = 250
	clipCode16 = 65000
)

// Profile choices.
const (
	ProfileLuma = "luma"
	ProfileSum  = "sum"
)

// Strip is the straightened spectrum band collapsed to profiles, with the
// geometry that maps profile positions back to the original image.
//
// Original-image coordinates are those of the upright image (after its EXIF
// orientation is applied), in pixels, with the centre of the top-left pixel
// at (0, 0). Profile position p lies at Origin + p·(cos θ, sin θ), θ =
// AngleDeg, on the centre line of the band.
type Strip struct {
	Profile  []float64    // the profile to measure: Luma, or Sum with Options.Profile = ProfileSum
	Luma     []float64    // linearised luma 0.299R′+0.587G′+0.114B′ summed across the band, background removed
	Sum      []float64    // linear R+G+B summed across the band, background removed
	Channels [3][]float64 // linear R, G, B each
	// Without Options.Channels only the profile's own channel is
	// straightened: Profile and one of Luma or Sum are set, Channels not.
	Clipped []bool // positions whose band pixels hold a saturated value in some channel
	// NoiseShape is how the background noise varies along the band,
	// relative to its median (1): the scatter of the rows beside the
	// band, per column, smoothed. Stray light or a glow raises it where it
	// falls; peaks.Options.NoiseShape uses it. Nil when unmeasured.
	NoiseShape []float64
	// FlatBackground is the share of the columns beside the band whose
	// samples show no scatter at all: a compressed photo's background
	// smoothed flat (JPEG quality about 75 and below). Above a fifth
	// NoiseShape is left out (noiseShape); above a half a warning says
	// that the compression's ringing may pass for faint lines.
	FlatBackground float64
	// ChannelClipped is Clipped per linear channel (R, G, B), set with
	// Channels. When the band holds saturated pixels, Channels are
	// straightened even without Options.Channels, so that a line
	// clipped in one channel can be measured in another.
	ChannelClipped [3][]bool

	AngleDeg       float64    // dispersion direction, degrees from +x towards +y
	Origin         [2]float64 // original-image x, y of profile position 0
	BandHalfHeight float64    // px
	OpticalCenter  float64    // profile position nearest the image centre (the assumed principal point)
	Band           [4][2]float64
	FrameW, FrameH int

	Background float64 // median frame level, linear, fraction of full scale
	// BackgroundRange is how much a smooth background (room light) varies
	// across the frame, same units; it is subtracted before the band is
	// looked for, and beside the band in the profile.
	BackgroundRange float64
	// StrayLight says the frame holds stray light with a shape of its own
	// (a glow, a lit bench): the band was found on the lines' contrast and
	// its background taken as a slope across it.
	StrayLight bool
	Noise      float64 // robust σ of the frame, same units
	Saturated  float64 // fraction of band pixels holding a saturated value
	// CurvaturePX is how far the line images bow at the band's top and
	// bottom edge relative to its centre row, px (followed in the profile).
	CurvaturePX float64
	// LeanDeg is the largest angle at which the line images cross the
	// band (sheared images: a band away from the optical axis, a camera
	// not square to the grating), followed in the profile like the bow.
	LeanDeg float64
	// Warnings say in plain words what makes this strip doubtful.
	Warnings []string
	// Damage, when not empty, says that libjpeg decoded past corrupt data
	// in the photo (also among Warnings): a measurement that fails should
	// say so too.
	Damage string
	// Bow is how the band's centre line departs from the straight line
	// through Origin along AngleDeg (ToImage includes it): a band away
	// from the optical axis, or seen through a lens with barrel or
	// pincushion distortion, is bowed, and the strip follows it.
	Bow Bow
	// ResidualTiltDeg is the slope left in the band's centre line after
	// straightening, degrees (0 when it could not be measured).
	ResidualTiltDeg float64
	// ResidualTiltErrDeg is its standard error (from the scatter of the
	// line centres it was measured on; +Inf with fewer than three lines).
	ResidualTiltErrDeg float64
	// Image is the straightened band as an 8-bit picture (Options.KeepImage);
	// ReleaseImage lends its pixels to the next strip's once done with.
	Image  *image.RGBA
	Timing Timing
	// Frames and DarkFrames count the exposures ExtractStack averaged
	// (0 from Extract).
	Frames, DarkFrames int
	// BandIndex and BandCount place this band among those found in the
	// photo (ExtractBands), counted across the dispersion direction.
	BandIndex, BandCount int
	bowMeasured          bool // Bow from this band's own lines
}

// ToImage maps profile position p to original-image coordinates.
func (s Strip) ToImage(p float64) (x, y float64) {
	sn, cs := math.Sincos(s.AngleDeg * math.Pi / 180)
	b := s.Bow.at(p)
	return s.Origin[0] + p*cs - b*sn, s.Origin[1] + p*sn + b*cs
}

// Bow is a band's centre line as an offset across the dispersion direction
// (px, towards +y when the band runs along +x) at profile position p:
// C0 + C1·(p − Mid) + C2·(p − Mid)². The zero value is a straight band.
type Bow struct {
	C0, C1, C2, Mid float64
}

func (b Bow) at(p float64) float64 {
	d := p - b.Mid
	return b.C0 + d*(b.C1+d*b.C2)
}

func (b Bow) zero() bool { return b.C0 == 0 && b.C1 == 0 && b.C2 == 0 }

// Extract decodes the photo at path, finds the spectrum band, straightens
// it and collapses it to profiles. Errors name the file and the reason.
func Extract(path string, opt Options) (Strip, error) {
	ss, err := extractFile(path, opt, false)
	if err != nil {
		return Strip{}, err
	}
	return ss[0], nil
}

// ExtractBands is Extract for a photo that may hold several bands side by
// side (two lamps photographed together, one slit image above the other):
// it finds every band parallel to the strongest and straightens and
// collapses each on its own, returning them ordered across the frame
// (Strip.BandIndex). A band that cannot be measured among others is left
// out; an error comes only when none can be.
func ExtractBands(path string, opt Options) ([]Strip, error) {
	return extractFile(path, opt, true)
}

// extractFile checks and decodes the photo at path and measures its
// strongest band, or with all every band.
func extractFile(path string, opt Options, all bool) ([]Strip, error) {
	format, cfg, err := checkFile(path, opt)
	if err != nil {
		return nil, err
	}
	opt = opt.withProfile(lossy(format))
	if opt.workers() > 1 {
		// A process's first photo builds the transfer tables (12-24 ms
		// for 8 bits): on a spare core while the photo decodes.
		go tablesFor(levelsOf(cfg), opt.Linear)
	}
	if !all && format == "jpeg" && !opt.wholeFrame {
		if ss, ok, err := extractBandFirst(path, cfg, opt); ok || err != nil {
			return ss, err
		}
	}
	var damage string
	m, small, decoded, waited, err := decodeAndReduce(path, format, opt.workers(), &damage)
	if err != nil {
		return nil, err
	}
	defer closeFrame(m, opt.workers())
	var src rowSource
	if !all {
		src.reload = func() (gocv.Mat, error) { return decodeFrame(path, format) }
	}
	ss, err := extractBandsMat(m, opt, all, src, small)
	if err != nil {
		return nil, WithDamage(fmt.Errorf("%s: %w", path, err), damage)
	}
	for i := range ss {
		// (The reduction's part after the decode belongs to the search.)
		ss[i].Timing.Decode += decoded
		ss[i].Timing.Locate += waited
		ss[i].noteDamage(damage)
	}
	return ss, nil
}

// lossy reports whether photos of this format are lossy compressed with
// the colour at lower resolution (JPEG, HEIF): luma is then the better
// profile (Options.withProfile).
func lossy(format string) bool { return format == "jpeg" || format == "heif" }

// closeFrame closes a decoded frame's Mat: handing a 12 MP frame's memory
// back takes several milliseconds, so with a core to spare it is done
// beside the work that follows.
func closeFrame(m gocv.Mat, workers int) {
	if workers > 1 {
		go m.Close()
	} else {
		m.Close()
	}
}

// errPhotoChanged is the error when a photo decoded again (or in parts)
// is not the one decoded first.
var errPhotoChanged = errors.New("the photo changed while it was measured")

// noteDamage adds to the strip's warnings the row decoder's line on
// damaged JPEG data, if there is one.
func (s *Strip) noteDamage(damage string) {
	if damage != "" {
		s.Damage = damage
		s.Warnings = append(s.Warnings, damage)
	}
}

// WithDamage adds the line on damaged JPEG data (Strip.Damage), if there
// is one, to an error of measuring the photo: the damage is the likelier
// reason.
func WithDamage(err error, damage string) error {
	if damage == "" {
		return err
	}
	return fmt.Errorf("%w; %s", err, damage)
}

// extractBandFirst measures the strongest band of a large JPEG without
// decoding the whole frame at full size: libjpeg decodes it at the band
// search's reduction (DCT scaling: 14 ms for a 12 MP photo, where the
// whole frame takes 22 in libjpeg and 32 with its pages written the first
// time), and once the band is found, only the rows of its region (the
// frame's memory is reserved, and only the rows decoded are touched).
// With a core to spare, rows are decoded from the top meanwhile
// (rowsAhead): the band's rows are then mostly there when it is found;
// otherwise decodeRowsInto decodes them, in parts on the cores there are.
// A whole extraction (fastest of 9, alternating with the whole-frame
// decode): 0.74 of the time with two cores and 0.86 with one at 12 MP,
// 0.70 and 0.87 at 8 MP, 0.75 and 0.81 at 48 MP, 0.71 and 0.84 for a
// 4000×2250 photo (16:9, a height 4 does not divide), 0.62 and 0.83 at
// 16 MP (4624×3472, searched at a quarter). ok is false, with nothing
// done, for a photo it does not take: frames below bandFirstPixels or
// that the band search reduces by less than 4, progressive JPEGs and
// those the row decoder leaves to imread.
func extractBandFirst(path string, cfg image.Config, opt Options) ([]Strip, bool, error) {
	// DCT scaling makes halves, quarters and eighths: a reduction by 5 to
	// 7 (a 16 MP photo's, 4624×3472) is searched at a quarter, by 9 and
	// more at an eighth, a finer frame than the whole-frame search's.
	k, _, _ := searchReduction(cfg.Width, cfg.Height)
	switch {
	case k >= 8:
		k = 8
	case k >= 4:
		k = 4
	}
	if cfg.Width*cfg.Height < bandFirstPixels || (k != 4 && k != 8) {
		return nil, false, nil
	}
	t0 := time.Now()
	// The frame's memory is reserved, not written: only the rows decoded
	// into it are ever touched.
	m, err := newMatUnset(cfg.Height, cfg.Width, gocv.MatTypeCV8UC3, true)
	if err != nil {
		return nil, false, fmt.Errorf("%s: %w", path, err)
	}
	var ahead *rowsAhead
	if opt.workers() > 1 {
		ahead = decodeAhead(path, m)
	}
	stop := func() {
		if ahead != nil {
			ahead.stop()
		}
	}
	var damage string
	small, w, h, ok, err := decodeReduced(path, k, &damage)
	if err != nil || !ok || w != cfg.Width || h != cfg.Height {
		stop()
		closeFrame(m, opt.workers())
		if err != nil {
			return nil, false, jpegError(path, err)
		}
		if ok {
			small.Close()
			return nil, false, fmt.Errorf("%s: %w", path, errPhotoChanged)
		}
		return nil, false, nil
	}
	decoded := time.Since(t0)
	defer closeFrame(m, opt.workers())
	defer stop() // (before the frame goes)
	fill := func(y0, y1 int) error {
		if ahead != nil {
			// Done with the decoder ahead either way: once stopped, it
			// writes no more rows (keepRows gives back those it wrote
			// away from the band).
			got := ahead.get(y0, y1)
			ahead.stop()
			if got {
				return nil
			}
		}
		// With cores to spare, each decodes a part of the rows with a
		// decoder of its own (each passes over the rows above its part).
		parts := fillParts(y0, y1, min(opt.workers(), (y1-y0)/128), skipCost)
		errs := make([]error, len(parts)-1)
		var wg sync.WaitGroup
		for i := range errs {
			wg.Go(func() { errs[i] = decodeRowsInto(path, m, parts[i], parts[i+1]) })
		}
		wg.Wait()
		for _, err := range errs {
			if err != nil {
				return fmt.Errorf("cannot decode the JPEG: %w", err) // (the first: one line)
			}
		}
		return nil
	}
	ss, err := extractBandsMat(m, opt, false, rowSource{fill: fill}, &small)
	if err != nil {
		return nil, true, WithDamage(fmt.Errorf("%s: %w", path, err), damage)
	}
	for i := range ss {
		ss[i].Timing.Decode += decoded
		ss[i].noteDamage(damage)
	}
	return ss, true, nil
}

// fillParts splits rows [y0, y1) into n parts (n < 1 counts as 1) that
// take about as long each to decode, given that passing over a row costs
// r times making it: a part starting lower passes over more rows first,
// so it makes fewer. It returns the n+1 bounds, y0 first and y1 last.
func fillParts(y0, y1, n int, r float64) []int {
	n = max(1, min(n, y1-y0))
	// Each part's cost is its start·r plus its length; find the common
	// cost c at which n parts reach y1 (the rows covered grow with c).
	reach := func(c float64) float64 {
		y := float64(y0)
		for range n {
			y += max(0, c-y*r)
		}
		return y
	}
	lo, hi := 0.0, float64(y1)*(1+r)
	for range 60 {
		c := (lo + hi) / 2
		if reach(c) < float64(y1) {
			lo = c
		} else {
			hi = c
		}
	}
	b := make([]int, n+1)
	b[0], b[n] = y0, y1
	y := float64(y0)
	for i := 1; i < n; i++ {
		y += max(0, hi-y*r)
		b[i] = min(y1, max(b[i-1], int(math.Round(y))))
	}
	return b
}

// skipCost is what passing over a row costs against decoding it, for
// fillParts: 0.3-0.45 on these machines' test photos (libjpeg still
// decodes the entropy-coded data of the rows it passes over). A part's
// start is the only thing it sets.
const skipCost = 0.4

// bandFirstPixels is the smallest frame extractBandFirst measures: an
// 8 MP photo gains (above), while 1080p and 3 MP photos (reduced by 2)
// took 0.96-1.10 of the whole-frame time (fastest of 15).
const bandFirstPixels = 7_000_000

// Decode decodes the photo at path as Extract does and discards it,
// returning its size: the floor under Extract's time, for benchmarks.
// (Without Extract's checks of the file: a strict floor.)
func Decode(path string) (w, h int, err error) {
	m, ok, err := decodeRows(path, nil, nil)
	if err != nil || !ok {
		// Not a JPEG, or not one the row decoder takes.
		if m, err = imreadOK(path); err != nil {
			return 0, 0, err
		}
	}
	defer m.Close()
	return m.Cols(), m.Rows(), nil
}

// DecodeOpenCV decodes the photo at path with OpenCV's imread alone and
// discards it: the floor benchmarks measured against before the row
// decoder, kept for comparison.
func DecodeOpenCV(path string) (w, h int, err error) {
	m, err := imreadOK(path)
	if err != nil {
		return 0, 0, err
	}
	defer m.Close()
	return m.Cols(), m.Rows(), nil
}

// imread decodes the photo at path with OpenCV as every measurement does
// what the row decoder does not take: colour, at its own bit depth (8 or
// 16), turned as its Exif orientation says.
func imread(path string) gocv.Mat {
	return gocv.IMRead(path, gocv.IMReadColor|gocv.IMReadAnyDepth)
}

// imreadOK is imread with its failure (an empty Mat, closed here) as an
// error naming the file.
func imreadOK(path string) (gocv.Mat, error) {
	m := imread(path)
	if m.Empty() {
		m.Close()
		return gocv.Mat{}, fmt.Errorf("%s: not an image OpenCV can decode", path)
	}
	return m, nil
}

// Timing is how long each stage of Extract took.
type Timing struct {
	Decode     time.Duration // the row decoder (most JPEGs) or OpenCV's imread
	Locate     time.Duration // reduce the frame, find the band's direction and place
	Straighten time.Duration // linearise the band region, warp, collapse (all rounds)
}

// checkFile rejects what need not reach the decoder: missing files,
// directories, empty files and (for JPEG and PNG, whose headers Go reads)
// frames above the pixel cap. It returns the format Go recognised, if any.
func checkFile(path string, opt Options) (string, image.Config, error) {
	st, err := os.Stat(path)
	if err != nil {
		if errors.Is(err, os.ErrNotExist) {
			return "", image.Config{}, fmt.Errorf("%s: no such file", path)
		}
		return "", image.Config{}, err // already names the path
	}
	if st.IsDir() {
		return "", image.Config{}, fmt.Errorf("%s: is a directory, not an image", path)
	}
	if !st.Mode().IsRegular() {
		// (Opening a named pipe would wait for a writer.)
		return "", image.Config{}, fmt.Errorf("%s: not a regular file (a named pipe, socket or device)", path)
	}
	if st.Size() == 0 {
		return "", image.Config{}, fmt.Errorf("%s: empty file", path)
	}
	if why := Unreadable(path); why != "" {
		return "", image.Config{}, fmt.Errorf("%s: %s", path, why)
	}
	f, err := os.Open(path)
	if err != nil {
		return "", image.Config{}, err
	}
	defer f.Close()
	capPx := opt.MaxPixels
	if capPx == 0 {
		capPx = DefaultMaxPixels
	}
	var head [12]byte
	if n, _ := f.ReadAt(head[:], 0); isHEIF(head[:n]) {
		// libheif reads the container's size without decoding the image.
		w, h, depth, err := heifSize(path)
		if err != nil {
			return "", image.Config{}, fmt.Errorf("%s: a HEIF/HEIC file libheif cannot read: %v", path, err)
		}
		if w*h > capPx {
			return "", image.Config{}, errOverCap(path, w, h, capPx)
		}
		cfg := image.Config{Width: w, Height: h, ColorModel: color.RGBAModel}
		if depth > 8 {
			cfg.ColorModel = color.RGBA64Model
		}
		return "heif", cfg, nil
	}
	cfg, format, err := image.DecodeConfig(f)
	var tu tiff.UnsupportedError
	if errors.As(err, &tu) && (tu == "sample format" || tu == "BitsPerSample of 32" || tu == "BitsPerSample of 64") {
		// A floating-point or signed TIFF, refused before OpenCV decodes
		// it (newFrame would refuse the frame; OpenCV prints its own
		// complaint about some of them). Other TIFFs Go does not read go on
		// to OpenCV, which reads more of them.
		return "", image.Config{}, fmt.Errorf("%s: a TIFF of floating-point, signed or 32- or 64-bit samples, %s", path, wideSampleReason)
	}
	if err == nil && cfg.Width*cfg.Height > capPx {
		return "", image.Config{}, errOverCap(path, cfg.Width, cfg.Height, capPx)
	}
	if err == nil && !hasEndMarker(f, st.Size(), format) {
		// A file cut short (an interrupted copy): libjpeg and libpng would
		// decode what is there and print their own complaints. Go's decoder
		// decides instead, quietly; some cameras append data after the end
		// marker, and those files still decode.
		if _, err := f.Seek(0, io.SeekStart); err == nil {
			if _, _, err := image.Decode(f); err != nil {
				return "", image.Config{}, fmt.Errorf("%s: truncated or damaged %s file (%v)", path, format, err)
			}
		}
	}
	return format, cfg, nil
}

// errOverCap is the error for a w×h photo at path over the pixel cap.
func errOverCap(path string, w, h, capPx int) error {
	return fmt.Errorf("%s: %dx%d pixels exceeds the limit of %d megapixels", path, w, h, capPx/1_000_000)
}

// hasEndMarker reports whether a JPEG ends with its EOI marker or a PNG
// with its IEND chunk (other formats: true).
func hasEndMarker(f *os.File, size int64, format string) bool {
	var want []byte
	switch format {
	case "jpeg":
		want = []byte{0xff, 0xd9}
	case "png":
		want = []byte{0, 0, 0, 0, 'I', 'E', 'N', 'D', 0xae, 0x42, 0x60, 0x82}
	default:
		return true
	}
	if size < int64(len(want)) {
		return false
	}
	tail := make([]byte, len(want))
	if _, err := f.ReadAt(tail, size-int64(len(want))); err != nil {
		return false
	}
	return bytes.Equal(tail, want)
}

// frame holds the decoded image's pixels as Go slices, without copying,
// and the Mat they live in.
type frame struct {
	w, h    int
	bytes8  []uint8  // BGR, 8-bit
	words16 []uint16 // BGR, 16-bit
	mat     gocv.Mat
	// Once a single band's region is known, an 8-bit frame that can be
	// decoded again (reload set) gives back the rows far from it: a
	// 12 MP frame is 37 MB, and most of it is read only by the band
	// search. kept is the rows still held ([0, 0): all); a step that
	// needs others decodes the photo again (need). reloaded marks a Mat
	// of our own, closed with release.
	kept     [2]int
	reload   func() (gocv.Mat, error)
	reloaded bool
	// fill, when set, decodes rows [y0, y1) of the photo into the frame:
	// the frame began with no rows decoded (the band-first decode,
	// extractFile), and holds only the rows need asked for, kept;
	// filled is the time it took.
	fill   func(y0, y1 int) error
	filled time.Duration
	// dropping, when set, gives the rows back on another goroutine (2 ms
	// for 25 MB of a 12 MP frame, beside the region's linearisation); its
	// owner waits for it before the Mat is closed.
	dropping *sync.WaitGroup
}

// keepRows gives back the rows of the frame outside [y0, y1), when it can
// be decoded again (or was decoded band first, rows decoded ahead among
// them) and is at least mmapCeiling large; the rows held only ever
// shrink.
func (f *frame) keepRows(y0, y1 int) {
	if (f.reload == nil && f.fill == nil) || f.bytes8 == nil || len(f.bytes8) < mmapCeiling {
		return
	}
	y0, y1 = max(0, y0), min(f.h, y1)
	if f.kept[1] > 0 {
		y0, y1 = max(y0, f.kept[0]), min(y1, f.kept[1])
	}
	if y0 >= y1 {
		return
	}
	above, below := f.bytes8[:3*f.w*y0], f.bytes8[3*f.w*y1:]
	if f.dropping != nil {
		f.dropping.Go(func() { dropPages(above); dropPages(below) })
	} else {
		dropPages(above)
		dropPages(below)
	}
	f.kept = [2]int{y0, y1}
}

// mmapCeiling is glibc's largest threshold for serving an allocation from
// its own mapping (32 MiB on 64-bit systems; smaller ones move it up to
// their size once freed): a frame this large or larger is mapped afresh
// for every photo and unmapped when closed, so pages given back cost
// nothing later. A smaller frame's memory is kept and reused for the next
// photo, which would fault the given-back pages in again: 1080p batches
// took three times the page faults and ran slower.
const mmapCeiling = 32 << 20

// need makes sure the frame holds rows [y0, y1), decoding the photo again
// when some were given back (then it holds every row, for good). A frame
// decoded band first gets those rows and fillMargin more each side.
func (f *frame) need(y0, y1 int) error {
	if f.fill != nil {
		y0, y1 = max(0, y0), min(f.h, y1)
		if f.kept[0] < f.kept[1] && y0 >= f.kept[0] && y1 <= f.kept[1] {
			return nil
		}
		a, b := max(0, y0-fillMargin), min(f.h, y1+fillMargin)
		t := time.Now()
		if f.dropping != nil {
			// Rows given back on another goroutine (keepRows) may be
			// among those about to be decoded into the same memory:
			// given back after, they would read as zeros.
			f.dropping.Wait()
		}
		if err := f.fill(a, b); err != nil {
			return err
		}
		f.filled += time.Since(t)
		f.kept = [2]int{a, b}
		return nil
	}
	if f.kept[1] == 0 || (y0 >= f.kept[0] && y1 <= f.kept[1]) {
		return nil
	}
	m, err := f.reload()
	if err != nil {
		return err
	}
	nf, err := newFrame(m)
	if err == nil && (nf.w != f.w || nf.h != f.h || nf.bytes8 == nil) {
		err = errPhotoChanged
	}
	if err != nil {
		m.Close()
		return err
	}
	f.release()
	*f = nf
	f.reloaded = true
	return nil
}

// fillMargin is the rows beyond those asked for that a frame decoded band
// first gets, as keepRows keeps them: room for corrections beyond the band
// region's own margin.
const fillMargin = 64

// release closes a Mat the frame decoded again itself.
func (f *frame) release() {
	if f.reloaded {
		f.mat.Close()
		f.reloaded = false
	}
}

func newFrame(m gocv.Mat) (frame, error) {
	f := frame{w: m.Cols(), h: m.Rows(), mat: m}
	if f.w < 8 || f.h < 8 {
		return f, fmt.Errorf("image of %dx%d pixels is too small", f.w, f.h)
	}
	if m.Channels() != 3 || !m.IsContinuous() {
		return f, fmt.Errorf("unexpected pixel layout (%d channels)", m.Channels())
	}
	var err error
	switch m.Type() {
	case gocv.MatTypeCV8UC3:
		f.bytes8, err = m.DataPtrUint8()
	case gocv.MatTypeCV16UC3:
		f.words16, err = m.DataPtrUint16()
	default:
		// (A floating-point or signed TIFF, say: OpenCV reads it, its
		// values have no transfer curve lineshot knows.)
		return f, fmt.Errorf("pixels of type %v, %s", m.Type(), wideSampleReason)
	}
	return f, err
}

// codeTables are the lookup tables that undo the transfer curve for one bit
// depth: per code value (lut) and for luma (luma).
type codeTables struct {
	lut  []float32
	luma lumaLUT
}

// tableCache builds each combination of bit depth (8, 16) and linear
// input once per process: the 8-bit luma table alone takes 24 ms to fill,
// a third of a 1080p extraction. The tables are never written after they
// are built, so sharing them between goroutines is safe.
var tableCache = [2][2]func() codeTables{
	{sync.OnceValue(func() codeTables { return newCodeTables(256, false) }), sync.OnceValue(func() codeTables { return newCodeTables(256, true) })},
	{sync.OnceValue(func() codeTables { return newCodeTables(65536, false) }), sync.OnceValue(func() codeTables { return newCodeTables(65536, true) })},
}

func newCodeTables(levels int, linear bool) codeTables {
	return codeTables{lut: linearLUT(levels, linear), luma: newLumaLUT(levels, linear)}
}

// levelsOf guesses the code levels (256 or 65536) a decoded frame of this
// header will have: 65536 for 16-bit colour models, else 256.
func levelsOf(cfg image.Config) int {
	switch cfg.ColorModel {
	case color.RGBA64Model, color.NRGBA64Model, color.Gray16Model:
		return 65536
	}
	return 256
}

// tablesFor returns the shared tables for 8-bit (levels 256) or 16-bit input.
func tablesFor(levels int, linear bool) codeTables {
	d, l := 0, 0
	if levels > 256 {
		d = 1
	}
	if linear {
		l = 1
	}
	return tableCache[d][l]()
}

// linearLUT returns the linear value in [0, 1] of every code value of the
// given bit depth, undoing the sRGB transfer curve (IEC 61966-2-1) unless
// linear is set.
func linearLUT(levels int, linear bool) []float32 {
	lut := make([]float32, levels)
	for i := range lut {
		v := float64(i) / float64(levels-1)
		if !linear {
			v = srgbToLinear(v)
		}
		lut[i] = float32(v)
	}
	return lut
}

// srgbToLinear undoes the sRGB transfer curve (IEC 61966-2-1), v in [0, 1].
func srgbToLinear(v float64) float64 {
	if v <= 0.04045 {
		return v / 12.92
	}
	return math.Pow((v+0.055)/1.055, 2.4)
}

// searchScale is the longest side of the reduced frame used to find the band.
const searchScale = 1024

func extractMat(m gocv.Mat, opt Options) (Strip, error) {
	ss, err := extractBandsMat(m, opt, false, rowSource{}, nil)
	if err != nil {
		return Strip{}, err
	}
	return ss[0], nil
}

// extractBandsMat finds the strongest band, or with all every band that
// runs parallel to it, and straightens and collapses each.
//
// small, when not nil, is the frame already reduced for the band search
// (decodeAndReduce); extractBandsMat closes it.
func extractBandsMat(m gocv.Mat, opt Options, all bool, src rowSource, small *gocv.Mat) ([]Strip, error) {
	if small != nil {
		defer small.Close()
	}
	t0 := time.Now()
	f, err := newFrame(m)
	if err != nil {
		return nil, err
	}
	fr := &f
	fr.reload, fr.fill = src.reload, src.fill
	defer fr.release()
	var dropping sync.WaitGroup
	defer dropping.Wait() // before the caller closes the Mat
	if opt.workers() > 1 {
		fr.dropping = &dropping
	}
	nLevels := 256
	clipAt := clipCode8
	if fr.words16 != nil {
		nLevels, clipAt = 65536, clipCode16
	}
	tables := tablesFor(nLevels, opt.Linear)
	lut := tables.lut

	// 1. Find the band roughly on a reduced frame.
	// sx, sy: frame pixels a reduced pixel.
	k, sw, sh := searchReduction(fr.w, fr.h)
	sx, sy := float64(fr.w)/float64(sw), float64(fr.h)/float64(sh)
	if src.fill != nil {
		// The band-first decode's reduction (extractBandFirst): libjpeg's
		// k×k blocks, also where k does not divide a side (the part
		// blocks left out).
		sw, sh = small.Cols(), small.Rows()
		k = fr.w / sw
		sx, sy = float64(k), float64(k)
	}
	if small == nil {
		s, err := reduceArea(m, k, sw, sh)
		if err != nil {
			return nil, err
		}
		defer s.Close()
		small = &s
	}
	sp, top, err := sumPlane(*small, lut, opt.workers())
	if err != nil {
		return nil, err
	}
	defer f32Pool.put(sp.pix) // (sp may be replaced below; this buffer is the pool's)
	gradient, bg, noise, same, surf := flatten(sp, opt.workers())
	lv := frameLevels{rng: gradient, surf: surf, scale: sx}
	peak := float64(top)
	if !same {
		bg, noise, peak = levels(sp)
	}
	// A lit bench: the band is looked for on the lines' contrast, and
	// measured with the background beside it taken as a slope.
	lit := false
	if glow := glowRange(sp, 0.01*(peak-bg), opt.workers()); glow > 0 {
		if c, err := lineContrast(sp, 11); err == nil {
			gradient, lit = math.Max(gradient, glow), true
			sp = c
			bg, noise, peak = levels(sp)
		}
	}
	if !opt.ROI.Empty() {
		// Only the user's rectangle may hold the band: blank the rest.
		r := image.Rect(opt.ROI.Min.X/k, opt.ROI.Min.Y/k, (opt.ROI.Max.X+k-1)/k, (opt.ROI.Max.Y+k-1)/k)
		if r.Intersect(image.Rect(0, 0, sw, sh)).Empty() {
			return nil, fmt.Errorf("the region %v lies outside the %dx%d frame", opt.ROI, fr.w, fr.h)
		}
		for y := 0; y < sh; y++ {
			for x := 0; x < sw; x++ {
				if !(image.Point{x, y}).In(r) {
					sp.pix[y*sw+x] = float32(bg)
				}
			}
		}
		_, _, peak = levels(sp)
	}
	if peak-bg < 20*noise+0.02 {
		return nil, fmt.Errorf("%w: brightest pixel %.3f barely above the background %.3f", ErrNoBand, peak/3, bg/3)
	}
	thr := bg + math.Max(8*noise, 0.05*(peak-bg))
	pts := brightPoints(sp, bg, thr)
	if len(pts) < 10 {
		return nil, fmt.Errorf("%w: only %d bright pixels", ErrNoBand, len(pts))
	}
	ang := principalAngle(pts)
	if opt.FixAngle {
		ang = opt.AngleDeg
	}
	guesses := crossBands(sp, ang, bg, sx, sy, true, opt.workers())
	if len(guesses) == 0 {
		return nil, fmt.Errorf("%w: the bright pixels form no band (cut off by the frame edge?)", ErrNoBand)
	}
	if len(guesses) > 1 && !opt.FixAngle {
		// Several bands pull the bright pixels' axis away from any one
		// band's (two offset bands of unequal length): take the axis of the
		// strongest band's own pixels, twice.
		for iter := 0; iter < 2; iter++ {
			best := guesses[strongestGuess(guesses)]
			sn, cs := math.Sincos(ang * math.Pi / 180)
			var own []point
			for _, q := range pts {
				fx, fy := (q.x+0.5)*sx-0.5, (q.y+0.5)*sy-0.5
				if math.Abs(-fx*sn+fy*cs-best.vc) <= best.hh+2*math.Max(sx, sy) {
					own = append(own, q)
				}
			}
			if len(own) < 10 {
				break
			}
			ang = principalAngle(own)
			if g := crossBands(sp, ang, bg, sx, sy, true, opt.workers()); len(g) > 0 {
				guesses = g
			}
		}
	}
	if !all {
		// Just the strongest band.
		best := guesses[strongestGuess(guesses)]
		best.reach = math.Inf(1)
		guesses = []bandGuess{best}
	}
	located := time.Since(t0)
	lv.bg, lv.noise, lv.gradient, lv.lit = bg, noise, gradient, lit
	if all && len(guesses) > 1 && !opt.FixAngle {
		// The bright pixels of several bands together give a poorer
		// direction than one band's: settle the strongest band's angle
		// first, then look for the bands again along it (the bands are
		// parallel).
		if s, err := refineBand(fr, tables, clipAt, opt, ang, guesses[strongestGuess(guesses)], lv); err == nil {
			ang = s.AngleDeg
			if g := crossBands(sp, ang, bg, sx, sy, true, opt.workers()); len(g) > 0 {
				guesses = g
			}
		}
	}
	strips := make([]*Strip, len(guesses))
	for k, g := range guesses {
		s, err := refineBand(fr, tables, clipAt, opt, ang, g, lv)
		if err != nil {
			if !all {
				return nil, err
			}
			continue // a band that cannot be measured among others
		}
		s.Timing.Locate = located
		s.BandIndex, s.BandCount = k, len(guesses)
		strips[k] = &s
	}
	// A band with too few strong lines to measure its bow takes it from a
	// band that could: a band's bow grows with its distance from the
	// optical axis (the centre of the frame, as elsewhere), in proportion
	// for a pinhole camera behind a grating (its centre line is where the
	// elevation η is constant: y ∝ tan η·sqrt(1 + x²/f²)).
	sn, cs := math.Sincos(ang * math.Pi / 180)
	vAxis := -float64(fr.w-1)/2*sn + float64(fr.h-1)/2*cs
	ref := -1 // the last band off the axis that measured its own bow
	for k, st := range strips {
		if st != nil && st.bowMeasured && math.Abs(guesses[k].vc-vAxis) > 2*guesses[k].hh {
			ref = k
		}
	}
	if ref >= 0 {
		for k, st := range strips {
			if st == nil || st.bowMeasured {
				continue
			}
			g := guesses[k]
			g.bowC2 = strips[ref].Bow.C2 * (g.vc - vAxis) / (guesses[ref].vc - vAxis)
			if s, err := refineBand(fr, tables, clipAt, opt, ang, g, lv); err == nil && !s.Bow.zero() {
				s.Timing.Locate = located
				s.BandIndex, s.BandCount = k, len(guesses)
				strips[k] = &s
			}
		}
	}
	var out []Strip
	for _, s := range strips {
		if s != nil {
			out = append(out, *s)
		}
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("%w: no band could be straightened", ErrNoBand)
	}
	return out, nil
}

// reduceArea averages the frame m down to sw×sh (k×k blocks). When k is
// a power of two dividing both sides it halves k times over: OpenCV's
// area reduction has a vector path for halving alone, and two halvings of a
// 12 MP frame took 2.1 ms against 6.2 for one reduction by 4 (best of 15 on
// these machines). Each halving rounds to whole codes, so a reduced pixel
// may differ from the direct average by one code: far below what the band
// search looks at (its thresholds are several noise σ). The halvings go
// in stripes of decodeStripe rows (a multiple of k): a reduced pixel depends on its
// own block alone, so the result is the whole frame's, while the first
// halving's output stays a stripe's size (for a whole 12 MP frame it held
// 9 MB beside the frame, at a measurement's memory peak).
func reduceArea(m gocv.Mat, k, sw, sh int) (gocv.Mat, error) {
	if byStripes(k, sw, sh, m.Cols(), m.Rows()) {
		// (The stripes fill every row: no need to clear it first.)
		out, err := newMatUnset(sh, sw, m.Type(), false)
		if err != nil {
			return gocv.Mat{}, fmt.Errorf("reducing the frame for the band search: %w", err)
		}
		for y0 := 0; y0 < m.Rows(); y0 += decodeStripe {
			reduceStripe(m, out, k, y0, min(m.Rows(), y0+decodeStripe))
		}
		return out, nil
	}
	small := gocv.NewMat()
	gocv.Resize(m, &small, image.Pt(sw, sh), 0, 0, gocv.InterpolationArea)
	return small, nil
}

// byStripes reports whether reduceArea reduces a w×h frame to sw×sh by
// halvings in stripes: k a power of two (at most decodeStripe) dividing
// both sides.
func byStripes(k, sw, sh, w, h int) bool {
	return k > 1 && k&(k-1) == 0 && k <= decodeStripe && sw*k == w && sh*k == h
}

// reduceStripe reduces frame rows [y0, y1) (y0 a multiple of k, y1 too
// or the frame's end) into out's rows y0/k … y1/k − 1 by log2(k) halvings.
func reduceStripe(m, out gocv.Mat, k, y0, y1 int) {
	cur := m.Region(image.Rect(0, y0, m.Cols(), y1))
	for f := k; f > 1; f /= 2 {
		next := gocv.NewMat()
		gocv.Resize(cur, &next, image.Pt(cur.Cols()/2, cur.Rows()/2), 0, 0, gocv.InterpolationArea)
		cur.Close()
		cur = next
	}
	dst := out.Region(image.Rect(0, y0/k, out.Cols(), y1/k))
	cur.CopyTo(&dst)
	dst.Close()
	cur.Close()
}

// frameLevels is what the band search measured of the whole frame on its
// reduced frame: the background level and robust σ (with room light
// subtracted; on a lit bench, of the lines' contrast), the stray light's
// range (gradient), whether it is a lit bench; and the room light surface
// flatten fitted (surf), its range (rng), and the frame pixels a pixel of
// the plane it was fitted to (scale).
type frameLevels struct {
	bg, noise, gradient, rng, scale float64
	lit                             bool
	surf                            roomLight
}

// rowSource is how a frame gets rows it does not hold. reload decodes the
// whole photo again (for a frame that gave rows back); fill decodes rows
// [y0, y1) of the photo into the frame's Mat, for a frame that began with
// none (the band-first decode). Either may be nil.
type rowSource struct {
	reload func() (gocv.Mat, error)
	fill   func(y0, y1 int) error
}

// strongestGuess is the index of the band with the brightest plateau.
func strongestGuess(gs []bandGuess) int {
	best := 0
	for k, g := range gs {
		if g.level > gs[best].level {
			best = k
		}
	}
	return best
}

// bandGuess is a band's place across the dispersion direction, from the
// reduced frame: centre vc and half-height hh (full-frame px), and how far
// from vc the band may reach before a neighbouring band's territory
// (+Inf when alone).
type bandGuess struct {
	vc, hh, reach, level float64
	// bowC2, when not 0, is the bow to follow if the band's own lines are
	// too few to measure one (from a neighbouring band, see
	// extractBandsMat).
	bowC2 float64
}

// refineBand measures one band on the full frame and straightens it.
func refineBand(fr *frame, tables codeTables, clipAt int, opt Options, ang float64, g bandGuess, lv frameLevels) (Strip, error) {
	vc, hh, lit := g.vc, g.hh, lv.lit
	t1, filled := time.Now(), fr.filled
	// 2. On the full frame, in a region around the band: measure the band's
	// centre and height, straighten it with OpenCV, measure the centre
	// line of the straightened band at its strongest lines, and correct the
	// direction and offset by it until the line lies flat (at most four
	// rounds; the last slope is the residual tilt).
	side := math.Max(12, 0.6*hh)
	if lim := g.reach - hh - 2; side > lim {
		// Background rows must stay clear of the neighbouring band.
		side = math.Max(4, lim)
	}
	var roi image.Rectangle
	var rp plane // the profile's channel
	var rgb []float32
	var clip []uint8
	// The region's buffers go back to the pool when done with (and before
	// a larger region replaces them).
	release := func() {
		f32Pool.put(rp.pix)
		f32Pool.put(rgb)
		u8Pool.put(clip)
	}
	defer func() { release() }()
	var rbg float64
	var find plane  // where the band's place is measured: rp, or its contrast on a lit bench
	bowReach := 0.0 // room the region needs for a bowed band
	cut := false
	// prepare makes sure the linearised region holds the band as now
	// placed: it is linearised once, with room for the corrections (about
	// a quarter degree across the frame), and again only if the band left it.
	prepare := func() error {
		need, err := bandROI(fr.w, fr.h, ang, vc, hh+side+4+bowReach)
		if err != nil {
			return err
		}
		if !need.In(roi) {
			if roi, err = bandROI(fr.w, fr.h, ang, vc, hh+side+4+bowReach+0.004*float64(fr.w+fr.h)); err != nil {
				return err
			}
			if err := fr.need(roi.Min.Y, roi.Max.Y); err != nil {
				return err
			}
			// Only rows near the region are read from here on (64 more
			// each side, for corrections beyond the region's own margin);
			// the rest go back before the region's buffers are taken. The
			// region's own rows stay held: the colour pass and the display
			// strip below read within it without asking.
			fr.keepRows(roi.Min.Y-fillMargin, roi.Max.Y+fillMargin)
			release()
			rp, rgb, clip = linearRegion(*fr, roi, tables, clipAt, opt.Profile, opt.Channels, opt.workers())
			rbg = backgroundLevel(rp)
			find = rp
			if lit {
				// Stray light across the region: the band's place and
				// centre line are measured on the lines' contrast.
				if c, err := lineContrast(rp, 31); err == nil {
					find = c
					rbg = backgroundLevel(find)
				}
			}
		}
		return nil
	}
	// Unless colour is asked for, only the profile's own channel is
	// warped: a quarter of the work and of the memory.
	pick := func() ([]float32, int) {
		if opt.Channels {
			return rgb, 4
		}
		return rp.pix, 1
	}
	// The first round measures the centre line on the profile channel's
	// core alone; later rounds straighten in full, so that the round that
	// finds the band flat is also the final straightening (the usual case:
	// one correction, then flat).
	var s Strip
	var fit centreFit
	var u0, u1 float64
	done := false
	// take adopts a straightening; its centre fit too, except on a lit
	// bench, where the fit on the lines' contrast stands (the straightened
	// profile channel still holds the stray light).
	take := func(ns Strip, nf centreFit) {
		s = ns
		if !lit {
			fit = nf
		}
	}
	for round := 0; round < 4; round++ {
		if err := prepare(); err != nil {
			return Strip{}, err
		}
		if vc2, hh2, ok := crossBandRegion(find, roi, ang, rbg, vc, math.Min(hh+side, g.reach), !lit, opt.workers()); ok {
			vc, hh = vc2, hh2
			cut = false
		} else {
			cut = true
		}
		var ok bool
		u0, u1, ok = chord(fr.w, fr.h, ang, vc)
		if !ok || u1-u0 < 16 {
			return Strip{}, fmt.Errorf("%w: the band's centre line leaves the frame", ErrNoBand)
		}
		if round == 0 || lit {
			// (On a lit bench every round: the straightened profile
			// channel still holds the stray light, the contrast not.)
			fit = centreOnly(find.pix, roi, ang, vc, hh, side, u0, u1, opt.workers())
		} else {
			data, nc := pick()
			var err error
			if s, fit, err = straighten(data, nc, clip, roi, ang, vc, hh, side, u0, u1, opt.Profile, Bow{}, opt.workers(), lit); err != nil {
				return Strip{}, err
			}
			done = true
		}
		// Flat enough when the centre line rises less than 0.1 px from one
		// end of the band to the other.
		// …or, after the first correction, when the slope is no more than
		// twice its own error: a dim
		// band's centres scatter, and chasing them turned one 0.4° away.
		if !fit.ok || math.Abs(fit.slope)*(u1-u0) < 0.1 || (round > 0 && math.Abs(fit.slope) < 2*fit.slopeErr) {
			break
		}
		done = false
		b := fit.slope
		v0 := vc - float64(int(math.Ceil(hh))+int(math.Ceil(side)))
		if !opt.FixAngle {
			ang += math.Atan(b) * 180 / math.Pi
		} else {
			b = 0 // the user's angle stands; only the offset moves
		}
		vc = (v0 + fit.offset - b*u0) / math.Sqrt(1+b*b)
	}
	if !done {
		if err := prepare(); err != nil {
			return Strip{}, err
		}
		var ok bool
		u0, u1, ok = chord(fr.w, fr.h, ang, vc)
		if !ok || u1-u0 < 16 {
			return Strip{}, fmt.Errorf("%w: the band's centre line leaves the frame", ErrNoBand)
		}
		data, nc := pick()
		sf, ff, err := straighten(data, nc, clip, roi, ang, vc, hh, side, u0, u1, opt.Profile, Bow{}, opt.workers(), lit)
		if err != nil {
			return Strip{}, err
		}
		take(sf, ff)
	}
	// A band away from the optical axis (a second lamp's slit image above
	// the first) or seen through a lens with barrel or pincushion
	// distortion is bowed: its centre line is a parabola. When the bow
	// reaches 0.3 px over the band, the strip follows it.
	var bow Bow
	L := float64(len(s.Profile))
	jc := float64(int(math.Ceil(hh)) + int(math.Ceil(side)))
	own := fit.qok && math.Abs(fit.q2)*(L/2)*(L/2) > 0.3 && fit.qF > 9
	hinted := !own && g.bowC2 != 0 && len(fit.pts) >= 2 && math.Abs(g.bowC2)*(L/2)*(L/2) > 0.3
	if own {
		bow = Bow{C0: fit.q0 - jc, C1: fit.q1, C2: fit.q2, Mid: fit.mid}
	} else if hinted {
		// The neighbour's bow, placed through this band's own centres.
		mid := (L - 1) / 2
		var ts, ys, ws []float64
		for _, q := range fit.pts {
			t := q[0] - mid
			ts, ys, ws = append(ts, t), append(ys, q[1]-g.bowC2*t*t), append(ws, q[2])
		}
		a, b, ok := lineFit(ts, ys, ws)
		if ok {
			bow = Bow{C0: a - jc, C1: b, C2: g.bowC2, Mid: mid}
		}
	}
	if !bow.zero() && !opt.FixAngle {
		bowReach = math.Max(math.Abs(bow.at(0)), math.Abs(bow.at(L-1))) + math.Abs(bow.C0) + 2
		if err := prepare(); err != nil {
			return Strip{}, err
		}
		data, nc := pick()
		sb, fb, err := straighten(data, nc, clip, roi, ang, vc, hh, side, u0, u1, opt.Profile, bow, opt.workers(), lit)
		if err == nil {
			take(sb, fb)
			s.bowMeasured = own
		} else {
			bow = Bow{}
		}
	}
	if !opt.Channels && s.Saturated > 0 {
		// Saturated pixels in the band: straighten every channel after
		// all (the region once more with colour), so that a line clipped
		// in one channel can be measured in another.
		f32Pool.put(rgb)
		rgb = regionRGB(*fr, roi, tables)
		if s4, fit4, err := straighten(rgb, 4, clip, roi, ang, vc, hh, side, u0, u1, opt.Profile, bow, opt.workers(), lit); err == nil {
			take(s4, fit4)
		}
	}
	if opt.KeepImage {
		half, sd := int(math.Ceil(hh)), int(math.Ceil(side))
		var err error
		if s.Image, err = displayStrip(*fr, tables.lut, ang, u0, vc-float64(half+sd), len(s.Profile), 2*(half+sd)+1, bow, opt.ImageMaxWidth); err != nil {
			return Strip{}, err
		}
	}
	if fit.ok {
		s.ResidualTiltDeg = math.Atan(fit.slope) * 180 / math.Pi
		s.ResidualTiltErrDeg = math.Atan(fit.slopeErr) * 180 / math.Pi
	}
	ang = s.AngleDeg
	// The band's rows decoded here belong to the decode.
	s.Timing.Decode = fr.filled - filled
	s.Timing.Straighten = time.Since(t1) - s.Timing.Decode
	s.FrameW, s.FrameH = fr.w, fr.h
	bg, noise := lv.bg, lv.noise
	if fr.fill != nil {
		if b, n, ok := slabLevels(fr, tables.lut, lv, opt.workers()); ok {
			bg, noise = b, n
		}
	}
	s.Background, s.Noise, s.BackgroundRange, s.StrayLight = bg/3, noise/3, lv.gradient/3, lit
	cx, cy := float64(fr.w-1)/2, float64(fr.h-1)/2
	sn, cs := math.Sincos(ang * math.Pi / 180)
	s.OpticalCenter = (cx-s.Origin[0])*cs + (cy-s.Origin[1])*sn
	// Cut across its height: the band's half-height reaches past the frame
	// at the middle of the strip, or its edges could not be measured.
	mx, my := s.ToImage(float64(len(s.Profile)) / 2)
	for _, d := range []float64{-s.BandHalfHeight, s.BandHalfHeight} {
		x, y := mx-d*sn, my+d*cs
		if x < 0 || y < 0 || x > float64(fr.w-1) || y > float64(fr.h-1) {
			cut = true
		}
	}
	s.Warnings = qualityWarnings(s, cut)
	return s, nil
}

// FlatBackgroundWarning begins the warning given when Strip.FlatBackground
// is over a half: a caller with a graver warning of the same cause (no
// noise left in the profile at all) can put it in its place.
const FlatBackgroundWarning = "the compression has smoothed the background flat"

// qualityWarnings says in plain words when a strip should not be trusted
// as it stands.
func qualityWarnings(s Strip, cut bool) []string {
	var out []string
	if s.Saturated > 0.3 {
		out = append(out, fmt.Sprintf("%.0f%% of the band is saturated: shorten the exposure", 100*s.Saturated))
	}
	if math.Abs(s.ResidualTiltDeg) > math.Max(0.05, 2*s.ResidualTiltErrDeg) {
		out = append(out, fmt.Sprintf("the lines still lean %.3f° after straightening (curved or sheared line images?): centres may be smeared", s.ResidualTiltDeg))
	}
	if s.StrayLight {
		out = append(out, "stray light (a glow or a lit bench) lies on the frame: it was looked through, but shading the lamp housing and nearby lamps gives cleaner lines")
	}
	if s.BackgroundRange > 0.15 {
		out = append(out, fmt.Sprintf("room light varies by %.0f%% of full scale across the frame: it is subtracted, but a darker room gives cleaner lines", 100*s.BackgroundRange))
	}
	if s.Background > 0.3 {
		out = append(out, fmt.Sprintf("the background is at %.0f%% of full scale: darken the room or shield the camera", 100*s.Background))
	}
	if s.FlatBackground > 0.5 {
		out = append(out, fmt.Sprintf(FlatBackgroundWarning+" in %.0f%% of the columns beside the band: its ringing beside strong lines may pass for faint lines, and the noise is underestimated; save the photo at a higher quality", 100*s.FlatBackground))
	}
	if cut {
		out = append(out, "the line images run into the frame edge (the band is cut off across its height): centres may be biased; frame the spectrum with margin above and below")
	}
	return out
}

// sumPlane returns the sum of the linearised channels of an 8- or 16-bit
// BGR Mat, and its largest value as levels takes it (0 if none is above).
func sumPlane(m gocv.Mat, lut []float32, workers int) (plane, float32, error) {
	fr, err := newFrame(m)
	if err != nil {
		return plane{}, 0, err
	}
	p := plane{w: fr.w, h: fr.h, pix: f32Pool.get(fr.w * fr.h)} // every element written below
	var mu sync.Mutex
	var top float32
	inParts(len(p.pix), workers, 1<<16, func(lo, hi int) {
		var t float32
		if fr.bytes8 != nil {
			// 8 bits: the table as a fixed-size array and the samples
			// sliced a pixel at a time, without bounds checks in the loop.
			l := (*[256]float32)(lut)
			src, dst := fr.bytes8[3*lo:3*hi], p.pix[lo:hi]
			for i := range dst {
				q := src[3*i : 3*i+3 : 3*i+3]
				v := l[q[0]] + l[q[1]] + l[q[2]]
				dst[i] = v
				if v > t {
					t = v
				}
			}
		} else {
			for i := lo; i < hi; i++ {
				p.pix[i] = lut[fr.words16[3*i]] + lut[fr.words16[3*i+1]] + lut[fr.words16[3*i+2]]
				if p.pix[i] > t {
					t = p.pix[i]
				}
			}
		}
		mu.Lock()
		top = max(top, t)
		mu.Unlock()
	})
	return p, top, nil
}

// slabLevels measures the frame's background level and robust σ as the
// band search does on its reduced frame (k×k block averages in whole
// codes, flattened; on a lit bench, the lines' contrast), over the
// full-size rows a band-first frame holds: its reduced frame, from
// libjpeg's DCT scaling, keeps next to none of the noise (each block's
// finer detail is dropped) and rounds a dark background to one code, so
// that a 12 MP photo's σ read 0.00001 for 0.0003 and its level 0.0097 for
// 0.0103. The rows held are the band's region, most of it background;
// the level of a background that varies across the frame is this band's
// neighbourhood's. At most slabRows of them are read (from the top of
// those held): the statistics take about 20 000 samples. ok is false when
// the rows held are too few.
func slabLevels(fr *frame, lut []float32, lv frameLevels, workers int) (bg, noise float64, ok bool) {
	k, _, _ := searchReduction(fr.w, fr.h)
	y0 := (fr.kept[0] + k - 1) / k * k
	y1 := min(fr.kept[1], y0+slabRows) / k * k
	if y1-y0 < 8*k {
		return 0, 0, false
	}
	slab := fr.mat.Region(image.Rect(0, y0, fr.w, y1))
	defer slab.Close()
	small, err := reduceArea(slab, k, fr.w/k, (y1-y0)/k)
	if err != nil {
		return 0, 0, false
	}
	defer small.Close()
	sp, _, err := sumPlane(small, lut, workers)
	if err != nil {
		return 0, 0, false
	}
	defer f32Pool.put(sp.pix)
	// As flatten decides for the whole frame: the room light surface is
	// subtracted when its range reaches the σ (the surface fitted to the
	// whole reduced frame, over the slab's rows: a fit to a slab alone
	// would be poorly held across it). The slab's pixel (x, y) covers frame
	// pixels from (k·x, y0 + k·y), k of them each way; the surface's plane
	// may have another reduction (a 16 MP frame: searched at a quarter,
	// measured here by 5).
	if bg, noise = background(sp); lv.rng >= noise {
		step := float64(k) / lv.scale
		lv.surf.sub(sp, step/2-0.5, (float64(y0)+float64(k)/2)/lv.scale-0.5, step, workers)
		bg, noise = background(sp)
	}
	if lv.lit {
		if c, err := lineContrast(sp, 11); err == nil {
			bg, noise, _ = levels(c)
		}
	}
	return bg, noise, true
}

// slabRows is the most full-size rows slabLevels reads: 64 reduced rows
// of a 12 MP frame, 64 500 of its pixels (0.6 ms; the band's region, 1000
// rows, took 1.5).
const slabRows = 256

// crossBandRegion measures the band's centre and half-height at full
// resolution from the region plane, over rows vc ± reach.
//
// The level bg (the region's median) can sit off the background's mean
// by a fraction of a code (JPEG's quantised, skewed noise), and that
// offset, summed along a band thousands of pixels long, outweighed a
// faint band of sharp lines: five Balmer lines of FWHM 1.7 px across an
// 8 MP frame stood 0.8 above the rows beside them, which sat at −0.65,
// and the band was found 4 px high for 120 (the photo's lines then
// missed, its lamp not recognised). With sides, the rows beside the band,
// the outer tenth of the profile each side, set the zero instead: their
// median level per pixel comes off every bin. (Not on a lit bench, where
// p is the lines' contrast and bg its own level: there the rows beside
// the band put the lines of TestLitBench's dim band 0.5 px off.)
func crossBandRegion(p plane, roi image.Rectangle, ang, bg, vc, reach float64, sides bool, workers int) (float64, float64, bool) {
	sn, cs := math.Sincos(ang * math.Pi / 180)
	v0 := vc - reach
	n := int(2*reach) + 2
	// Linear splatting into 1 px bins keeps the sub-pixel centre. Every
	// column counts: thin line images (FWHM under 3 px) sampled every few
	// columns left a comb of spikes where bowed lines crossed the sampled
	// columns, and a 50 MP band's half-height came out 85 px for 307.
	// Along a row t = t0 − x·sn falls slowly, so the row goes in runs of
	// pixels that share a bin: a run adds Σw and Σw·x, and splits them
	// between its two bins as per-pixel splatting would. The rows go in
	// eight fixed chunks (run side by side), summed in order: the same
	// result for any number of workers.
	tmax := float64(n - 1)
	const chunks = 8
	parts, counts := make([][]float64, chunks), make([][]float64, chunks)
	inChunks(p.h, chunks, workers, func(k, y0, y1 int) {
		prof, count := make([]float64, n), make([]float64, n)
		for y := y0; y < y1; y++ {
			row := p.pix[y*p.w : (y+1)*p.w]
			t0 := -float64(roi.Min.X)*sn + float64(y+roi.Min.Y)*cs - v0
			// Only the columns where t can lie in [0, tmax) are visited
			// (a pixel's margin each side; each is still tested): a tilted
			// band leaves about a third of its region's rows outside.
			xa, xb := 0, p.w
			if sn != 0 {
				// (Clamped as floats: a nearly level band puts a and b
				// beyond int's range.)
				a, b := (t0-tmax)/sn, t0/sn
				xa = int(max(0, min(float64(p.w), math.Floor(min(a, b))-1)))
				xb = int(max(0, min(float64(p.w), math.Ceil(max(a, b))+2)))
			}
			for x := xa; x < xb; {
				t := t0 - float64(x)*sn
				if t < 0 || t >= tmax {
					x++
					continue
				}
				i := int(t)
				// The run's end (exclusive): where t leaves [i, i+1).
				end := p.w
				switch {
				case sn > 0:
					end = int(math.Floor((t0-float64(i))/sn)) + 1
				case sn < 0:
					end = int(math.Ceil((float64(i) + 1 - t0) / -sn))
				}
				end = max(x+1, min(p.w, end))
				var s0, s1 float64
				for xx := x; xx < end; xx++ {
					w := float64(row[xx]) - bg
					s0 += w
					s1 += w * float64(xx)
				}
				frs := (t0-float64(i))*s0 - sn*s1 // Σ w·(t − i)
				prof[i] += s0 - frs
				prof[i+1] += frs
				// The pixels, split alike (Σ 1, Σ x in closed form).
				np := float64(end - x)
				frc := (t0-float64(i))*np - sn*np*float64(x+end-1)/2
				count[i] += np - frc
				count[i+1] += frc
				x = end
			}
		}
		parts[k], counts[k] = prof, count
	})
	prof, count := make([]float64, n), make([]float64, n)
	for k, part := range parts {
		for i, v := range part {
			prof[i] += v
			count[i] += counts[k][i]
		}
	}
	if sides {
		m := min(n/2, max(3, n/10))
		var outer []float64
		for i := range n {
			if (i < m || i >= n-m) && count[i] >= 1 {
				outer = append(outer, prof[i]/count[i])
			}
		}
		if len(outer) > 0 {
			off := peaks.MedianInPlace(outer)
			for i := range prof {
				prof[i] -= off * count[i]
			}
		}
	}
	c, h, ok := bandEdges(prof, true)
	if !ok {
		return 0, 0, false
	}
	return v0 + c, h, true
}

// bandROI returns the bounding rectangle, clipped to the frame, of the band
// of half-height reach about the line v = vc along direction ang.
func bandROI(w, h int, ang, vc, reach float64) (image.Rectangle, error) {
	sn, cs := math.Sincos(ang * math.Pi / 180)
	x0, y0, x1, y1 := math.Inf(1), math.Inf(1), math.Inf(-1), math.Inf(-1)
	for _, v := range []float64{vc - reach, vc + reach} {
		u0, u1, ok := chord(w, h, ang, v)
		if !ok {
			// This edge of the band lies outside the frame: use the centre
			// line's chord for the extent along the band.
			if u0, u1, ok = chord(w, h, ang, vc); !ok {
				return image.Rectangle{}, fmt.Errorf("%w: the band lies outside the frame", ErrNoBand)
			}
		}
		for _, u := range []float64{u0, u1} {
			x, y := u*cs-v*sn, u*sn+v*cs
			x0, x1 = math.Min(x0, x), math.Max(x1, x)
			y0, y1 = math.Min(y0, y), math.Max(y1, y)
		}
	}
	r := image.Rect(int(math.Floor(x0))-2, int(math.Floor(y0))-2, int(math.Ceil(x1))+3, int(math.Ceil(y1))+3)
	r = r.Intersect(image.Rect(0, 0, w, h))
	if r.Dx() < 8 || r.Dy() < 4 {
		return image.Rectangle{}, fmt.Errorf("%w: the band region is empty", ErrNoBand)
	}
	return r, nil
}

// bgr returns the code values of the pixel whose blue sample is at i.
func (f frame) bgr(i int) (b, g, r int) {
	if f.bytes8 != nil {
		return int(f.bytes8[i]), int(f.bytes8[i+1]), int(f.bytes8[i+2])
	}
	return int(f.words16[i]), int(f.words16[i+1]), int(f.words16[i+2])
}

// regionRGB returns the region's linear R, G, B and linearised luma
// interleaved (four values a pixel).
func regionRGB(fr frame, roi image.Rectangle, tables codeTables) []float32 {
	w, h := roi.Dx(), roi.Dy()
	lut := tables.lut
	rgb := f32Pool.get(4 * w * h)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			src := 3 * ((y+roi.Min.Y)*fr.w + x + roi.Min.X)
			dst := y*w + x
			b, g, r := fr.bgr(src)
			rgb[4*dst], rgb[4*dst+1], rgb[4*dst+2], rgb[4*dst+3] = lut[r], lut[g], lut[b], tables.luma.of(r, g, b)
		}
	}
	return rgb
}

// of is the linearised luma of code values r, g, b.
func (t lumaLUT) of(r, g, b int) float32 {
	if t.exact != nil {
		return t.exact[299*r+587*g+114*b]
	}
	return t.at(0.299*float64(r) + 0.587*float64(g) + 0.114*float64(b))
}

// linearRegion copies the region of the frame into the profile's plane
// (linearised luma, or the linear channel sum) and a per-pixel clip mask
// (nil when no pixel of the region is clipped); with all set, also into
// linear R, G, B and luma interleaved (four values a pixel), for the
// colour channels.
func linearRegion(fr frame, roi image.Rectangle, tables codeTables, clipAt int, profile string, all bool, workers int) (plane, []float32, []uint8) {
	w, h := roi.Dx(), roi.Dy()
	lut := tables.lut
	// Every element is written below: pooled buffers need no clearing.
	pp := plane{w: w, h: h, pix: f32Pool.get(w * h)}
	var rgb []float32
	if all {
		rgb = f32Pool.get(4 * w * h)
	}
	sum := profile != ProfileLuma
	fast := fr.bytes8 != nil && !all && tables.luma.exact != nil
	// row8 is region row y of an 8-bit frame, 3 bytes (B, G, R) a pixel.
	row8 := func(y int) []uint8 {
		return fr.bytes8[3*((y+roi.Min.Y)*fr.w+roi.Min.X) : 3*((y+roi.Min.Y)*fr.w+roi.Max.X)]
	}
	var clip []uint8 // bit 0: R clipped, bit 1: G, bit 2: B
	if !fast {
		clip = u8Pool.get(w * h)
	}
	var anyClip atomic.Uint32
	var atClip [256]uint8 // 1 for the 8-bit codes that reach clipAt (sumRow8)
	for c := max(0, min(256, clipAt)); c < 256; c++ {
		atClip[c] = 1
	}
	inParts(h, workers, max(1, 1<<16/max(1, w)), func(y0, y1 int) {
		var seen uint8
		if fast {
			// The common case (8-bit photo, one channel) without the
			// general loop's branches and calls: half the time. Whether
			// anything is clipped is all it notes: the mask is made
			// after, when something is (most photos have none, and its
			// buffer, a byte a pixel, added to the measurement's peak).
			lumaTab := tables.luma.exact
			for y := y0; y < y1; y++ {
				src := row8(y)
				dst := pp.pix[y*w : (y+1)*w]
				if sum {
					seen |= sumRow8(dst, src, (*[256]float32)(lut), &atClip)
					continue
				}
				seen |= lumaRow8(dst, src, (*[lumaCodes]float32)(lumaTab), &atClip)
			}
		} else {
			for y := y0; y < y1; y++ {
				for x := 0; x < w; x++ {
					src := 3 * ((y+roi.Min.Y)*fr.w + x + roi.Min.X)
					dst := y*w + x
					b, g, r := fr.bgr(src)
					if sum {
						pp.pix[dst] = lut[r] + lut[g] + lut[b]
					} else {
						pp.pix[dst] = tables.luma.of(r, g, b)
					}
					if all {
						rgb[4*dst], rgb[4*dst+1], rgb[4*dst+2], rgb[4*dst+3] = lut[r], lut[g], lut[b], tables.luma.of(r, g, b)
					}
					cb := clipBits(r, g, b, clipAt)
					clip[dst] = cb
					seen |= cb
				}
			}
		}
		anyClip.Or(uint32(seen))
	})
	if fast && anyClip.Load() != 0 {
		clip = u8Pool.get(w * h)
		inParts(h, workers, max(1, 1<<16/max(1, w)), func(y0, y1 int) {
			for y := y0; y < y1; y++ {
				src := row8(y)
				cl := clip[y*w : (y+1)*w]
				for x := range cl {
					cl[x] = clipBits(int(src[3*x+2]), int(src[3*x+1]), int(src[3*x]), clipAt)
				}
			}
		})
	}
	return pp, rgb, clipOrNil(clip, uint8(anyClip.Load()))
}

// sumRow8 writes to dst the sum of each pixel's linearised R, G and B
// (lut[R] + lut[G] + lut[B], in that order) from src (B, G, R bytes) and
// returns a non-zero byte when any code is marked in at (those reaching
// the clip level). Two pixels a step and the clip test as a table look-up:
// 6.4 -> 3.4 ms a 12 MP band region on one core, the same values.
func sumRow8(dst []float32, src []uint8, lut *[256]float32, at *[256]uint8) uint8 {
	src = src[:3*len(dst)]
	var seen uint8
	x := 0
	for ; x+1 < len(dst); x += 2 {
		p := src[3*x : 3*x+6 : 3*x+6]
		dst[x] = lut[p[2]] + lut[p[1]] + lut[p[0]]
		dst[x+1] = lut[p[5]] + lut[p[4]] + lut[p[3]]
		seen |= at[p[0]] | at[p[1]] | at[p[2]] | at[p[3]] | at[p[4]] | at[p[5]]
	}
	if x < len(dst) {
		p := src[3*x : 3*x+3 : 3*x+3]
		dst[x] = lut[p[2]] + lut[p[1]] + lut[p[0]]
		seen |= at[p[0]] | at[p[1]] | at[p[2]]
	}
	return seen
}

// lumaRow8 writes to dst each pixel's linear luma, tab[299·R + 587·G +
// 114·B] (lumaLUT.exact) from src (B, G, R bytes), and returns a non-zero
// byte when any code is marked in at, as sumRow8 does: two pixels a step,
// the clip test a table look-up instead of three comparisons.
func lumaRow8(dst []float32, src []uint8, tab *[lumaCodes]float32, at *[256]uint8) uint8 {
	src = src[:3*len(dst)]
	var seen uint8
	x := 0
	for ; x+1 < len(dst); x += 2 {
		p := src[3*x : 3*x+6 : 3*x+6]
		dst[x] = tab[299*int(p[2])+587*int(p[1])+114*int(p[0])]
		dst[x+1] = tab[299*int(p[5])+587*int(p[4])+114*int(p[3])]
		seen |= at[p[0]] | at[p[1]] | at[p[2]] | at[p[3]] | at[p[4]] | at[p[5]]
	}
	if x < len(dst) {
		p := src[3*x : 3*x+3 : 3*x+3]
		dst[x] = tab[299*int(p[2])+587*int(p[1])+114*int(p[0])]
		seen |= at[p[0]] | at[p[1]] | at[p[2]]
	}
	return seen
}

// clipOf returns the clip bits of the region pixel nearest (x, y): none
// when the region has no clip mask (nothing clipped).
func clipOf(clip []uint8, w int, x, y float64) uint8 {
	if clip == nil {
		return 0
	}
	return clip[int(y+0.5)*w+int(x+0.5)]
}

// clipBits marks which of code values r, g, b reach the clip level: bit 0
// R, bit 1 G, bit 2 B.
func clipBits(r, g, b, at int) uint8 {
	var cb uint8
	if r >= at {
		cb |= 1
	}
	if g >= at {
		cb |= 2
	}
	if b >= at {
		cb |= 4
	}
	return cb
}

// clipOrNil returns the clip mask, or nil (its buffer back in the pool)
// when nothing is clipped: most photos, whose straightening then skips
// the per-pixel look-ups.
func clipOrNil(clip []uint8, any uint8) []uint8 {
	if any == 0 {
		u8Pool.put(clip)
		return nil
	}
	return clip
}

// straighten warps the band into a strip whose columns run along the
// dispersion (OpenCV warpAffine, bilinear, on linear values), subtracts a
// per-column background taken from the rows beside the band, and sums the
// band rows into profiles.
//
// The strip's rows are numbered j = 0 … H−1 across the band and its sides
// (H = 2·(half + sd) + 1), and the centre fit it returns is in those rows;
// but only the band rows with a margin (the core) and the side rows the
// background is taken from are warped: a third less work on a typical
// band than warping every row.
func straighten(rgb []float32, nc int, clip []uint8, roi image.Rectangle, ang, vc, hh, side, u0, u1 float64, profile string, bow Bow, workers int, lit bool) (Strip, centreFit, error) {
	w, h := roi.Dx(), roi.Dy()
	L := int(math.Floor(u1-u0)) + 1
	half := int(math.Ceil(hh))
	sd := int(math.Ceil(side))
	H := 2*(half+sd) + 1
	v0 := vc - float64(half+sd)
	sn, cs := math.Sincos(ang * math.Pi / 180)
	m := coreMargin(half, sd)
	Hc := 2*(half+m) + 1
	off := sd - m // strip row of core row 0
	core, err := warp(rgb, nc, roi, ang, u0, v0+float64(off), 1, L, Hc, bow)
	if err != nil {
		return Strip{}, centreFit{}, err
	}
	defer core.Close()
	px, err := core.DataPtrFloat32()
	if err != nil {
		return Strip{}, centreFit{}, fmt.Errorf("straighten: %w", err)
	}
	// At most 12 evenly spaced rows on each side feed the per-column
	// background median: rows j = k·every from the top edge and from the
	// bottom edge, k < nSide, one warp each side.
	every := max(1, sd/12)
	nSide := (sd + every - 1) / every
	var sides [2][]float32
	if nSide > 0 {
		for k, st := range [2]struct{ v, step float64 }{{v0, float64(every)}, {v0 + float64(H-1), -float64(every)}} {
			m, err := warp(rgb, nc, roi, ang, u0, st.v, st.step, L, nSide, bow)
			if err != nil {
				return Strip{}, centreFit{}, err
			}
			defer m.Close()
			if sides[k], err = m.DataPtrFloat32(); err != nil {
				return Strip{}, centreFit{}, fmt.Errorf("straighten: %w", err)
			}
		}
	}
	s := Strip{AngleDeg: ang, BandHalfHeight: hh, Bow: bow}
	s.Origin = [2]float64{u0*cs - vc*sn, u0*sn + vc*cs}
	for k, c := range [][2]float64{{u0, vc - hh}, {u1, vc - hh}, {u1, vc + hh}, {u0, vc + hh}} {
		s.Band[k] = [2]float64{c[0]*cs - c[1]*sn, c[0]*sn + c[1]*cs}
	}
	// Row by row (the strips' memory order): band rows add into per-column
	// sums, side rows into the background samples. A strip pixel whose
	// source lies outside the frame counts for nothing.
	acc := make([][]float64, nc) // R, G, B, luma; or the profile's one channel
	for c := range acc {
		acc[c] = make([]float64, L)
	}
	nIn := make([]int, L)
	s.Clipped = make([]bool, L)
	if nc == 4 {
		for c := range s.ChannelClipped {
			s.ChannelClipped[c] = make([]bool, L)
		}
	}
	// Curved line images (conical diffraction, short focal lengths) are
	// followed: band row j is sampled k(i)·(j − jc)² columns along, so each
	// line's light adds up at its centre-row position instead of smearing.
	curv := lineCurvature(px, nc, nc-1, L, Hc, m, workers)
	s.CurvaturePX = 0
	if curv != nil {
		t := float64(half)
		for _, k := range curv.bow {
			s.CurvaturePX = math.Max(s.CurvaturePX, math.Abs(k)*t*t)
		}
		for _, b := range curv.lean {
			s.LeanDeg = math.Max(s.LeanDeg, math.Abs(math.Atan(b)*180/math.Pi))
		}
	}
	jc := float64(H-1) / 2
	nbg := 2 * nSide
	// Column-major: bg[(c*L+i)*nbg + k]; only the nb[i] samples written are
	// read, so a borrowed slice's old contents do no harm.
	bgBuf := scratch32.borrow(nc * L * nbg)
	defer scratch32.Put(bgBuf)
	bg := (*bgBuf)[:nc*L*nbg]
	nb := make([]int, L)
	nTop := make([]int, L)
	// Columns are independent (each sums its own rows in order): the
	// parts of the strip's width run concurrently, with the same result.
	var nBandAll, nClipAll atomic.Int64
	inParts(L, workers, 256, func(c0, c1 int) {
		var nBand, nClip int
		runs := make([]int, c1-c0+1) // band rows counted a run at a time (the usual band row below)
		defer func() {
			n := 0
			for i := c0; i < c1; i++ {
				n += runs[i-c0]
				nIn[i] += n
			}
		}()
		for j := 0; j < H; j++ {
			inBand := j >= sd && j <= H-1-sd
			if !inBand && (min(j, H-1-j)%every != 0) {
				continue
			}
			// Where row j's samples are: a core row, or row k of a side strip.
			src, base0 := px, (j-off)*L
			if !inBand {
				if j < sd {
					src, base0 = sides[0], (j/every)*L
				} else {
					src, base0 = sides[1], ((H-1-j)/every)*L
				}
			}
			fy := v0 + float64(j)
			// Source x(i) = ax + i·cs, y(i) = ay + i·sn: the columns whose
			// source lies inside the region form one range.
			ax := u0*cs - fy*sn - float64(roi.Min.X)
			ay := u0*sn + fy*cs - float64(roi.Min.Y)
			ilo, ihi := colRange(ax, cs, float64(w-1), L)
			jlo, jhi := colRange(ay, sn, float64(h-1), L)
			ilo, ihi = max(ilo, jlo), min(ihi, jhi)
			if !bow.zero() {
				ilo, ihi = 0, L-1 // bowed rows: every column, bounds checked below
			}
			ilo, ihi = max(ilo, c0), min(ihi, c1-1)
			if inBand && bow.zero() && clip == nil && nc == 1 {
				// The usual band row: no bow, nothing clipped, one
				// channel: the ends checked as the general loop checks
				// every column, then a sum, following the line shape
				// when there is one.
				inside := func(i int) bool {
					x, y := ax+float64(i)*cs, ay+float64(i)*sn
					return x >= 0 && y >= 0 && x <= float64(w-1) && y <= float64(h-1)
				}
				for ilo <= ihi && !inside(ilo) {
					ilo++
				}
				for ihi >= ilo && !inside(ihi) {
					ihi--
				}
				if ilo > ihi {
					continue
				}
				nBand += ihi - ilo + 1
				// Every column of [ilo, ihi] counts this row: noted at the
				// run's ends, added up after the rows.
				runs[ilo-c0]++
				runs[ihi+1-c0]--
				if curv == nil {
					a := acc[0][ilo : ihi+1]
					for k, v := range px[base0+ilo : base0+ihi+1] {
						a[k] += float64(v)
					}
					continue
				}
				// Following the line shape: the column offset at row
				// offset t is lean[i]·t + bow[i]·t·t (lineShape.shift,
				// each term only when there is one).
				a, row := acc[0], px[base0:base0+L]
				t := float64(j) - jc
				sum := func(i int, xi float64) {
					i0 := int(math.Floor(xi))
					if i0 >= 0 && i0+1 < L {
						f := float32(xi - float64(i0))
						a[i] += float64(row[i0]*(1-f) + row[i0+1]*f)
					} else {
						a[i] += float64(row[i])
					}
				}
				switch lean, bw := curv.lean, curv.bow; {
				case lean != nil && bw != nil:
					lean, bw := lean[:ihi+1], bw[:ihi+1]
					for i := ilo; i <= ihi; i++ {
						sum(i, float64(i)+(lean[i]*t+bw[i]*t*t))
					}
				case lean != nil:
					lean := lean[:ihi+1]
					for i := ilo; i <= ihi; i++ {
						sum(i, float64(i)+lean[i]*t)
					}
				default:
					bw := bw[:ihi+1]
					for i := ilo; i <= ihi; i++ {
						sum(i, float64(i)+bw[i]*t*t)
					}
				}
				continue
			}
			for i := ilo; i <= ihi; i++ {
				x := ax + float64(i)*cs
				y := ay + float64(i)*sn
				if !bow.zero() {
					b := bow.at(float64(i))
					x, y = x-b*sn, y+b*cs
				}
				if x < 0 || y < 0 || x > float64(w-1) || y > float64(h-1) {
					continue // rounding at the range's ends
				}
				base := nc * (base0 + i)
				if inBand {
					nIn[i]++
					nBand++
					if cb := clipOf(clip, w, x, y); cb != 0 {
						s.Clipped[i] = true
						nClip++
						if nc == 4 {
							for c := 0; c < 3; c++ {
								if cb&(1<<c) != 0 {
									s.ChannelClipped[c][i] = true
								}
							}
						}
					}
					if curv != nil {
						t := float64(j) - jc
						xi := float64(i) + curv.shift(i, t)
						i0 := int(math.Floor(xi))
						if i0 >= 0 && i0+1 < L {
							f := float32(xi - float64(i0))
							b0, b1 := nc*(base0+i0), nc*(base0+i0+1)
							for c := 0; c < nc; c++ {
								acc[c][i] += float64(px[b0+c]*(1-f) + px[b1+c]*f)
							}
							continue
						}
					}
					for c := 0; c < nc; c++ {
						acc[c][i] += float64(px[base+c])
					}
				} else if nb[i] < nbg {
					for c := 0; c < nc; c++ {
						bg[(c*L+i)*nbg+nb[i]] = src[base+c]
					}
					nb[i]++
					if j < sd {
						nTop[i] = nb[i] // rows run top to bottom: the top side's samples come first
					}
				}
			}
		}
		nBandAll.Add(int64(nBand))
		nClipAll.Add(int64(nClip))
	})
	nBand, nClip := int(nBandAll.Load()), int(nClipAll.Load())
	rows := float64(2*half + 1)
	// The profile channel's scatter beside the band, per column; -1 where
	// too few samples lie beside it to measure one (0 is a measure: a
	// background the compression left flat).
	spread := make([]float64, L)
	for i := range spread {
		spread[i] = -1
	}
	inParts(L, workers, 256, func(c0, c1 int) {
		tmp := make([]float64, nbg)
		for i := c0; i < c1; i++ {
			for c := 0; c < nc; c++ {
				bgv := 0.0
				if nb[i] > 0 {
					v := tmp[:nb[i]]
					for k := range v {
						v[k] = float64(bg[(c*L+i)*nbg+k])
					}
					// Each sample's own level: the pooled median; or, on a
					// lit bench (stray light sloping across the band), its
					// side's median, the band's level midway between them.
					// The profile channel also gives the samples' scatter
					// (their median absolute deviation from that level).
					nt := nTop[i]
					switch {
					case lit && nt > 0 && nt < len(v):
						top, bot := peaks.MedianInPlace(v[:nt]), peaks.MedianInPlace(v[nt:])
						bgv = (top + bot) / 2
						if c == nc-1 && nb[i] >= 4 {
							for k := range v {
								if k < nt {
									v[k] = math.Abs(v[k] - top)
								} else {
									v[k] = math.Abs(v[k] - bot)
								}
							}
							spread[i] = peaks.MedianInPlace(v)
						}
					case c == nc-1 && nb[i] >= 4:
						bgv, spread[i] = medMADFew(v)
					default:
						bgv = peaks.MedianInPlace(v)
					}
				}
				if nIn[i] > 0 {
					acc[c][i] = (acc[c][i] - float64(nIn[i])*bgv) * rows / float64(nIn[i])
				}
			}
		}
	})
	if nc == 4 {
		s.Channels = [3][]float64{acc[0], acc[1], acc[2]}
		s.Luma = acc[3]
		s.Sum = make([]float64, L)
		for i := range s.Sum {
			s.Sum[i] = acc[0][i] + acc[1][i] + acc[2][i]
		}
		s.Profile = s.Sum
		if profile == ProfileLuma {
			s.Profile = s.Luma
		}
	} else {
		s.Profile = acc[0]
		if profile == ProfileLuma {
			s.Luma = acc[0]
		} else {
			s.Sum = acc[0]
		}
	}
	if nBand > 0 {
		s.Saturated = float64(nClip) / float64(nBand)
	}
	s.NoiseShape, s.FlatBackground = noiseShape(spread)
	return s, fitCentreLine(px, nc, nc-1, L, Hc, s.Profile).shifted(float64(off)), nil
}

// medMADFew returns the median of the few values v (sorting them) and
// their median absolute deviation from it, the values two selections give
// (peaks.MedianInPlace: the mean of the two middle values for an even
// count). Sorted, the deviations in increasing order are a merge of the
// values below the median read downwards and those above read upwards:
// for the 24 samples of a strip column, half the time of two selections.
func medMADFew(v []float64) (med, mad float64) {
	if len(v) == 24 {
		sort24((*[24]float64)(v)) // a whole column's samples, the usual count
	} else {
		for i := 1; i < len(v); i++ { // insertion sort: a few dozen values at most
			x, j := v[i], i
			for ; j > 0 && v[j-1] > x; j-- {
				v[j] = v[j-1]
			}
			v[j] = x
		}
	}
	n := len(v)
	med = v[n/2]
	if n%2 == 0 {
		med = (v[n/2-1] + v[n/2]) / 2
	}
	// The k-th smallest deviation (k = n/2), and for an even count the one
	// before it too.
	b := sort.SearchFloat64s(v, med) // v[b:] ≥ med, v[:b] < med
	a := b - 1
	var prev, cur float64
	for k := 0; k <= n/2; k++ {
		prev = cur
		if a >= 0 && (b >= n || math.Abs(v[a]-med) <= math.Abs(v[b]-med)) {
			cur = math.Abs(v[a] - med)
			a--
		} else {
			cur = math.Abs(v[b] - med)
			b++
		}
	}
	if n%2 == 0 {
		return med, (prev + cur) / 2
	}
	return med, cur
}

// colRange returns the columns i in [0, L) with 0 ≤ a + i·d ≤ lim.
func colRange(a, d, lim float64, L int) (int, int) {
	if math.Abs(d) < 1e-12 {
		if a < 0 || a > lim {
			return 0, -1
		}
		return 0, L - 1
	}
	t0, t1 := -a/d, (lim-a)/d
	if t0 > t1 {
		t0, t1 = t1, t0
	}
	lo := max(0, int(math.Ceil(t0-1e-9)))
	hi := min(L-1, int(math.Floor(t1+1e-9)))
	return lo, hi
}

// displayStrip warps the band from the decoded frame's own codes (OpenCV,
// bilinear, 8 or 16 bits a sample) into an L×H strip for display, scaled
// in linear light so that its brightest samples are white (encodeStrip),
// sRGB-encoded, and shrunk to at most maxW pixels across when maxW > 0
// (area averaging from twice that width up, where thin lines would
// otherwise alias; bilinear below, a fifth of the time for a 1920 px strip).
// Display only: interpolating codes is not interpolating intensity.
func displayStrip(fr frame, lut []float32, ang, u0, v0 float64, L, H int, bow Bow, maxW int) (*image.RGBA, error) {
	sn, cs := math.Sincos(ang * math.Pi / 180)
	var dst gocv.Mat
	var err error
	if bow.zero() {
		dst, err = warpAffine(fr.mat, image.Point{}, sn, cs, u0, v0, 1, L, H)
	} else {
		dst, err = remapBowed(fr.mat, image.Rectangle{}, sn, cs, u0, v0, 1, L, H, bow)
	}
	if err != nil {
		return nil, err
	}
	defer func() { dst.Close() }() // the shrunk strip replaces dst below
	if maxW > 0 && L > maxW {
		k := float64(maxW) / float64(L)
		interp := gocv.InterpolationLinear
		if L >= 2*maxW {
			interp = gocv.InterpolationArea
		}
		L, H = maxW, max(1, int(float64(H)*k+0.5))
		small := gocv.NewMat()
		gocv.Resize(dst, &small, image.Pt(L, H), 0, 0, interp)
		dst.Close()
		dst = small
		if dst.Empty() || dst.Cols() != L || dst.Rows() != H {
			return nil, errors.New("straighten: OpenCV returned no display strip")
		}
	}
	if b, err := dst.DataPtrUint8(); err == nil && dst.Type() == gocv.MatTypeCV8UC3 && len(b) >= 3*L*H {
		return encodeStrip(b, lut, L, H), nil
	}
	if w, err := dst.DataPtrUint16(); err == nil && dst.Type() == gocv.MatTypeCV16UC3 && len(w) >= 3*L*H {
		return encodeStrip(w, lut, L, H), nil
	}
	return nil, errors.New("straighten: unexpected display strip type")
}

// imagePix lends the pixel buffers of band images (Strip.Image): a 1080p
// photo's is about 1.3 MB, a third of what each photo of a batch left for
// Go's collector; the batch gives each back once it is written
// (Strip.ReleaseImage). Go memory: a buffer never given back is collected
// as usual. At most a few are kept.
var imagePix pixPool

type pixPool struct {
	mu   sync.Mutex
	free [][]uint8
}

// get returns a buffer of n bytes, its contents arbitrary.
func (p *pixPool) get(n int) []uint8 {
	p.mu.Lock()
	defer p.mu.Unlock()
	for i, b := range p.free {
		if cap(b) >= n {
			p.free = append(p.free[:i], p.free[i+1:]...)
			return b[:n]
		}
	}
	return make([]uint8, n)
}

func (p *pixPool) put(b []uint8) {
	p.mu.Lock()
	defer p.mu.Unlock()
	if len(p.free) < 4 {
		p.free = append(p.free, b)
	}
}

// ReleaseImage gives the band image's pixels back, to be reused by a later
// strip's, and sets Image to nil: for a caller done with the image and
// with every copy of it (a batch, once the image is written).
func (s *Strip) ReleaseImage() {
	if s.Image != nil {
		imagePix.put(s.Image.Pix)
		s.Image = nil
	}
}

// encodeStrip turns an L×H strip of BGR codes into an sRGB image scaled in
// linear light so that the brightest samples are white: the 99.99th
// percentile of every sample, counted in a histogram of the codes (the
// transfer table is monotonic). Hardly more than a strong line's core
// reaches white, so lines keep their colour (at the 99.9th, a tall band's
// green mercury line showed yellow-white), while a few hot pixels do not
// set the scale.
func encodeStrip[T uint8 | uint16](codes []T, lut []float32, L, H int) *image.RGBA {
	n := 3 * L * H
	hist := make([]int, len(lut))
	for _, c := range codes[:n] {
		hist[c]++
	}
	rank := int(0.9999 * float64(n-1))
	code, seen := 0, 0
	for c, k := range hist {
		if seen += k; seen > rank {
			code = c
			break
		}
	}
	top := math.Max(float64(lut[code]), 1e-6)
	// Every pixel is written below: a lent buffer needs no clearing.
	img := &image.RGBA{Pix: imagePix.get(4 * L * H), Stride: 4 * L, Rect: image.Rect(0, 0, L, H)}
	tab := srgbTable()
	scale := float64(len(tab)-1) / top
	// Each code's output byte, worked out once per code (the codes of a
	// strip repeat: a 1080p photo's strip has about 700 000 samples of 256
	// codes) and then looked up: the same bytes.
	enc := make([]uint8, len(lut))
	for c := range enc {
		k := int(float64(lut[c]) * scale)
		enc[c] = tab[max(0, min(len(tab)-1, k))]
	}
	for i := 0; i < L*H; i++ {
		p, q := img.Pix[4*i:4*i+4:4*i+4], codes[3*i:3*i+3:3*i+3]
		p[0], p[1], p[2], p[3] = enc[q[2]], enc[q[1]], enc[q[0]], 255
	}
	return img
}

// srgbTable encodes linear light in [0, 1] (4096 steps) as 8-bit sRGB
// (IEC 61966-2-1), built once per process.
var srgbTable = sync.OnceValue(func() *[4096]uint8 {
	var tab [4096]uint8
	for k := range tab {
		v := float64(k) / float64(len(tab)-1)
		if v <= 0.0031308 {
			v *= 12.92
		} else {
			v = 1.055*math.Pow(v, 1/2.4) - 0.055
		}
		tab[k] = uint8(v*255 + 0.5)
	}
	return &tab
})

// lumaCodes is the length of lumaLUT.exact: 299R′+587G′+114B′ for 8-bit
// codes reaches 1000·255.
const lumaCodes = 1000*255 + 1

// lumaLUT linearises a luma value given on the code scale (0..levels−1) by
// interpolating a table: for a line of one colour, R′, G′ and B′ follow
// the same transfer curve, so the linearised luma is proportional to its
// intensity.
type lumaLUT struct {
	step  float64
	tab   []float32
	exact []float32 // 8-bit: indexed by 299R′+587G′+114B′ (1000 × luma), lumaCodes long
}

func newLumaLUT(levels int, linear bool) lumaLUT {
	n := 4097
	t := lumaLUT{step: float64(levels-1) / float64(n-1), tab: make([]float32, n)}
	if levels == 256 {
		t.exact = make([]float32, lumaCodes)
		for i := range t.exact {
			v := float64(i) / (1000 * 255)
			if !linear {
				v = srgbToLinear(v)
			}
			t.exact[i] = float32(v)
		}
	}
	for i := range t.tab {
		v := float64(i) / float64(n-1)
		if !linear {
			v = srgbToLinear(v)
		}
		t.tab[i] = float32(v)
	}
	return t
}

func (t lumaLUT) at(code float64) float32 {
	x := code / t.step
	i := int(x)
	if i >= len(t.tab)-1 {
		return t.tab[len(t.tab)-1]
	}
	f := float32(x - float64(i))
	return t.tab[i]*(1-f) + t.tab[i+1]*f
}

// lineCurvature measures how the strongest lines lean and bow across the
// band: for each, the luma centroid in six groups of band rows, fitted
// with a + b·t + k·t² (t the row offset from the centre row); b and k are
// then fitted linearly along the strip. It returns them per column, each
// only when it moves a line by 0.25 px at the band's edge (smaller terms
// are within what the estimate itself scatters on straight lines), or nil
// when neither does or they cannot be measured.
func lineCurvature(px []float32, stride, off, L, H, sd, workers int) *lineShape {
	jc := float64(H-1) / 2
	lo, hi := sd, H-1-sd
	if hi-lo < 12 {
		return nil
	}
	prof := bandSum(px, stride, off, L, lo, hi, workers)
	// Heights above the strip's level (its median column), so that noise
	// maxima on the background neither pass for lines nor weigh in.
	base := peaks.Median(prof)
	for i := range prof {
		prof[i] -= base
	}
	maxima := maximaByHeight(prof, 5)
	type meas struct{ col, b, k, w float64 }
	const r, groups = 4, 6
	per := (hi - lo + 1) / groups
	// shapeOf measures line m: its centroid per row group, above the
	// window's minimum, fitted with a + b·t + k·t². With follow unset
	// every group's window sits at the line's centre-row column; set, the
	// window follows the line, the groups taken from the centre outwards,
	// each row's window centred where the groups measured so far put the
	// line (a line leaning 5° across a tall band moves ten pixels and
	// more, far past a fixed window), then all groups once more about the
	// fit through them. left says the fixed windows lose the line: its
	// ends at the band's edges lie more than a pixel off (a window off
	// the line pulls the centroid towards its own centre: a bow of 8 px
	// was measured as 4), or a group holds less than half the light of
	// another.
	shapeOf := func(m int, follow bool) (b, k float64, left, ok bool) {
		gts, gcs, gws := make([]float64, groups), make([]float64, groups), make([]float64, groups)
		var have []int
		model := func() func(float64) float64 {
			var t, c, w []float64
			for _, g := range have {
				t, c, w = append(t, gts[g]), append(c, gcs[g]), append(w, gws[g])
			}
			switch {
			case len(t) >= 3:
				if a, b, k, ok := quadFit(t, c, w); ok {
					return func(x float64) float64 { return a + b*x + k*x*x }
				}
			case len(t) == 2:
				if a, b, ok := lineFit(t, c, w); ok {
					return func(x float64) float64 { return a + b*x }
				}
			case len(t) == 1:
				return func(float64) float64 { return c[0] }
			}
			return func(float64) float64 { return float64(m) }
		}
		measure := func(g int, at func(float64) float64) bool {
			var sw, sx, st float64
			for j := lo + g*per; j < lo+(g+1)*per; j++ {
				c := int(math.Round(at(float64(j) - jc)))
				if c-r < 0 || c+r > L-1 {
					return false
				}
				vmin := math.Inf(1)
				for i := c - r; i <= c+r; i++ {
					vmin = math.Min(vmin, float64(px[stride*(j*L+i)+off]))
				}
				for i := c - r; i <= c+r; i++ {
					v := float64(px[stride*(j*L+i)+off]) - vmin
					sw += v
					sx += v * float64(i)
					st += v * (float64(j) - jc)
				}
			}
			if sw <= 0 {
				return false
			}
			gts[g], gcs[g], gws[g] = st/sw, sx/sw, sw
			return true
		}
		if !follow {
			for g := 0; g < groups; g++ {
				if !measure(g, func(float64) float64 { return float64(m) }) {
					return 0, 0, false, false
				}
				have = append(have, g)
			}
			first := model()
			edge := float64(hi-lo) / 2
			left = slices.Min(gws) < 0.5*slices.Max(gws) ||
				math.Max(math.Abs(first(-edge)-first(0)), math.Abs(first(edge)-first(0))) > 1
		} else {
			for _, g := range []int{groups/2 - 1, groups / 2, groups/2 - 2, groups/2 + 1, groups/2 - 3, groups/2 + 2} {
				if !measure(g, model()) {
					return 0, 0, false, false
				}
				have = append(have, g)
			}
			// A window off the line pulls the centroid towards its own
			// centre, so the fit is re-measured about itself until the
			// line's ends move less than 0.02 px (a bow of 8 px at a tall
			// band's edge was 10 % short after one pass).
			for pass := 0; pass < 8; pass++ {
				at := model()
				for g := 0; g < groups; g++ {
					if !measure(g, at) {
						return 0, 0, false, false
					}
				}
				now := model()
				if math.Max(math.Abs(now(gts[0])-at(gts[0])), math.Abs(now(gts[groups-1])-at(gts[groups-1]))) < 0.02 {
					break
				}
			}
		}
		_, b, k, ok = quadFit(gts, gcs, gws)
		return b, k, left, ok
	}
	// Every line with fixed windows first; if a strong line left its
	// window, all are measured again following them (a faint line's noisy
	// centres, followed, wander off, so lines are followed only when the
	// strong ones show they must be: neighbours lean alike).
	var ms []meas
	for _, follow := range []bool{false, true} {
		ms = ms[:0]
		anyLeft := false
		for _, m := range maxima {
			if len(ms) == 12 || prof[m] < 0.1*prof[maxima[0]] {
				break
			}
			near := false
			for _, q := range ms {
				if math.Abs(q.col-float64(m)) < 8 {
					near = true
				}
			}
			if near {
				continue
			}
			b, k, left, ok := shapeOf(m, follow)
			if ok {
				ms = append(ms, meas{float64(m), b, k, prof[m]})
				anyLeft = anyLeft || (left && prof[m] >= 0.3*prof[maxima[0]])
			}
		}
		if !anyLeft {
			break
		}
	}
	if len(ms) < 2 {
		return nil
	}
	// Lean and bow along the strip: weighted straight lines (constants
	// for one line).
	cols, ws := make([]float64, len(ms)), make([]float64, len(ms))
	for k, q := range ms {
		cols[k], ws[k] = q.col, q.w
	}
	along := func(val func(meas) float64) (float64, float64) {
		v := make([]float64, len(ms))
		for k, q := range ms {
			v[k] = val(q)
		}
		c0, c1, _ := lineFit(cols, v, ws)
		return c0, c1
	}
	b0, b1 := along(func(q meas) float64 { return q.b })
	k0, k1 := along(func(q meas) float64 { return q.k })
	out := &lineShape{lean: make([]float64, L), bow: make([]float64, L)}
	edge := float64(hi-lo) / 2
	bigLean, bigBow := false, false
	for i := 0; i < L; i++ {
		out.lean[i] = b0 + b1*float64(i)
		out.bow[i] = k0 + k1*float64(i)
		bigLean = bigLean || math.Abs(out.lean[i])*edge > 0.25
		bigBow = bigBow || math.Abs(out.bow[i])*edge*edge > 0.25
	}
	if !bigLean {
		out.lean = nil
	}
	if !bigBow {
		out.bow = nil
	}
	if !bigLean && !bigBow {
		return nil
	}
	return out
}

// lineShape is how the line images run across the band at each strip
// column i: a line's centre at row offset t from the centre row lies
// lean[i]·t + bow[i]·t² columns from its centre-row position. Either
// slice is nil when that term is too small to follow.
type lineShape struct {
	lean, bow []float64
}

// shift returns the column offset of row offset t at column i.
func (l *lineShape) shift(i int, t float64) float64 {
	var d float64
	if l.lean != nil {
		d += l.lean[i] * t
	}
	if l.bow != nil {
		d += l.bow[i] * t * t
	}
	return d
}

// quadCoef fits y = a + b·t + k·t² by weighted least squares and returns k.
func quadFit(t, y, w []float64) (a, b, c float64, ok bool) {
	m := [][]float64{make([]float64, 3), make([]float64, 3), make([]float64, 3)}
	rhs := make([]float64, 3)
	for i := range t {
		row := [3]float64{1, t[i], t[i] * t[i]}
		for j := 0; j < 3; j++ {
			for k := 0; k < 3; k++ {
				m[j][k] += w[i] * row[j] * row[k]
			}
			rhs[j] += w[i] * row[j] * y[i]
		}
	}
	x, ok := solveSmall(m, rhs)
	if !ok {
		return 0, 0, 0, false
	}
	return x[0], x[1], x[2], true
}

// warp returns the strip, L×H pixels of ch float32 channels, whose pixel
// (i, j) samples the region's data at frame point (u0+i)·e_u + (v0+j)·e_v
// (OpenCV warpAffine, bilinear, zero outside). The caller closes it.
func warp(data []float32, ch int, roi image.Rectangle, ang, u0, v0, vStep float64, L, H int, bow Bow) (gocv.Mat, error) {
	w, h := roi.Dx(), roi.Dy()
	types := map[int]gocv.MatType{1: gocv.MatTypeCV32FC1, 4: gocv.MatTypeCV32FC4}
	if len(data) != ch*w*h || types[ch] == 0 || L < 1 || H < 1 {
		return gocv.Mat{}, errors.New("straighten: region and strip sizes disagree")
	}
	src, err := floatMat(data, h, w, types[ch])
	if err != nil {
		return gocv.Mat{}, fmt.Errorf("straighten: %w", err)
	}
	defer src.Close()
	sn, cs := math.Sincos(ang * math.Pi / 180)
	if !bow.zero() {
		return remapBowed(src, roi, sn, cs, u0, v0, vStep, L, H, bow)
	}
	return warpAffine(src, roi.Min, sn, cs, u0, v0, vStep, L, H)
}

// floatMat wraps float32 samples (rows×cols pixels of type t) in a Mat
// without copying them; the caller closes it and keeps data alive.
func floatMat(data []float32, rows, cols int, t gocv.MatType) (gocv.Mat, error) {
	return gocv.NewMatFromBytes(rows, cols, t, unsafe.Slice((*byte)(unsafe.Pointer(&data[0])), 4*len(data)))
}

// bandSum is the per-column sum of rows lo..hi of a strip (L columns, the
// channel at off of stride interleaved), columns in parts side by side.
func bandSum(px []float32, stride, off, L, lo, hi, workers int) []float64 {
	prof := make([]float64, L)
	inParts(L, workers, 256, func(c0, c1 int) {
		for j := lo; j <= hi; j++ {
			for i := c0; i < c1; i++ {
				prof[i] += float64(px[stride*(j*L+i)+off])
			}
		}
	})
	return prof
}

// warpAffine samples src (bilinear) at strip column i, row j from the
// original-image point (u0 + i, v0 + vStep·j) in band coordinates; org is
// src's top-left pixel in the original image.
func warpAffine(src gocv.Mat, org image.Point, sn, cs, u0, v0, vStep float64, L, H int) (gocv.Mat, error) {
	M := gocv.NewMatWithSize(2, 3, gocv.MatTypeCV64F)
	defer M.Close()
	M.SetDoubleAt(0, 0, cs)
	M.SetDoubleAt(0, 1, -sn*vStep)
	M.SetDoubleAt(0, 2, u0*cs-v0*sn-float64(org.X))
	M.SetDoubleAt(1, 0, sn)
	M.SetDoubleAt(1, 1, cs*vStep)
	M.SetDoubleAt(1, 2, u0*sn+v0*cs-float64(org.Y))
	dst := gocv.NewMat()
	gocv.WarpAffineWithParams(src, &dst, M, image.Pt(L, H), gocv.InterpolationLinear|gocv.WarpInverseMap, gocv.BorderConstant, color.RGBA{})
	if dst.Empty() || dst.Cols() != L || dst.Rows() != H {
		dst.Close()
		return gocv.Mat{}, errors.New("straighten: OpenCV returned no strip")
	}
	return dst, nil
}

// centreOnly measures the centre line of the band's core (its rows and a
// margin) on the profile channel: the cheap pass that settles the
// geometry before the full straightening. Rows are numbered as straighten
// numbers them. Only what fitCentreAt reads is warped: every sparseRows-th
// core row and the two edge rows, to pick the strongest lines' columns
// from, then all rows of the columns about each picked line, from which its
// centre and strength are measured as on a full warp. On a 12 MP band this
// is about half the pixels a full warp of the core takes; every 4th row
// was a quarter, but a dim single frame (the stack test's) then picked
// noise for lines: 1.02 px RMS against 0.27.
func centreOnly(luma []float32, roi image.Rectangle, ang, vc, hh, side, u0, u1 float64, workers int) centreFit {
	L := int(math.Floor(u1-u0)) + 1
	half, sd := int(math.Ceil(hh)), int(math.Ceil(side))
	m := coreMargin(half, sd)
	H := 2*(half+m) + 1
	v0 := vc - float64(half+m)
	// The profile to pick columns from: core rows m, m+s, ... (H−2m rows
	// in all, n of them sampled), less the edge rows' mean level.
	const sparseRows = 2
	n := (H-2*m-1)/sparseRows + 1
	rows, err := warp(luma, 1, roi, ang, u0, v0+float64(m), sparseRows, L, n, Bow{})
	if err != nil {
		return centreFit{}
	}
	defer rows.Close()
	edges, err := warp(luma, 1, roi, ang, u0, v0, float64(H-1), L, 2, Bow{})
	if err != nil {
		return centreFit{}
	}
	defer edges.Close()
	px, err1 := rows.DataPtrFloat32()
	ex, err2 := edges.DataPtrFloat32()
	if err1 != nil || err2 != nil {
		return centreFit{}
	}
	prof := bandSum(px, 1, 0, L, 0, n-1, workers)
	scale := float64(H-2*m) / float64(n)
	for i := range prof {
		prof[i] = prof[i]*scale - float64(H-2*m)*float64(ex[i]+ex[L+i])/2
	}
	fit := fitCentreAt(L, H, prof, func(c int, vp []float64) float64 {
		c0, c1 := max(0, c-centreReach), min(L-1, c+centreReach)
		win, err := warp(luma, 1, roi, ang, u0+float64(c0), v0, 1, c1-c0+1, H, Bow{})
		if err != nil {
			clear(vp)
			return 0
		}
		defer win.Close()
		wp, err := win.DataPtrFloat32()
		if err != nil {
			clear(vp)
			return 0
		}
		w := c1 - c0 + 1
		for j := range vp {
			vp[j] = 0
			for _, v := range wp[j*w : (j+1)*w] {
				vp[j] += float64(v)
			}
		}
		// The column's strength as the full warp's profile has it.
		k := c - c0
		strength := -float64(H-2*m) * float64(wp[k]+wp[(H-1)*w+k]) / 2
		for j := m; j <= H-1-m; j++ {
			strength += float64(wp[j*w+k])
		}
		return strength
	})
	return fit.shifted(float64(sd - m))
}

// coreMargin is how many rows beyond the band's half-height the centre
// line is measured over: enough for a blurred band's edges to fall to
// the background, far fewer than the side rows the background comes from.
func coreMargin(half, sd int) int {
	return min(sd, 6+half/8)
}

// shifted returns f with its rows moved down by d.
func (f centreFit) shifted(d float64) centreFit {
	f.offset += d
	f.q0 += d
	pts := make([][3]float64, len(f.pts))
	for k, q := range f.pts {
		pts[k] = [3]float64{q[0], q[1] + d, q[2]}
	}
	f.pts = pts
	return f
}

// centreFit is a straight line j = offset + slope·i through the vertical
// centres (strip rows) of the strongest lines in a strip.
type centreFit struct {
	slope, offset float64
	ok            bool
	slopeErr      float64 // standard error of slope
	// The centre line as a parabola, row = q0 + q1·(i − mid) + q2·(i −
	// mid)², when enough strong lines spread along the strip (qok).
	q0, q1, q2, mid float64
	qok             bool
	qF              float64 // the bow's F ratio against the straight line (+Inf: not judged)
	// pts are the centre samples the fits used: column, row, weight.
	pts [][3]float64
}

// maximaByHeight returns the local maxima of prof above 0, at least edge
// samples from either end, highest first: the candidate lines the centre
// line and the line shapes are measured at.
func maximaByHeight(prof []float64, edge int) []int {
	var maxima []int
	for i := edge; i < len(prof)-edge; i++ {
		if prof[i] > prof[i-1] && prof[i] >= prof[i+1] && prof[i] > 0 {
			maxima = append(maxima, i)
		}
	}
	sort.Slice(maxima, func(a, b int) bool { return prof[maxima[a]] > prof[maxima[b]] })
	return maxima
}

// fitCentreLine measures, at up to 12 of the strongest local maxima of
// the column profile prof, the centre of the line image across the strip
// (midpoint of its half-maximum edges, on the luma channel) and fits a
// straight line through them weighted by line strength. It needs two lines
// at least a fifth of the strip apart. The strip is px (stride values a
// pixel, the luma at off); see fitCentreAt for strips read another way.
func fitCentreLine(px []float32, stride, off, L, H int, prof []float64) centreFit {
	return fitCentreAt(L, H, prof, func(m int, vp []float64) float64 {
		for j := range vp {
			vp[j] = 0
			for i := max(0, m-centreReach); i <= min(L-1, m+centreReach); i++ {
				vp[j] += float64(px[stride*(j*L+i)+off])
			}
		}
		return prof[m]
	})
}

// centreReach is how many columns either side of a line fitCentreLine
// sums to find the line's centre across the strip: ±6 hold all of a line
// that leans a few pixels across the band (off-axis bands, sheared images).
const centreReach = 6

// fitCentreAt is fitCentreLine with the strip read through at: at(m, vp)
// fills vp[j], j < H, with the sum over columns m ± centreReach (within
// the strip) of row j, and returns column m's strength (the fit's weight).
// prof only picks the columns.
func fitCentreAt(L, H int, prof []float64, at func(m int, vp []float64) float64) centreFit {
	maxima := maximaByHeight(prof, 2)
	var picked []int
	for _, m := range maxima {
		if len(picked) == 12 || prof[m] < 0.05*prof[maxima[0]] {
			break
		}
		near := false
		for _, p := range picked {
			if abs(p-m) < 6 {
				near = true
			}
		}
		if !near {
			picked = append(picked, m)
		}
	}
	var xs, cs, ws []float64
	lo, hi := L, 0
	vp := make([]float64, H)
	for _, m := range picked {
		w := at(m, vp)
		// Subtract the level beside the band (first and last rows).
		edge := math.Min(vp[0], vp[H-1])
		for j := range vp {
			vp[j] -= edge
		}
		c, _, ok := bandEdges(vp, false)
		if !ok {
			continue
		}
		x := float64(m)
		xs, cs, ws = append(xs, x), append(cs, c), append(ws, w)
		lo, hi = min(lo, m), max(hi, m)
	}
	if hi-lo < L/5 {
		return centreFit{}
	}
	offset, slope, ok := lineFit(xs, cs, ws)
	if !ok {
		return centreFit{}
	}
	f := centreFit{slope: slope, offset: offset, ok: math.Abs(slope) < 0.1}
	// The slope's standard error from the centres' scatter about the line
	// (weights are line strengths, not inverse variances: the sandwich
	// form), so that a dim band's noisy centres do not steer the angle.
	if n := len(xs); n >= 3 {
		var sw, sx float64
		for k := range xs {
			sw += ws[k]
			sx += ws[k] * xs[k]
		}
		xm := sx / sw
		var rss, sxx2, sw2 float64
		for k := range xs {
			r := cs[k] - (f.offset + slope*xs[k])
			rss += r * r
			dx := xs[k] - xm
			sxx2 += ws[k] * dx * dx
			sw2 += ws[k] * ws[k] * dx * dx
		}
		if sxx2 > 0 {
			f.slopeErr = math.Sqrt(rss / float64(n-2) * sw2 / (sxx2 * sxx2))
		}
	} else {
		f.slopeErr = math.Inf(1)
	}
	for k := range xs {
		f.pts = append(f.pts, [3]float64{xs[k], cs[k], ws[k]})
	}
	if len(xs) >= 4 && hi-lo >= L/4 {
		f.mid = float64(L-1) / 2
		ts := make([]float64, len(xs))
		for k, x := range xs {
			ts[k] = x - f.mid
		}
		f.q0, f.q1, f.q2, f.qok = quadFit(ts, cs, ws)
		// Is the bow more than the centres' scatter? With five centres
		// or more: the drop in the weighted residual sum from the line to
		// the parabola against the parabola's residual variance (an F
		// ratio, 1 and n−3 degrees of freedom); 9 is about 3σ. A dim
		// band's scattered centres had made an 8 px bow of a straight band.
		if f.qok && len(xs) >= 5 {
			var rl, rq float64
			for k, x := range xs {
				dl := cs[k] - (f.offset + f.slope*x)
				dq := cs[k] - (f.q0 + f.q1*ts[k] + f.q2*ts[k]*ts[k])
				rl += ws[k] * dl * dl
				rq += ws[k] * dq * dq
			}
			f.qF = math.Inf(1)
			if rq > 0 {
				f.qF = (rl - rq) / (rq / float64(len(xs)-3))
			}
		} else {
			f.qF = math.Inf(1) // too few centres to judge: taken as it is
		}
	}
	return f
}

func abs(x int) int {
	if x < 0 {
		return -x
	}
	return x
}

// The linearised band region of a 12 MP photo is tens of megabytes. Made
// anew in Go's heap for every photo it cost a zeroing pass and garbage
// collections (about 18 ms a photo in a CPU profile), and a sync.Pool,
// which empties at every collection, still missed often enough to fault
// fresh pages in (one region took 24 ms instead of 4); the collector's
// target also let the heap grow to twice these buffers. So they live in C
// memory (OpenCV Mats), handed from one photo to the next and freed only
// beyond a few spare ones.
var (
	f32Pool = newMatPool[float32](gocv.MatTypeCV32FC1)
	u8Pool  = newMatPool[uint8](gocv.MatTypeCV8UC1)
)

// matPool hands out slices of T with arbitrary contents in C memory. Every
// slice got must be put back (or it stays allocated until the process
// ends); put ignores slices it did not hand out.
type matPool[T float32 | uint8] struct {
	typ  gocv.MatType
	mu   sync.Mutex
	out  map[uintptr]gocv.Mat // handed out, by the address of the first element
	free []gocv.Mat           // spare
}

// A pool keeps at most maxSpare spare buffers (two a worker on two CPUs,
// with room for a batch's photos of different sizes) holding at most
// maxSpareBytes: the largest go first, so a 50 MP frame's colour region
// (about 200 MB) is freed at once while a 12 MP photo's buffers stay.
const (
	maxSpare      = 6
	maxSpareBytes = 128 << 20
)

func newMatPool[T float32 | uint8](typ gocv.MatType) *matPool[T] {
	return &matPool[T]{typ: typ, out: map[uintptr]gocv.Mat{}}
}

// get returns a slice of n elements: the smallest spare one that holds n,
// or a new one with a sixteenth to spare (the next photo's region is
// seldom exactly as large).
func (p *matPool[T]) get(n int) []T {
	if n <= 0 {
		return nil
	}
	p.mu.Lock()
	defer p.mu.Unlock()
	best := -1
	for i, m := range p.free {
		if m.Cols() >= n && (best < 0 || m.Cols() < p.free[best].Cols()) {
			best = i
		}
	}
	var m gocv.Mat
	if best >= 0 {
		m = p.free[best]
		p.free = slices.Delete(p.free, best, best+1)
	} else {
		var err error
		if m, err = newMatUnset(1, n+n/16, p.typ, true); err != nil {
			return make([]T, n) // (not expected) Go's heap instead; put ignores it
		}
	}
	b, err := m.DataPtrUint8()
	if err != nil || len(b) < n*int(unsafe.Sizeof(T(0))) {
		m.Close()
		return make([]T, n) // (not expected) Go's heap instead; put ignores it
	}
	s := unsafe.Slice((*T)(unsafe.Pointer(&b[0])), n)
	p.out[uintptr(unsafe.Pointer(&s[0]))] = m
	return s
}

// put gives s back for reuse.
func (p *matPool[T]) put(s []T) {
	if cap(s) == 0 {
		return
	}
	key := uintptr(unsafe.Pointer(&s[:1][0]))
	p.mu.Lock()
	defer p.mu.Unlock()
	m, ok := p.out[key]
	if !ok {
		return
	}
	delete(p.out, key)
	p.free = append(p.free, m)
	size := int(unsafe.Sizeof(T(0)))
	bytes := 0
	for _, f := range p.free {
		bytes += f.Cols() * size
	}
	for len(p.free) > maxSpare || bytes > maxSpareBytes {
		big := 0
		for i, f := range p.free {
			if f.Cols() > p.free[big].Cols() {
				big = i
			}
		}
		bytes -= p.free[big].Cols() * size
		p.free[big].Close()
		p.free = slices.Delete(p.free, big, big+1)
	}
}

// outstanding is how many slices are handed out and not yet put back.
func (p *matPool[T]) outstanding() int {
	p.mu.Lock()
	defer p.mu.Unlock()
	return len(p.out)
}

// workers is the number of goroutines Options asks for.
func (o Options) workers() int {
	if o.Workers > 0 {
		return o.Workers
	}
	return runtime.GOMAXPROCS(0)
}

// inChunks calls fn(k, lo, hi) for the k-th of chunks contiguous parts of
// [0, n), at most workers at a time, and waits for all. The parts do not
// depend on workers, so neither does a result combined in chunk order.
func inChunks(n, chunks, workers int, fn func(k, lo, hi int)) {
	var g errgroup.Group
	g.SetLimit(max(1, workers))
	for k := 0; k < chunks; k++ {
		g.Go(func() error {
			fn(k, k*n/chunks, (k+1)*n/chunks)
			return nil
		})
	}
	g.Wait()
}

// inParts calls fn on [0, n) cut into at most workers contiguous parts of
// at least minPart, concurrently, and waits for all. Each part writes only
// its own elements, so results do not depend on the number of parts.
func inParts(n, workers, minPart int, fn func(lo, hi int)) {
	k := min(workers, n/max(1, minPart))
	if k <= 1 {
		fn(0, n)
		return
	}
	var wg sync.WaitGroup
	for p := 0; p < k; p++ {
		lo, hi := p*n/k, (p+1)*n/k
		wg.Go(func() { fn(lo, hi) })
	}
	wg.Wait()
}

// remapBowed samples the strip along a bowed band: strip pixel (i, j) lies
// at u = u0 + i, v = v0 + vStep·j + bow(i) across the band (OpenCV's remap with
// bilinear interpolation, as the straight warp uses).
func remapBowed(src gocv.Mat, roi image.Rectangle, sn, cs, u0, v0, vStep float64, L, H int, bow Bow) (gocv.Mat, error) {
	mx := gocv.NewMatWithSize(H, L, gocv.MatTypeCV32FC1)
	defer mx.Close()
	my := gocv.NewMatWithSize(H, L, gocv.MatTypeCV32FC1)
	defer my.Close()
	px, err1 := mx.DataPtrFloat32()
	py, err2 := my.DataPtrFloat32()
	if err1 != nil || err2 != nil {
		return gocv.Mat{}, errors.New("straighten: cannot build the remap tables")
	}
	for j := 0; j < H; j++ {
		for i := 0; i < L; i++ {
			u, v := u0+float64(i), v0+vStep*float64(j)+bow.at(float64(i))
			px[j*L+i] = float32(u*cs - v*sn - float64(roi.Min.X))
			py[j*L+i] = float32(u*sn + v*cs - float64(roi.Min.Y))
		}
	}
	dst := gocv.NewMat()
	gocv.Remap(src, &dst, &mx, &my, gocv.InterpolationLinear, gocv.BorderConstant, color.RGBA{})
	if dst.Empty() || dst.Cols() != L || dst.Rows() != H {
		dst.Close()
		return gocv.Mat{}, errors.New("straighten: OpenCV returned no strip")
	}
	return dst, nil
}

// lineFit fits y = a + b·t by weighted least squares; with the t all but
// equal, b is 0 and a the weighted mean.
func lineFit(t, y, w []float64) (a, b float64, ok bool) {
	var sw, st, sy, stt, sty float64
	for k := range t {
		sw += w[k]
		st += w[k] * t[k]
		sy += w[k] * y[k]
		stt += w[k] * t[k] * t[k]
		sty += w[k] * t[k] * y[k]
	}
	d := sw*stt - st*st
	if sw == 0 || d <= 1e-9*sw*stt {
		if sw == 0 {
			return 0, 0, false
		}
		return sy / sw, 0, true
	}
	b = (sw*sty - st*sy) / d
	return (sy - b*st) / sw, b, true
}

// flatScatter is the largest scatter of a column's samples that counts as
// none: float32 rounding of values up to 1 is below 1.2·10⁻⁷, while one
// code of a 16-bit photo is 1.2·10⁻⁶ at black and more above it.
const flatScatter = 1e-7

// noiseShape turns per-column scatters into a smooth profile relative to
// its median: a running median over 31 columns (the scatter of a few
// dozen rows is itself noisy), columns without a measure (negative)
// taking their neighbours'. flatShare is the share of the measured
// columns with no scatter at all (flatScatter). The shape is nil when
// fewer than a third of the columns were measured, or when more than a
// fifth were flat: there the compression has smoothed the noise away,
// and what scatter is left is its own ringing beside the lines, which a
// median of next to nothing turned into "noise" up to 10⁵ times the
// typical, taking every line's SNR below the threshold (a hydrogen
// photo's 5 lines down to 1 at JPEG quality 70). Simulated 1280x720 and
// 1920x1080 JPEGs: flat shares 0.77-1.00 at quality 50-70, 0.60-0.72 at
// 72 (the median there float rounding, 9·10⁻¹⁰), 0.29-0.30 at 75 (a real
// median, a third of an undisturbed photo's, the ringing still five
// times it: a line lost), 0.06-0.10 at 78-80, 0 from 85.
func noiseShape(spread []float64) (shape []float64, flatShare float64) {
	L := len(spread)
	var have []float64
	flat := 0
	for _, v := range spread {
		if v >= 0 {
			have = append(have, v)
			if v <= flatScatter {
				flat++
			}
		}
	}
	if len(have) > 0 {
		flatShare = float64(flat) / float64(len(have))
	}
	if L == 0 || len(have) < L/3 || flat*5 > len(have) {
		return nil, flatShare
	}
	med := peaks.Median(have)
	if med <= 0 {
		return nil, flatShare
	}
	out := make([]float64, L)
	const h = 15
	// A sorted window slid along the columns: each step removes one value
	// and inserts one (a few dozen moves), instead of sorting 31 values
	// per column.
	win := make([]float64, 0, 2*h+1)
	insert := func(v float64) {
		k, _ := slices.BinarySearch(win, v)
		win = slices.Insert(win, k, v)
	}
	remove := func(v float64) {
		k, _ := slices.BinarySearch(win, v)
		win = slices.Delete(win, k, k+1)
	}
	for j := 0; j < min(L, h); j++ {
		if spread[j] >= 0 {
			insert(spread[j])
		}
	}
	for i := range out {
		if j := i + h; j < L && spread[j] >= 0 {
			insert(spread[j])
		}
		if j := i - h - 1; j >= 0 && spread[j] >= 0 {
			remove(spread[j])
		}
		out[i] = 1
		if n := len(win); n > 0 {
			m := win[n/2]
			if n%2 == 0 {
				m = (win[n/2-1] + win[n/2]) / 2
			}
			out[i] = m / med
		}
	}
	return out, flatShare
}
