package main

import (
	"bytes"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
)

// A profile drawn through edgeBoxedLine is the same drawing, byte for
// byte, as through plotter.Line, which gives a glyph box for every point:
// on noisy profiles with lines, with axes that leave points outside them,
// and with lines of zero and of wide width.
func TestEdgeBoxedLineSameSVG(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 7))
	for k, c := range []struct {
		n            int
		width        vg.Length
		ymin, ymax   float64 // set when ymax > ymin
		xmin, xmax   float64 // set when xmax > xmin
		fallingFirst bool
	}{
		{n: 1920, width: 1},
		{n: 4037, width: 6},
		{n: 600, width: 0},
		{n: 800, width: 4, ymin: 0.2, ymax: 3},   // peaks cut off by the axis
		{n: 800, width: 4, xmin: 100, xmax: 500}, // points left and right of the axis
		{n: 5, width: 20, fallingFirst: true},    // a few points, a wide line
	} {
		prof := make([]float32, c.n)
		for i := range prof {
			x := float64(i)
			v := 0.3 + 0.05*rng.NormFloat64() + 5*math.Exp(-0.5*math.Pow((x-0.3*float64(c.n))/3, 2)) + 2*math.Exp(-0.5*math.Pow((x-0.8*float64(c.n))/2, 2))
			if c.fallingFirst {
				v = float64(c.n - i)
			}
			prof[i] = float32(v)
		}
		svg := func(wrap bool) []byte {
			p := styled("profile", "x", "y")
			l, err := plotter.NewLine(profileXY(prof))
			if err != nil {
				t.Fatal(err)
			}
			l.Width = c.width
			var pl plot.Plotter = l
			if wrap {
				pl = edgeBoxedLine{l}
			}
			p.Add(pl)
			if c.ymax > c.ymin {
				p.Y.Min, p.Y.Max = c.ymin, c.ymax
			}
			if c.xmax > c.xmin {
				p.X.Min, p.X.Max = c.xmin, c.xmax
			}
			wt, err := p.WriterTo(22*vg.Centimeter, 8*vg.Centimeter, "svg")
			if err != nil {
				t.Fatal(err)
			}
			var b bytes.Buffer
			if _, err := wt.WriteTo(&b); err != nil {
				t.Fatal(err)
			}
			return b.Bytes()
		}
		a, b := svg(false), svg(true)
		if !bytes.Equal(a, b) {
			t.Errorf("case %d: the SVGs differ (%d and %d bytes)", k, len(a), len(b))
		}
	}
}
