package imaging

import (
	"errors"
	"fmt"
	"image"
	"io"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"time"

	"gocv.io/x/gocv"
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
	light, err := accumulate(st.Frames, st.MaxVideoFrames, opt)
	if err != nil {
		return Strip{}, err
	}
	var dark *average
	if len(st.Dark) > 0 {
		d, err := accumulate(st.Dark, st.MaxVideoFrames, opt)
		if err != nil {
			return Strip{}, err
		}
		if d.w != light.w || d.h != light.h {
			return Strip{}, fmt.Errorf("%s: dark frame is %dx%d, the photos %dx%d", st.Dark[0], d.w, d.h, light.w, light.h)
		}
		dark = &d
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
}

// accumulate sums every frame of the given stills and videos.
func accumulate(paths []string, maxVideo int, opt Options) (average, error) {
	var a average
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
				return fmt.Errorf("%s: %dx%d pixels exceeds the limit of %d megapixels", path, fr.w, fr.h, capPx/1_000_000)
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
		if format == "jpeg" {
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
