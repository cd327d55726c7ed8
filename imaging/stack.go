package imaging

import (
	"errors"
	"fmt"
	"image"
	"io"
	"math"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strings"
	"time"

	"gocv.io/x/gocv"

	"lineshot/peaks"
)

// Stack is several exposures of one fixed setup measured as one photo: a
// burst of stills, the frames of a video, or both, averaged; and a dark
// frame (the lamp off, same exposure) subtracted when given. Averaging N
// frames lowers the noise by about √N, which is what a dim lamp or a noisy
// webcam needs; subtracting the dark frame removes hot pixels, the
// sensor's offset and steady stray light.
type Stack struct {
	// Frames are stills or video files (any extension in VideoExts), all
	// of one size.
	Frames []string
	// Dark, when set, are stills or videos of the lamp off, same size and
	// exposure, averaged. A single dark frame adds its full noise to the
	// averaged light frames: take as many dark frames as light ones.
	Dark []string
	// MaxVideoFrames caps the frames read from each video; 0 means 600.
	MaxVideoFrames int
}

// VideoExts are the file extensions read as videos (through OpenCV's video
// reader, which opens whatever the system's decoders do).
var VideoExts = []string{".avi", ".mp4", ".mov", ".mkv", ".webm", ".m4v", ".mpg", ".mpeg", ".wmv"}

// IsVideo reports whether path is read as a video.
func IsVideo(path string) bool {
	ext := strings.ToLower(filepath.Ext(path))
	for _, e := range VideoExts {
		if ext == e {
			return true
		}
	}
	return false
}

// ExtractStack averages the stack's frames (and its dark frame), subtracts
// the dark frame in linear intensity and measures the result as Extract
// measures one photo. Errors name the file and the reason. Strip.Frames
// says how many frames were averaged.
func ExtractStack(st Stack, opt Options) (Strip, error) {
	if len(st.Frames) == 0 {
		return Strip{}, errors.New("no frames to measure")
	}
	if st.MaxVideoFrames == 0 {
		st.MaxVideoFrames = 600
	}
	t0 := time.Now()
	light, err := accumulate(st.Frames, st.MaxVideoFrames, opt, true)
	if err != nil {
		return Strip{}, err
	}
	var dark *average
	if len(st.Dark) > 0 {
		d, err := accumulate(st.Dark, st.MaxVideoFrames, opt, false)
		if err != nil {
			return Strip{}, err
		}
		if d.w != light.w || d.h != light.h {
			return Strip{}, fmt.Errorf("%s: dark frame is %dx%d, the photos %dx%d", st.Dark[0], d.w, d.h, light.w, light.h)
		}
		dark = &d
	}
	if len(light.files) < 2 {
		light.files = nil // one file: nothing to compare
	}
	opt = opt.withProfile(light.compressed)
	m, err := light.mat(dark, opt.Linear)
	if err != nil {
		return Strip{}, fmt.Errorf("%s: %w", st.Frames[0], err)
	}
	defer m.Close()
	decoded := time.Since(t0)
	s, err := extractMat(m, opt)
	if err != nil {
		return Strip{}, fmt.Errorf("%s: %w", st.Frames[0], err)
	}
	s.Timing.Decode = decoded
	s.Frames = light.n
	if w := stackMismatch(light.files, s); w != "" {
		s.Warnings = append(s.Warnings, w)
	}
	if dark != nil {
		s.DarkFrames = dark.n
	}
	return s, nil
}

// average is the running sum of frames in code values scaled to 16 bits
// (an 8-bit code c counts as 257·c), per pixel and channel (BGR), with the
// pixels that were clipped in any frame.
type average struct {
	w, h, n    int
	sum        []float32
	clipped    []bool
	compressed bool // JPEG or video: luma is the better profile
	// files are the files' own averages, reduced, for stackMismatch (when
	// accumulate was asked to keep them).
	files []fileThumb
}

// fileThumb is one file's frames reduced r×r, in linear intensity with the
// three channels summed, added up over its frames (n of them, a video's
// sampled): enough to tell, once the band is found in the stack's average,
// whether the files show one spectrum.
type fileThumb struct {
	path    string
	w, h, r int
	sum     []float32
	n       int
}

// thumbFramesMax caps the frames of one video added to its thumbnail (every
// k-th frame is taken): the thumbnail is a pass over the frame, about as
// long as adding the frame to the average.
const thumbFramesMax = 24

// accumulate sums every frame of the given stills and videos; with thumbs,
// it also keeps each file's reduced average (average.files).
func accumulate(paths []string, maxVideo int, opt Options, thumbs bool) (average, error) {
	var a average
	seen := 0 // frames of the current file
	add := func(path string, m gocv.Mat) error {
		fr, err := newFrame(m)
		if err != nil {
			return fmt.Errorf("%s: %w", path, err)
		}
		if a.n == 0 {
			capPx := opt.MaxPixels
			if capPx == 0 {
				capPx = 120_000_000
			}
			if fr.w*fr.h > capPx {
				return errOverCap(path, fr.w, fr.h, capPx)
			}
			a.w, a.h = fr.w, fr.h
			a.sum = make([]float32, 3*fr.w*fr.h)
			a.clipped = make([]bool, fr.w*fr.h)
		} else if fr.w != a.w || fr.h != a.h {
			return fmt.Errorf("%s: %dx%d, but the first frame is %dx%d: not one setup", path, fr.w, fr.h, a.w, a.h)
		}
		if fr.bytes8 != nil {
			for i, v := range fr.bytes8 {
				a.sum[i] += float32(257 * int(v))
				if v >= clipCode8 {
					a.clipped[i/3] = true
				}
			}
		} else {
			for i, v := range fr.words16 {
				a.sum[i] += float32(v)
				if v >= clipCode16 {
					a.clipped[i/3] = true
				}
			}
		}
		a.n++
		if thumbs {
			if len(a.files) == 0 || a.files[len(a.files)-1].path != path {
				a.files = append(a.files, newFileThumb(path, fr.w, fr.h))
				seen = 0
			}
			if seen%max(1, maxVideo/thumbFramesMax) == 0 {
				levels := 256
				if fr.words16 != nil {
					levels = 65536
				}
				a.files[len(a.files)-1].add(fr, tablesFor(levels, opt.Linear).lut)
			}
			seen++
		}
		return nil
	}
	for _, path := range paths {
		if IsVideo(path) {
			if err := readVideo(path, maxVideo, add); err != nil {
				return a, err
			}
			a.compressed = true
			continue
		}
		format, _, err := checkFile(path, opt)
		if err != nil {
			return a, err
		}
		if lossy(format) {
			a.compressed = true
		}
		m, err := decodeFrame(path, format)
		if err != nil {
			return a, err
		}
		err = add(path, m)
		m.Close()
		if err != nil {
			return a, err
		}
	}
	return a, nil
}

// readVideo passes up to max frames of the video at path to add.
func readVideo(path string, max int, add func(string, gocv.Mat) error) error {
	if _, _, err := checkFile(path, Options{}); err != nil {
		return err
	}
	if err := sniffVideo(path); err != nil {
		return err
	}
	// FFmpeg alone: the other backends print their own complaints about
	// files they cannot open.
	vc, err := gocv.VideoCaptureFileWithAPI(path, gocv.VideoCaptureFFmpeg)
	if err != nil {
		if vc != nil {
			vc.Close()
		}
		return fmt.Errorf("%s: not a video OpenCV can open", path)
	}
	defer vc.Close()
	m := gocv.NewMat()
	defer m.Close()
	n := 0
	for n < max && vc.Read(&m) {
		if m.Empty() {
			break
		}
		if m.Channels() == 1 {
			c := gocv.NewMat()
			gocv.CvtColor(m, &c, gocv.ColorGrayToBGR)
			err = add(path, c)
			c.Close()
		} else {
			err = add(path, m)
		}
		if err != nil {
			return err
		}
		n++
	}
	if n == 0 {
		return fmt.Errorf("%s: no frame could be read from the video", path)
	}
	return nil
}

// sniffVideo rejects a file whose first bytes are no video container lineshot
// knows (AVI, MP4/MOV, Matroska/WebM, MPEG program or transport stream,
// ASF), so that FFmpeg never sees it and prints nothing. The signatures are
// the containers' published magic numbers (common practice).
func sniffVideo(path string) error {
	f, err := os.Open(path)
	if err != nil {
		return err
	}
	defer f.Close()
	b := make([]byte, 16)
	n, _ := io.ReadFull(f, b)
	b = b[:n]
	switch {
	case len(b) >= 12 && string(b[:4]) == "RIFF" && string(b[8:12]) == "AVI ":
	case len(b) >= 8 && (string(b[4:8]) == "ftyp" || string(b[4:8]) == "moov" || string(b[4:8]) == "mdat" || string(b[4:8]) == "wide" || string(b[4:8]) == "free"):
	case len(b) >= 4 && b[0] == 0x1a && b[1] == 0x45 && b[2] == 0xdf && b[3] == 0xa3:
	case len(b) >= 4 && b[0] == 0 && b[1] == 0 && b[2] == 1 && (b[3] == 0xba || b[3] == 0xb3):
	case len(b) >= 1 && b[0] == 0x47 && n >= 1:
	case len(b) >= 4 && b[0] == 0x30 && b[1] == 0x26 && b[2] == 0xb2 && b[3] == 0x75:
	default:
		return fmt.Errorf("%s: not a video file lineshot can read (no AVI, MP4/MOV, Matroska/WebM, MPEG or ASF header)", path)
	}
	return nil
}

// mat returns the average as a 16-bit BGR image in the frames' own coding,
// the dark frame's average subtracted in linear intensity (undoing the sRGB
// curve unless linear) down to its median level, and every pixel clipped
// in some light frame set to full scale so that the clipping is seen
// downstream.
func (a average) mat(dark *average, linear bool) (gocv.Mat, error) {
	m := gocv.NewMatWithSize(a.h, a.w, gocv.MatTypeCV16UC3)
	px, err := m.DataPtrUint16()
	if err != nil {
		m.Close()
		return gocv.Mat{}, err
	}
	toLin := func(code float64) float64 {
		v := math.Min(1, math.Max(0, code/65535))
		if linear {
			return v
		}
		return srgbToLinear(v)
	}
	fromLin := func(v float64) float64 {
		v = math.Min(1, math.Max(0, v))
		if linear {
			return v
		}
		return linearToSRGB(v)
	}
	inv := 1 / float32(a.n)
	var dinv float32
	var pedestal float64
	if dark != nil {
		dinv = 1 / float32(dark.n)
		// The dark frame's median level is kept as a pedestal: subtracting
		// all of it would leave the background's noise about zero, and the
		// unsigned result would clip half of it away (a rectified
		// background that, on a dim averaged video, turned the band's
		// angle by 0.3°). Only the dark frame's structure (hot pixels,
		// stray light, offsets) is removed; the level beside the band is
		// subtracted later as for any photo.
		step := max(1, len(dark.sum)/20000)
		var v []float64
		for i := 0; i < len(dark.sum); i += step {
			v = append(v, toLin(float64(dark.sum[i]*dinv)))
		}
		sort.Float64s(v)
		pedestal = v[len(v)/2]
	}
	for i, s := range a.sum {
		code := float64(s * inv)
		if dark != nil {
			code = 65535 * fromLin(toLin(code)-toLin(float64(dark.sum[i]*dinv))+pedestal)
		}
		if a.clipped[i/3] {
			code = 65535
		}
		px[i] = uint16(math.Round(math.Min(65535, math.Max(0, code))))
	}
	return m, nil
}

// linearToSRGB applies the sRGB transfer curve (IEC 61966-2-1), v in [0, 1].
func linearToSRGB(v float64) float64 {
	if v <= 0.0031308 {
		return 12.92 * v
	}
	return 1.055*math.Pow(v, 1/2.4) - 0.055
}

// WriteVideo writes frames as a Motion-JPEG AVI file at fps frames per
// second with OpenCV's own encoder (for simulated videos). The frames must
// share one size.
func WriteVideo(path string, frames []image.Image, fps float64) error {
	if len(frames) == 0 {
		return errors.New("no frames to write")
	}
	b := frames[0].Bounds()
	if !strings.EqualFold(filepath.Ext(path), ".avi") {
		return fmt.Errorf("%s: videos are written as Motion-JPEG .avi files", path)
	}
	vw, err := gocv.VideoWriterFile(path, "MJPG", fps, b.Dx(), b.Dy(), true)
	if err != nil || !vw.IsOpened() {
		if vw != nil {
			vw.Close()
		}
		return fmt.Errorf("%s: OpenCV cannot write Motion-JPEG video here", path)
	}
	defer vw.Close()
	for i, f := range frames {
		if f.Bounds().Size() != b.Size() {
			return fmt.Errorf("%s: frame %d is %v, the first %v", path, i, f.Bounds().Size(), b.Size())
		}
		m, err := gocv.ImageToMatRGB(f)
		if err != nil {
			return fmt.Errorf("%s: frame %d: %w", path, i, err)
		}
		err = vw.Write(m)
		m.Close()
		if err != nil {
			return fmt.Errorf("%s: frame %d: %w", path, i, err)
		}
	}
	return nil
}

// newFileThumb is an empty thumbnail of a w×h file, reduced so that its
// longer side is at most 512 cells.
func newFileThumb(path string, w, h int) fileThumb {
	r := max(1, (max(w, h)+511)/512)
	tw, th := (w+r-1)/r, (h+r-1)/r
	return fileThumb{path: path, w: tw, h: th, r: r, sum: make([]float32, tw*th)}
}

// add adds frame fr (the thumbnail's size) through the linear table lin.
func (t *fileThumb) add(fr frame, lin []float32) {
	w := fr.w
	for y := 0; y < fr.h; y++ {
		cells := t.sum[(y/t.r)*t.w : (y/t.r+1)*t.w]
		if fr.bytes8 != nil {
			addCells(cells, fr.bytes8[3*w*y:3*w*(y+1)], t.r, lin)
		} else {
			addCells(cells, fr.words16[3*w*y:3*w*(y+1)], t.r, lin)
		}
	}
	t.n++
}

// addCells adds a row of BGR pixels, through lin, into cells of r pixels.
func addCells[T uint8 | uint16](cells []float32, row []T, r int, lin []float32) {
	for c := range cells {
		px := row[3*r*c : min(len(row), 3*r*(c+1))]
		var acc float32
		for i := 0; i+2 < len(px); i += 3 {
			acc += lin[px[i]] + lin[px[i+1]] + lin[px[i+2]]
		}
		cells[c] += acc
	}
}

// mismatchLimit is how far (a fraction of the strongest line) one file's
// profile along the band may depart from the stack's after scaling to it.
// Exposures of one setup differ by their noise, their brightness (scaled
// out) and the sRGB curve's bend between them: a few per cent in the tests
// (TestStackMismatch), dim single frames included; another lamp, or a
// camera moved by a few pixels along the band, departs by a third or more.
const mismatchLimit = 0.25

// stackMismatch compares the stack's files along the band s found in their
// average: each file's profile (its thumbnail's cells on the band, in bins
// of the reduction along it, less its own floor) against the median of
// all (the mean of two), scaled to it by least squares (stackDepartures).
// It returns a warning naming the files that depart by more than
// mismatchLimit, or "".
// The average mixes such files' lines as if one lamp had made them all.
func stackMismatch(files []fileThumb, s Strip) string {
	var odd []string
	worst := 0.0
	for i, d := range stackDepartures(files, s) {
		if d > mismatchLimit {
			odd = append(odd, filepath.Base(files[i].path))
			worst = math.Max(worst, d)
		}
	}
	const why = " of the strongest line (another lamp, or the camera moved?); the average mixes them"
	switch {
	case len(odd) == 0:
		return ""
	case len(odd) == len(files):
		return fmt.Sprintf("the photos of the stack (%s) do not show one spectrum: along the band their profiles depart from each other's by up to %.0f %%",
			strings.Join(odd, ", "), 100*worst) + why
	case len(odd) == 1:
		return fmt.Sprintf("%s does not show the same spectrum as the stack's other photos: along the band its profile departs from theirs by %.0f %%",
			odd[0], 100*worst) + why
	}
	return fmt.Sprintf("%s do not show the same spectrum as the stack's other photos: along the band their profiles depart from the others' by up to %.0f %%",
		strings.Join(odd, ", "), 100*worst) + why
}

// stackDepartures is each file's largest departure from the stack's
// profile, a fraction of the strongest line up to 1 (stackMismatch).
func stackDepartures(files []fileThumb, s Strip) []float64 {
	if len(files) < 2 || len(s.Profile) == 0 {
		return nil
	}
	r := files[0].r
	nb := (len(s.Profile) + r - 1) / r
	sn, cs := math.Sincos(s.AngleDeg * math.Pi / 180)
	reach := s.BandHalfHeight + 0.5*float64(r)
	profs := make([][]float64, len(files))
	for i, f := range files {
		p := make([]float64, nb)
		for cy := 0; cy < f.h; cy++ {
			fy := (float64(cy)+0.5)*float64(r) - 0.5 - s.Origin[1]
			for cx := 0; cx < f.w; cx++ {
				fx := (float64(cx)+0.5)*float64(r) - 0.5 - s.Origin[0]
				u := fx*cs + fy*sn
				if u < 0 || u >= float64(len(s.Profile)) {
					continue
				}
				if v := -fx*sn + fy*cs - s.Bow.at(u); math.Abs(v) <= reach {
					p[int(u)/r] += float64(f.sum[cy*f.w+cx]) / float64(f.n)
				}
			}
		}
		floor := append([]float64(nil), p...)
		sort.Float64s(floor)
		for k := range p {
			p[k] -= floor[len(floor)/5]
		}
		profs[i] = p
	}
	// Each profile on the scale of its strongest bin, so that the median
	// compares shapes, not exposures.
	for _, p := range profs {
		if top := slices.Max(p); top > 0 {
			for k := range p {
				p[k] /= top
			}
		}
	}
	// The reference is the median of the files kept; the file departing
	// most is left out of it while it departs too far and more than two
	// are kept (a moved photo pulled the median of three into a mixture
	// of two line positions, and its companions 0.2 away from it).
	kept := make([]bool, len(profs))
	for i := range kept {
		kept[i] = true
	}
	for n := len(profs); ; n-- {
		out := departures(profs, kept, nb)
		worst := -1
		for i, d := range out {
			if kept[i] && (worst < 0 || d > out[worst]) {
				worst = i
			}
		}
		if n <= 2 || out[worst] <= mismatchLimit {
			return out
		}
		kept[worst] = false
	}
}

// departures is each profile's largest departure from the median of the
// kept ones (the mean of two), after scaling to it by least squares: a
// fraction of the larger of the two's strongest bin, up to 1.
func departures(profs [][]float64, kept []bool, nb int) []float64 {
	ref := make([]float64, nb)
	var col []float64
	for k := range ref {
		col = col[:0]
		for i, p := range profs {
			if kept[i] {
				col = append(col, p[k])
			}
		}
		ref[k] = peaks.MedianInPlace(col)
	}
	var refSS float64
	for _, v := range ref {
		refSS += v * v
	}
	out := make([]float64, len(profs))
	for i, p := range profs {
		var pr float64
		for k := range p {
			pr += p[k] * ref[k]
		}
		a := 0.0
		if refSS > 0 {
			a = pr / refSS
		}
		var dev, top float64
		for k := range p {
			dev = math.Max(dev, math.Abs(p[k]-a*ref[k]))
			top = math.Max(top, math.Max(p[k], a*ref[k]))
		}
		if top > 0 {
			out[i] = math.Min(1, dev/top) // (the floors left below zero can add to dev)
		}
	}
	return out
}
