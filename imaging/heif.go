package imaging

/*
#cgo pkg-config: libheif
#include <stdlib.h>
#include "heif.h"
*/
import "C"

import (
	"errors"
	"fmt"
	"image"
	"strings"
	"unicode"
	"unsafe"

	"gocv.io/x/gocv"
)

// HEIF/HEIC photos (an iPhone's default format) and AVIF are read through
// libheif (Debian's libheif-dev, 1.15): the primary image, turned and
// mirrored as the file says, colour, 8-bit or, for images of more than 8
// bits a channel, 16-bit.

const heifErrLen = 256

// heifErr is libheif's message as one line (some end in a newline).
func heifErr(buf []C.char) error {
	msg := strings.Map(func(r rune) rune {
		if unicode.IsControl(r) {
			return ' '
		}
		return r
	}, C.GoString(&buf[0]))
	return errors.New(strings.TrimSpace(strings.ToValidUTF8(msg, "?")))
}

// heifSize is the size of the primary image of the HEIF file at path (as
// decoded, turned) and its bits a channel, read from the container without
// decoding.
func heifSize(path string) (w, h, depth int, err error) {
	cp := C.CString(path)
	defer C.free(unsafe.Pointer(cp))
	buf := make([]C.char, heifErrLen)
	var cw, ch, cd C.int
	if C.lineshot_heif_size(cp, &cw, &ch, &cd, &buf[0], heifErrLen) != 0 {
		return 0, 0, 0, heifErr(buf)
	}
	return int(cw), int(ch), int(cd), nil
}

// decodeHEIF decodes the primary image of the HEIF file at path into a BGR
// Mat (8-bit, or 16-bit for deeper images) of at most maxPx pixels. The
// error names the file.
func decodeHEIF(path string, maxPx int) (gocv.Mat, error) {
	cp := C.CString(path)
	defer C.free(unsafe.Pointer(cp))
	buf := make([]C.char, heifErrLen)
	m := gocv.NewMat()
	if C.lineshot_heif_decode(cp, unsafe.Pointer(m.Ptr()), C.longlong(maxPx), &buf[0], heifErrLen) != 0 {
		m.Close()
		return gocv.Mat{}, fmt.Errorf("%s: %v", path, heifErr(buf))
	}
	return m, nil
}

// WriteHEIC writes img as a HEIC file (HEVC, 8-bit, at libheif's lossy
// quality 0-100) at path: for simulated photos and tests.
func WriteHEIC(path string, img image.Image, quality int) error {
	return writeHEIC(path, img, 8, quality, 1)
}

// writeHEIC is WriteHEIC with the bits a channel (8, or 10 as newer phones
// store HDR photos) and the container's orientation (the EXIF values,
// 1-8: how a viewer turns img).
func writeHEIC(path string, img image.Image, bits, quality, orientation int) error {
	b := img.Bounds()
	w, h := b.Dx(), b.Dy()
	if w < 1 || h < 1 {
		return fmt.Errorf("%s: an empty image", path)
	}
	size := 1
	if bits > 8 {
		size = 2
	}
	rgb := C.malloc(C.size_t(3 * w * h * size))
	if rgb == nil {
		return fmt.Errorf("%s: out of memory", path)
	}
	defer C.free(rgb)
	var px8 []byte
	var px16 []uint16
	if size == 1 {
		px8 = unsafe.Slice((*byte)(rgb), 3*w*h)
	} else {
		px16 = unsafe.Slice((*uint16)(rgb), 3*w*h)
	}
	// 16-bit values to bits, rounded.
	sh := uint(16 - bits)
	q := func(v uint32) uint16 { return uint16(min((v+(1<<sh)/2)>>sh, 1<<bits-1)) }
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			r, g, bl, _ := img.At(b.Min.X+x, b.Min.Y+y).RGBA()
			o := 3 * (y*w + x)
			if size == 1 {
				px8[o], px8[o+1], px8[o+2] = byte(r>>8), byte(g>>8), byte(bl>>8)
			} else {
				px16[o], px16[o+1], px16[o+2] = q(r), q(g), q(bl)
			}
		}
	}
	cp := C.CString(path)
	defer C.free(unsafe.Pointer(cp))
	buf := make([]C.char, heifErrLen)
	if C.lineshot_heif_encode(rgb, C.int(w), C.int(h), C.int(bits), C.int(quality), C.int(orientation), cp, &buf[0], heifErrLen) != 0 {
		return fmt.Errorf("%s: %v", path, heifErr(buf))
	}
	return nil
}
