package imaging

/*
#cgo pkg-config: libjpeg
#include <stdlib.h>
#include "jpegrows.h"
*/
import "C"

import (
	"errors"
	"fmt"
	"math"
	"sync"
	"time"
	"unsafe"

	"gocv.io/x/gocv"
)

// decodeRows decodes the JPEG at path into a new 8-bit BGR Mat a stripe
// of decodeStripe rows at a time. Once the header is read and the Mat
// made, plan (when not nil) is given the Mat and may return a function
// that is called with rows [y0, y1) as soon as they are in place, and one
// that waits for what those calls started; decodeRows calls the latter
// before it returns, error or not (before the Mat is closed). It
// decodes as imread does (libjpeg's defaults, the same library), checked
// pixel for pixel by TestDecodeRowsAsImread. ok is false, and no Mat made,
// when the photo is not one it takes (CMYK, RGB or 12-bit JPEGs; a photo
// whose Exif block asks for turning, or cannot be read): the caller uses
// imread. Errors give libjpeg's reason without the path.
//
// Why hand-written: imread returns nothing until the whole frame is
// decoded, and gocv has no way in between.
func decodeRows(path string, plan func(m gocv.Mat) (each func(y0, y1 int), wait func()), damage *string) (m gocv.Mat, ok bool, err error) {
	d, ok, err := openRows(path, 8, false)
	if !ok || err != nil {
		return gocv.Mat{}, false, err
	}
	defer d.close()
	defer d.noteDamage(damage)
	w, h := d.w, d.h
	m, err = newMatUnset(h, w, gocv.MatTypeCV8UC3, true)
	if err != nil {
		return gocv.Mat{}, false, err
	}
	px, err := m.DataPtrUint8()
	if err != nil || len(px) != 3*w*h {
		m.Close()
		return gocv.Mat{}, false, errors.New("cannot hold the decoded frame")
	}
	each, wait := func(y0, y1 int) {}, func() {}
	if plan != nil {
		e, w := plan(m)
		if e != nil {
			each = e
		}
		if w != nil {
			wait = w
		}
	}
	stride := 3 * w
	for y0 := 0; y0 < h; y0 += decodeStripe {
		n := min(decodeStripe, h-y0)
		if err := d.read(px[y0*stride:], stride, w, n); err != nil {
			wait() // (what reads the rows decoded so far stops before the Mat goes)
			m.Close()
			return gocv.Mat{}, false, err
		}
		each(y0, y0+n)
	}
	wait()
	return m, true, nil
}

// rowDecoder is an open row decoder (jpegrows.c): the frame's full size,
// and rows to read at the scale it was opened with.
type rowDecoder struct {
	j    *C.struct_lineshot_jpeg
	w, h int
}

// openRows opens the JPEG at path for rows at eighths/8 of the full size
// (8, or 1, 2, 4 for libjpeg's DCT scaling). ok is false, with nothing to
// close, when the photo is not one the row decoder takes (decodeRows), or
// with sequentialOnly a progressive one.
func openRows(path string, eighths int, sequentialOnly bool) (d rowDecoder, ok bool, err error) {
	cpath := C.CString(path)
	defer C.free(unsafe.Pointer(cpath))
	var msg [256]C.char
	var w, h, rowsOK C.int
	seq := C.int(0)
	if sequentialOnly {
		seq = 1
	}
	j := C.lineshot_jpeg_open(cpath, C.int(eighths), seq, &w, &h, &rowsOK, &msg[0], C.size_t(len(msg)))
	if j == nil {
		return rowDecoder{}, false, errors.New(C.GoString(&msg[0]))
	}
	d = rowDecoder{j: j, w: int(w), h: int(h)}
	if rowsOK == 0 {
		d.close()
		return rowDecoder{}, false, nil
	}
	if w < 1 || h < 1 {
		d.close()
		return rowDecoder{}, false, fmt.Errorf("image of %dx%d pixels", w, h)
	}
	return d, true, nil
}

// read decodes the next n rows, each ow pixels wide, into dst, rows
// stride bytes apart.
func (d rowDecoder) read(dst []uint8, stride, ow, n int) error {
	if n < 1 {
		return nil
	}
	if len(dst) < (n-1)*stride+3*ow {
		return errors.New("the rows do not fit their buffer")
	}
	var msg [256]C.char
	got := C.lineshot_jpeg_rows(d.j, (*C.uchar)(unsafe.Pointer(&dst[0])), C.size_t(stride), C.int(n), &msg[0], C.size_t(len(msg)))
	return rowsDone(int(got), n, "gave", &msg[0])
}

// rowsDone is the error of a decoder call that was to take n rows and took
// got: nil when got is n; libjpeg's reason, in msg, when it failed (-1).
func rowsDone(got, n int, verb string, msg *C.char) error {
	switch {
	case got == n:
		return nil
	case got >= 0:
		return fmt.Errorf("the decoder %s %d rows of %d", verb, got, n)
	default:
		return errors.New(C.GoString(msg))
	}
}

// skip passes over the next n rows: libjpeg reads their data but makes no
// pixels of them.
func (d rowDecoder) skip(n int) error {
	if n < 1 {
		return nil
	}
	var msg [256]C.char
	got := C.lineshot_jpeg_skip(d.j, C.int(n), &msg[0], C.size_t(len(msg)))
	return rowsDone(int(got), n, "passed", &msg[0])
}

func (d rowDecoder) close() { C.lineshot_jpeg_close(d.j) }

// noteDamage sets *damage, when damage is not nil and libjpeg decoded past
// corrupt data, to a line saying so (the rows after it may be grey or
// garbled, and the lines measured there wrong: a mercury photo with 20 kB
// zeroed in the middle of its data was taken for a hydrogen lamp, with
// 0.97 confidence, and for a compact fluorescent one when decoded whole
// by imread, which says nothing either).
func (d rowDecoder) noteDamage(damage *string) {
	if damage == nil {
		return
	}
	var msg [256]C.char
	if n := int(C.lineshot_jpeg_warnings(d.j, &msg[0], C.size_t(len(msg)))); n > 0 {
		errs := "1 error"
		if n > 1 {
			errs = fmt.Sprintf("%d errors", n)
		}
		*damage = fmt.Sprintf("the photo's JPEG data is damaged (libjpeg decoded past %s, the first: %s): what lies after the damage may be grey or garbled and its lines wrong; copy the photo again from the camera", errs, C.GoString(&msg[0]))
	}
}

// decodeReduced decodes the JPEG at path at 1/k of its size (k 2, 4 or 8,
// dividing both sides) into a new 8-bit BGR Mat, by libjpeg's DCT
// scaling: what the band search looks at, for a fraction of a full
// decode's work (a 12 MP photo at a quarter: 13 against 22 ms on these
// machines). Each reduced pixel is libjpeg's scaled inverse DCT of its
// block, close to the block's average (not equal to it: the band search's
// thresholds are several noise σ); a side k does not divide leaves its
// part blocks out, as reduceArea does. ok is false, with no Mat, when the
// row decoder does not take the photo or k does not fit it; w and h are
// the full frame's size. A progressive JPEG is not taken: every decoder
// of one reads and holds all its scans (36 MB of coefficients for 12 MP)
// before its first row, so the band's rows would cost a whole decode each.
func decodeReduced(path string, k int, damage *string) (small gocv.Mat, w, h int, ok bool, err error) {
	if k != 2 && k != 4 && k != 8 {
		return gocv.Mat{}, 0, 0, false, nil
	}
	d, ok, err := openRows(path, 8/k, true)
	if !ok || err != nil {
		return gocv.Mat{}, 0, 0, false, err
	}
	defer d.close()
	defer d.noteDamage(damage) // (this decode reads all of the data)
	// libjpeg makes ow×oh pixels, the last column and row from part
	// blocks when k does not divide a side; the band search's frame is
	// sw×sh, of whole blocks, as reduceArea's.
	sw, sh := d.w/k, d.h/k
	ow, oh := (d.w+k-1)/k, (d.h+k-1)/k
	if sw < 8 || sh < 8 {
		return gocv.Mat{}, 0, 0, false, nil
	}
	small, err = newMatUnset(sh, sw, gocv.MatTypeCV8UC3, false)
	if err != nil {
		return gocv.Mat{}, 0, 0, false, err
	}
	px, err := small.DataPtrUint8()
	if err == nil && ow == sw && oh == sh {
		err = d.read(px, 3*sw, sw, sh)
	} else if err == nil {
		var all gocv.Mat
		if all, err = newMatUnset(oh, ow, gocv.MatTypeCV8UC3, false); err == nil {
			var ap []uint8
			if ap, err = all.DataPtrUint8(); err == nil {
				err = d.read(ap, 3*ow, ow, oh)
			}
			for y := 0; err == nil && y < sh; y++ {
				copy(px[3*sw*y:3*sw*(y+1)], ap[3*ow*y:])
			}
			all.Close()
		}
	}
	if err != nil {
		small.Close()
		return gocv.Mat{}, 0, 0, false, err
	}
	return small, d.w, d.h, true, nil
}

// decodeRowsInto decodes rows [y0, y1) of the JPEG at path at full size
// into the same rows of m (its w×h 8-bit BGR frame), passing over the
// rows above without making their pixels and stopping after y1: the rows
// of a band, for about the cost of the entropy decoding up to them.
// libjpeg makes the rows as a whole decode does (TestRowsIntoAsWhole).
func decodeRowsInto(path string, m gocv.Mat, y0, y1 int) error {
	d, ok, err := openRows(path, 8, false)
	if err != nil {
		return err
	}
	if !ok {
		return errPhotoChanged
	}
	defer d.close()
	if d.w != m.Cols() || d.h != m.Rows() || m.Type() != gocv.MatTypeCV8UC3 {
		return errPhotoChanged
	}
	y0, y1 = max(0, y0), min(d.h, y1)
	if y0 >= y1 {
		return nil
	}
	px, err := m.DataPtrUint8()
	if err != nil {
		return err
	}
	if err := d.skip(y0); err != nil {
		return err
	}
	stride := 3 * d.w
	return d.read(px[y0*stride:], stride, d.w, y1-y0)
}

// decodeStripe is the rows the row decoder hands over at a time, and the
// height of the band search's reduction stripes (a multiple of any power
// of two it reduces by).
const decodeStripe = 512

// decodeFrame decodes the photo at path as every measurement does: a JPEG
// the row decoder takes by rows, a HEIF photo through libheif (heif.go),
// anything else with imread (colour, at its own bit depth). On failure there is no Mat to close and the error names
// the file and the reason.
func decodeFrame(path, format string) (gocv.Mat, error) {
	return decodeFramePlanned(path, format, nil, nil)
}

// decodeFramePlanned is decodeFrame with decodeRows's plan and damage for
// a JPEG the row decoder takes (not used for any other photo).
func decodeFramePlanned(path, format string, plan func(m gocv.Mat) (each func(y0, y1 int), wait func()), damage *string) (gocv.Mat, error) {
	if format == "heif" {
		return decodeHEIF(path, DefaultMaxPixels)
	}
	if format == "jpeg" {
		m, ok, err := decodeRows(path, plan, damage)
		if err != nil {
			return gocv.Mat{}, jpegError(path, err)
		}
		if ok {
			return m, nil
		}
	}
	return imreadOK(path)
}

// jpegError is the row decoder's failure as the user reads it.
func jpegError(path string, err error) error {
	return fmt.Errorf("%s: cannot decode the JPEG: %v", path, err)
}

// searchReduction is the factor k and the size sw×sh the band search
// reduces a w×h frame to: a whole factor keeps OpenCV's area averaging on
// its fast path.
func searchReduction(w, h int) (k, sw, sh int) {
	k = max(1, int(math.Ceil(float64(max(w, h))/searchScale)))
	return k, max(8, w/k), max(8, h/k)
}

// decodeAndReduce decodes the photo at path as decodeFrame does and, when
// workers > 1, for a JPEG the row decoder takes whose reduction can go by
// stripes (reduceArea), reduces it for the band search stripe by stripe
// on another goroutine while the rest decodes: of the 3-4 ms the reduction
// takes after a 12 MP decode, under 1 ms is left (BenchmarkReduceBesideDecode;
// between the stripes on the decoding core it saved nothing). small is then
// exactly reduceArea's result, else nil (the caller reduces). decoded is
// how long the decode took; waited, how long the reduction went on after it.
//
// Errors are as decodeFrame's: no Mat to close.
func decodeAndReduce(path, format string, workers int, damage *string) (m gocv.Mat, small *gocv.Mat, decoded, waited time.Duration, err error) {
	t0 := time.Now()
	if format != "jpeg" || workers <= 1 {
		m, err = decodeFramePlanned(path, format, nil, damage)
		return m, nil, time.Since(t0), 0, err
	}
	var (
		out  gocv.Mat
		made bool
	)
	var t1 time.Time // when the last row was in place
	plan := func(m gocv.Mat) (func(y0, y1 int), func()) {
		k, sw, sh := searchReduction(m.Cols(), m.Rows())
		if !byStripes(k, sw, sh, m.Cols(), m.Rows()) {
			return nil, nil
		}
		o, err := newMatUnset(sh, sw, m.Type(), false) // (the stripes fill every row)
		if err != nil {
			return nil, nil // the caller reduces after the decode
		}
		out, made = o, true
		todo := make(chan [2]int, (m.Rows()+decodeStripe-1)/decodeStripe)
		done := make(chan struct{})
		go func() {
			defer close(done)
			for r := range todo {
				reduceStripe(m, out, k, r[0], r[1])
			}
		}()
		wait := func() {
			t1 = time.Now()
			close(todo)
			<-done
		}
		return func(y0, y1 int) { todo <- [2]int{y0, y1} }, wait
	}
	m, err = decodeFramePlanned(path, format, plan, damage)
	if t1.IsZero() {
		t1 = time.Now() // (no plan was made, or the photo went to imread)
	}
	decoded, waited = t1.Sub(t0), time.Since(t1)
	if err != nil {
		if made {
			out.Close()
		}
		return gocv.Mat{}, nil, decoded, 0, err
	}
	if !made {
		return m, nil, decoded, 0, nil
	}
	return m, &out, decoded, waited, nil
}

// rowsAhead decodes a JPEG's rows at full size into a frame from the top,
// on a goroutine of its own, while the band search works on the reduced
// frame (extractBandFirst): by the time the band is found, the rows of a
// band near the middle of the frame are mostly decoded already. The first
// request for rows (get) steers it: it stops after them, and passes over
// any rows above them it has not reached, without making their pixels.
type rowsAhead struct {
	mu   sync.Mutex
	cond *sync.Cond
	// Rows held, [lo, hi); rows asked for, [from, to) (to 0: not yet).
	lo, hi, from, to int
	stopped, cancel  bool
}

// aheadStripe is the rows rowsAhead decodes between looks at what is
// asked of it: about half a millisecond's work.
const aheadStripe = 64

// decodeAhead starts decoding the JPEG at path into m (its w×h 8-bit BGR
// frame). Its owner calls stop before m is closed.
func decodeAhead(path string, m gocv.Mat) *rowsAhead {
	a := &rowsAhead{}
	a.cond = sync.NewCond(&a.mu)
	go a.run(path, m)
	return a
}

func (a *rowsAhead) run(path string, m gocv.Mat) {
	// A failure just stops it: the rows asked for are then decoded by
	// the caller, whose decoder says what went wrong.
	finish := func() {
		a.mu.Lock()
		a.stopped = true
		a.cond.Broadcast()
		a.mu.Unlock()
	}
	d, ok, err := openRows(path, 8, true)
	if err != nil || !ok {
		finish()
		return
	}
	defer d.close()
	px, err := m.DataPtrUint8()
	if err != nil || d.w != m.Cols() || d.h != m.Rows() || len(px) != 3*d.w*d.h {
		finish()
		return
	}
	stride := 3 * d.w
	for y := 0; ; {
		a.mu.Lock()
		if a.cancel || y >= d.h || (a.to > 0 && y >= a.to) {
			a.mu.Unlock()
			finish()
			return
		}
		if a.to > 0 && y < a.from {
			// Rows above those asked for: passed over.
			from := a.from
			a.mu.Unlock()
			if err := d.skip(from - y); err != nil {
				finish()
				return
			}
			y = from
			a.mu.Lock()
			a.lo, a.hi = y, y
			a.mu.Unlock()
			continue
		}
		n := min(aheadStripe, d.h-y)
		if a.to > 0 {
			n = min(n, a.to-y)
		}
		a.mu.Unlock()
		if err := d.read(px[y*stride:], stride, d.w, n); err != nil {
			finish()
			return
		}
		y += n
		a.mu.Lock()
		a.hi = y
		a.cond.Broadcast()
		a.mu.Unlock()
	}
}

// get waits until rows [y0, y1) are decoded and reports true, or reports
// false when the decoder stopped without them (a failure: the caller
// decodes them itself). Only the first request is served: by a later one
// the caller may have given back rows decoded ahead (frame.keepRows), which
// then read as zeros however many the decoder made.
func (a *rowsAhead) get(y0, y1 int) bool {
	a.mu.Lock()
	defer a.mu.Unlock()
	if a.to != 0 {
		return false
	}
	a.from, a.to = y0, y1
	for !a.stopped && !(a.lo <= y0 && a.hi >= y1) {
		a.cond.Wait()
	}
	return a.lo <= y0 && a.hi >= y1
}

// stop ends the decoding and waits for it; after it, nothing writes to
// the frame.
func (a *rowsAhead) stop() {
	a.mu.Lock()
	a.cancel = true
	for !a.stopped {
		a.cond.Wait()
	}
	a.mu.Unlock()
}
