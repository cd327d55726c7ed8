package imaging

import (
	"math"
	"testing"

	"lineshot/imaging/synth"
	"lineshot/peaks"
)

// Wide phone lenses bend the frame: barrel (k1 < 0) and pincushion
// (k1 > 0) radial distortion in the simulator, the truth moved with it.
// A band through the image centre stays straight (distortion is radial)
// but its lines move along it and bow; a band off the centre bows too.
// Every line at SNR ≥ 50 is found within 0.15 px RMS (0.4 px worst) of its
// distorted truth along the band, out to the frame's ends.
func TestRadialDistortion(t *testing.T) {
	cases := []struct {
		name string
		p    synth.Params
	}{
		{"1080p barrel -0.08, +4°", synth.Params{Width: 1920, Height: 1080, LinesPerMM: 300, TiltDeg: 4, RadialK1: -0.08, Seed: 11, Emissions: mercury}},
		{"12 MP barrel -0.12, -7°", synth.Params{Width: 4032, Height: 3024, LinesPerMM: 600, TiltDeg: -7, RadialK1: -0.12, Seed: 12, Emissions: hydrogen}},
		{"1080p pincushion +0.05", synth.Params{Width: 1920, Height: 1080, LinesPerMM: 600, TiltDeg: 1, RadialK1: 0.05, Seed: 13, Emissions: mercury}},
		{"1080p barrel -0.08, band off centre", synth.Params{Width: 1920, Height: 1080, LinesPerMM: 600, TiltDeg: 2, RadialK1: -0.08, Seed: 14, Emissions: mercury,
			Stacked: []synth.StackedLamp{{Emissions: mercury, OffsetPX: 260}}}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			path, tr := writeJPEG(t, c.p, 92)
			ss, err := ExtractBands(path, Options{})
			if err != nil {
				t.Fatal(err)
			}
			var sq, worst float64
			n := 0
			for _, s := range ss {
				r, err := peaks.Find(s.Profile, peaks.Options{Clipped: s.Clipped})
				if err != nil {
					t.Fatal(err)
				}
				sn, cs := math.Sincos(s.AngleDeg * math.Pi / 180)
				for _, pk := range r.Peaks {
					if pk.SNR < 50 {
						continue
					}
					x, y := s.ToImage(pk.Center)
					best, bd := synth.TruthLine{}, math.Inf(1)
					for _, l := range tr.Lines {
						if d := math.Hypot(l.X-x, l.Y-y); d < bd {
							best, bd = l, d
						}
					}
					along := math.Abs((x-best.X)*cs + (y-best.Y)*sn)
					if bd > 3 {
						t.Errorf("band %d: line at (%.1f, %.1f), SNR %.0f, has no truth line near", s.BandIndex, x, y, pk.SNR)
						continue
					}
					sq += along * along
					worst = math.Max(worst, along)
					n++
				}
			}
			rms := math.Sqrt(sq / float64(max(1, n)))
			t.Logf("%d bands, %d lines at SNR ≥ 50: RMS %.3f px, worst %.3f px along the band", len(ss), n, rms, worst)
			if n < 3 || rms > 0.15 || worst > 0.4 {
				t.Errorf("%d lines: RMS %.3f px, worst %.3f px", n, rms, worst)
			}
		})
	}
}
