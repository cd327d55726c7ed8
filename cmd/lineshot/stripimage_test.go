package main

import (
	"image"
	"image/color"
	"image/jpeg"
	"os"
	"path/filepath"
	"testing"

	"lineshot/peaks"
)

// The band image a batch keeps: the band between two black rows of ticks,
// one orange tick at each line's column (profile samples scaled to the
// image's width). Decoded with Go's own decoder. (Ticks 1 px wide came out
// grey-violet, (169, 73, 160): JPEG halves the colour resolution.)
func TestStripImageTicksEachLine(t *testing.T) {
	const w, h, n = 300, 40, 600 // a 600-sample profile shown 300 px wide
	band := image.NewRGBA(image.Rect(0, 0, w, h))
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			band.Set(x, y, color.RGBA{uint8(x * 255 / w), 90, 200, 255})
		}
	}
	centres := []float64{100.4, 333, 590}
	var m measured
	m.strip.Image, m.strip.Profile = band, make([]float64, n)
	for _, c := range centres {
		m.found.Peaks = append(m.found.Peaks, peaks.Peak{Center: c})
	}
	path := filepath.Join(t.TempDir(), "band.jpg")
	if err := writeStripImage(path, m, true); err != nil {
		t.Fatal(err)
	}
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	img, err := jpeg.Decode(f)
	if err != nil {
		t.Fatal(err)
	}
	if b := img.Bounds(); b.Dx() != w || b.Dy() != h+20 {
		t.Fatalf("image %v, want %dx%d", b, w, h+20)
	}
	near := func(c color.Color, want color.RGBA, tol int) bool {
		r, g, b, _ := c.RGBA()
		d := func(a uint32, b uint8) int { return max(int(a>>8)-int(b), int(b)-int(a>>8)) }
		return d(r, want.R) <= tol && d(g, want.G) <= tol && d(b, want.B) <= tol
	}
	ticked := map[int]bool{}
	for _, c := range centres {
		x := int(c*w/n + 0.5)
		ticked[x-1], ticked[x], ticked[x+1] = true, true, true
		for _, y := range []int{3, h + 20 - 4} {
			if !near(img.At(x, y), markerColor, 60) {
				t.Errorf("line at sample %.1f: tick pixel (%d, %d) is %v, want about %v", c, x, y, img.At(x, y), markerColor)
			}
		}
	}
	for _, x := range []int{20, 120, 250} {
		if ticked[x] {
			continue
		}
		for _, y := range []int{3, h + 20 - 4} {
			if !near(img.At(x, y), color.RGBA{}, 24) {
				t.Errorf("tick row pixel (%d, %d) away from the lines is %v, want black", x, y, img.At(x, y))
			}
		}
	}
	for _, x := range []int{30, 150, 270} {
		want := band.RGBAAt(x, h/2)
		if got := img.At(x, 10+h/2); !near(got, want, 12) {
			t.Errorf("band pixel (%d, %d) is %v, want about %v", x, h/2, got, want)
		}
	}
}
