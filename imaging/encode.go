package imaging

import (
	"errors"
	"fmt"
	"image"
	"io"

	"gocv.io/x/gocv"
)

// WriteJPEG encodes img as a JPEG of the given quality (1-100) with
// OpenCV's encoder (libjpeg-turbo: several times faster than image/jpeg,
// which mattered for the band image a batch writes per photo).
func WriteJPEG(w io.Writer, img *image.RGBA, quality int) error {
	b := img.Bounds()
	return WriteJPEGDrawn(w, b.Dx(), b.Dy(), quality, func(pix []uint8) {
		for y := 0; y < b.Dy(); y++ {
			copy(pix[4*b.Dx()*y:4*b.Dx()*(y+1)], img.Pix[img.PixOffset(b.Min.X, b.Min.Y+y):])
		}
	})
}

// WriteJPEGDrawn encodes as a JPEG a width×height RGBA image that draw
// fills in (rows top to bottom, 4·width bytes each, no padding). The
// pixels live in C memory and are freed at once: a batch's band image
// per photo then adds nothing for Go's collector to sweep.
func WriteJPEGDrawn(w io.Writer, width, height, quality int, draw func(pix []uint8)) error {
	if width <= 0 || height <= 0 {
		return errors.New("jpeg: empty image")
	}
	src := gocv.NewMatWithSize(height, width, gocv.MatTypeCV8UC4)
	defer src.Close()
	pix, err := src.DataPtrUint8()
	if err != nil || len(pix) < 4*width*height {
		return fmt.Errorf("jpeg: no %dx%d image from OpenCV", width, height)
	}
	draw(pix[:4*width*height])
	bgr := gocv.NewMat()
	defer bgr.Close()
	gocv.CvtColor(src, &bgr, gocv.ColorRGBAToBGR)
	buf, err := gocv.IMEncodeWithParams(gocv.JPEGFileExt, bgr, []int{gocv.IMWriteJpegQuality, max(1, min(100, quality))})
	if err != nil {
		return fmt.Errorf("jpeg: %w", err)
	}
	defer buf.Close()
	_, err = w.Write(buf.GetBytes())
	return err
}
