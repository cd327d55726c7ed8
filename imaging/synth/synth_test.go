package synth

import (
	"math"
	"testing"
)

// Without noise and tilt, the brightest pixel column of each isolated line
// must sit within half a pixel of the truth, and its row within the band.
func TestRenderPutsLinesWhereTruthSays(t *testing.T) {
	p := Params{Width: 800, Height: 400, LinesPerMM: 600, NoNoise: true,
		Emissions: []Emission{{NM: 435.8328, Strength: 1}, {NM: 546.0735, Strength: 1}, {NM: 656.2795, Strength: 1}}}
	img, tr, err := Render(p)
	if err != nil {
		t.Fatal(err)
	}
	for _, l := range tr.Lines {
		if !l.InFrame {
			t.Fatalf("%.1f nm out of frame at %.1f", l.NM, l.X)
		}
		row := int(math.Round(l.Y))
		best, bv := -1, -1.0
		for x := int(l.X) - 6; x <= int(l.X)+6; x++ {
			c := img.RGBAAt(x, row)
			if v := float64(c.R) + float64(c.G) + float64(c.B); v > bv {
				best, bv = x, v
			}
		}
		if math.Abs(float64(best)-l.X) > 0.5 {
			t.Errorf("%.1f nm: brightest column %d, truth x %.2f", l.NM, best, l.X)
		}
	}
	// The grating equation fixes the order of the lines: longer λ, larger x.
	if !(tr.Lines[0].X < tr.Lines[1].X && tr.Lines[1].X < tr.Lines[2].X) {
		t.Errorf("lines out of order: %+v", tr.Lines)
	}
}

// A tilt rotates the truth about the image centre.
func TestTiltRotatesTruth(t *testing.T) {
	base := Params{Width: 640, Height: 480, Emissions: []Emission{{NM: 546.0735, Strength: 1}}, NoNoise: true}
	_, t0, _ := Render(base)
	base.TiltDeg = 10
	_, t1, _ := Render(base)
	cx, cy := 319.5, 239.5
	r0 := math.Hypot(t0.Lines[0].X-cx, t0.Lines[0].Y-cy)
	r1 := math.Hypot(t1.Lines[0].X-cx, t1.Lines[0].Y-cy)
	ang := math.Atan2(t1.Lines[0].Y-cy, t1.Lines[0].X-cx) - math.Atan2(t0.Lines[0].Y-cy, t0.Lines[0].X-cx)
	deg := math.Mod(ang*180/math.Pi+720, 360)
	if math.Abs(r0-r1) > 1e-9 || math.Abs(deg-10) > 1e-9 {
		t.Errorf("radius %.3f→%.3f, angle %.4f°", r0, r1, deg)
	}
}

func TestValidate(t *testing.T) {
	if _, _, err := Render(Params{Width: 5, Height: 5, Emissions: []Emission{{NM: 500, Strength: 1}}}); err == nil {
		t.Error("5x5 accepted")
	}
	if _, _, err := Render(Params{}); err == nil {
		t.Error("no emissions accepted")
	}
}

// A camera pitched by φ sees the band (η = 0) at f·tan φ from the centre
// row (a plain pinhole fact), each line's image brightest on the truth,
// and the line images converge (keystone): a line at x from the image
// centre leans by −(x/f)·sin φ px per row to first order (the pinhole
// projection of a line image's direction, worked out by hand), opposite
// ways on the two sides, and not at all without pitch.
func TestPitchMovesBandAndLeansLines(t *testing.T) {
	const f = 1500.0
	for _, pitch := range []float64{0, 4, -4} {
		p := Params{Width: 1200, Height: 800, LinesPerMM: 600, NoNoise: true, PitchDeg: pitch, LineHeightPX: 200, FocalPX: f,
			Emissions: []Emission{{NM: 435.8328, Strength: 1}, {NM: 546.0735, Strength: 1}, {NM: 579.0663, Strength: 1}}}
		img, tr, err := Render(p)
		if err != nil {
			t.Fatal(err)
		}
		wantY := 399.5 - f*math.Tan(pitch*math.Pi/180)
		// centre is the light-weighted column of a row near x0.
		centre := func(row int, x0 float64) float64 {
			var sw, sx float64
			for x := int(x0) - 8; x <= int(x0)+8; x++ {
				c := img.RGBAAt(x, row)
				v := float64(c.R) + float64(c.G) + float64(c.B) - 3*float64(img.RGBAAt(int(x0)-40, row).G)
				if v > 0 {
					sw += v
					sx += v * float64(x)
				}
			}
			return sx / sw
		}
		for _, l := range tr.Lines {
			if math.Abs(l.Y-wantY) > 0.5 {
				t.Errorf("pitch %g°, %.1f nm: truth y %.2f, want %.2f", pitch, l.NM, l.Y, wantY)
			}
			row := int(math.Round(l.Y))
			if x := centre(row, l.X); math.Abs(x-l.X) > 0.3 {
				t.Errorf("pitch %g°, %.1f nm: light centred on column %.2f, truth x %.2f", pitch, l.NM, x, l.X)
			}
			lean := (centre(row+60, l.X) - centre(row-60, l.X)) / 120
			want := -(l.X - 599.5) / f * math.Sin(pitch*math.Pi/180)
			t.Logf("pitch %g°, %.1f nm at x %.0f: lean %.4f px/row, first-order %.4f, truth's direction %.4f", pitch, l.NM, l.X, lean, want, l.Dir[0]/l.Dir[1])
			if math.Abs(lean-want) > 0.003+0.1*math.Abs(want) {
				t.Errorf("pitch %g°, %.1f nm: lean %.4f px per row, want %.4f", pitch, l.NM, lean, want)
			}
			if math.Abs(l.Dir[0]/l.Dir[1]-lean) > 0.002 {
				t.Errorf("pitch %g°, %.1f nm: the truth's direction leans %.4f, the image %.4f", pitch, l.NM, l.Dir[0]/l.Dir[1], lean)
			}
		}
	}
}
