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
func decodeRows(path string, plan func(m gocv.Mat) (each func(y0, y1 int), wait func())) (m gocv.Mat, ok bool, err error) {
	cpath := C.CString(path)
	defer C.free(unsafe.Pointer(cpath))
	var msg [256]C.char
	var w, h, rowsOK C.int
	j := C.lineshot_jpeg_open(cpath, &w, &h, &rowsOK, &msg[0], C.size_t(len(msg)))
	if j == nil {
		return gocv.Mat{}, false, errors.New(C.GoString(&msg[0]))
	}
	defer C.lineshot_jpeg_close(j)
	if rowsOK == 0 {
		return gocv.Mat{}, false, nil
	}
	if w < 1 || h < 1 {
		return gocv.Mat{}, false, fmt.Errorf("image of %dx%d pixels", w, h)
	}
	m, err = newMatUnset(int(h), int(w), gocv.MatTypeCV8UC3, true)
	if err != nil {
		return gocv.Mat{}, false, err
	}
	px, err := m.DataPtrUint8()
	if err != nil || len(px) != 3*int(w)*int(h) {
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
	stride := 3 * int(w)
	for y0 := 0; y0 < int(h); y0 += decodeStripe {
		n := min(decodeStripe, int(h)-y0)
		got := C.lineshot_jpeg_rows(j, (*C.uchar)(unsafe.Pointer(&px[y0*stride])), C.size_t(stride), C.int(n), &msg[0], C.size_t(len(msg)))
		if int(got) != n {
			wait() // (what reads the rows decoded so far stops before the Mat goes)
			m.Close()
			return gocv.Mat{}, false, errors.New(C.GoString(&msg[0]))
		}
		each(y0, y0+n)
	}
	wait()
	return m, true, nil
}

// decodeStripe is the rows the row decoder hands over at a time, and the
// height of the band search's reduction stripes (a multiple of any power
// of two it reduces by).
const decodeStripe = 512

// decodeFrame decodes the photo at path as every measurement does: a JPEG
// the row decoder takes by rows, anything else with imread (colour, at its
// own bit depth). On failure there is no Mat to close and the error names
// the file and the reason.
func decodeFrame(path, format string) (gocv.Mat, error) {
	return decodeFramePlanned(path, format, nil)
}

// decodeFramePlanned is decodeFrame with decodeRows's plan for a JPEG the
// row decoder takes (plan is not called for any other photo).
func decodeFramePlanned(path, format string, plan func(m gocv.Mat) (each func(y0, y1 int), wait func())) (gocv.Mat, error) {
	if format == "jpeg" {
		m, ok, err := decodeRows(path, plan)
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
func decodeAndReduce(path, format string, workers int) (m gocv.Mat, small *gocv.Mat, decoded, waited time.Duration, err error) {
	t0 := time.Now()
	if format != "jpeg" || workers <= 1 {
		m, err = decodeFrame(path, format)
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
	m, err = decodeFramePlanned(path, format, plan)
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
