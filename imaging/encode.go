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
	if b.Empty() {
		return errors.New("jpeg: empty image")
	}
	if img.Stride != 4*b.Dx() || b.Min != (image.Point{}) {
		img = copyRGBA(img)
	}
	src, err := gocv.NewMatFromBytes(b.Dy(), b.Dx(), gocv.MatTypeCV8UC4, img.Pix[:4*b.Dx()*b.Dy()])
	if err != nil {
		return fmt.Errorf("jpeg: %w", err)
	}
	defer src.Close()
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

// copyRGBA returns img with its origin at (0, 0) and no row padding.
func copyRGBA(img *image.RGBA) *image.RGBA {
	b := img.Bounds()
	out := image.NewRGBA(image.Rect(0, 0, b.Dx(), b.Dy()))
	for y := 0; y < b.Dy(); y++ {
		copy(out.Pix[y*out.Stride:(y+1)*out.Stride], img.Pix[img.PixOffset(b.Min.X, b.Min.Y+y):])
	}
	return out
}
