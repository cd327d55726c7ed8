package main

import (
	"encoding/json"
	"fmt"
	"math"
	"strings"
	"testing"

	"lineshot/imaging"
	"lineshot/imaging/synth"
	"lineshot/peaks"
)

// Overexposed mercury photos (brightest line at 2, 4 and 8 times full
// scale; PNG and JPEG q90): every clipped line is flagged saturated and
// measured within 0.1 px of the simulator's truth, as the unclipped ones
// are (its flanks fitted, the flat top left out).
func TestSaturatedLinesMeasured(t *testing.T) {
	dir := t.TempDir()
	worst, n := 0.0, 0
	for _, jpg := range []bool{false, true} {
		for _, lvl := range []float64{2, 4, 8} {
			p := synth.Params{Width: 1920, Height: 1080, LinesPerMM: 600, TiltDeg: 2, PeakLevel: lvl, Seed: uint64(10 * lvl)}
			name := fmt.Sprintf("over%g.png", lvl)
			if jpg {
				name = fmt.Sprintf("over%g.jpg", lvl)
			}
			path, tr := renderPNG(t, dir, name, "mercury", p)
			full := tr.Params.FullWell
			m, err := extractAndFind(path, defaultCfg)
			if err != nil {
				t.Fatal(err)
			}
			sat := 0
			for _, pk := range m.found.Peaks {
				x, y := m.strip.ToImage(pk.Center)
				tl, d := nearestTruth(tr, x, y)
				if tl.PeakE < 1.05*full {
					continue // not clipped in truth
				}
				sat++
				n++
				worst = math.Max(worst, d)
				if !pk.Saturated {
					t.Errorf("%s: %.2f nm peaks at %.1f× full scale, not flagged saturated", path, tl.NM, tl.PeakE/full)
				}
				if d > 0.1 {
					t.Errorf("%s: saturated %.2f nm off by %.3f px", path, tl.NM, d)
				}
			}
			if sat == 0 {
				t.Errorf("%s: no saturated line (test is not testing)", path)
			}
		}
	}
	t.Logf("%d saturated lines, worst error %.3f px", n, worst)
}

// The channel fallback: a line whose profile fit failed (a plain centroid
// on a clipped top) takes the centre of the channel where it is not
// clipped; a good flank fit is kept.
func TestUnclippedChannelFallback(t *testing.T) {
	const n, mu = 120, 60.3 // truth: the line's centre in every channel
	var s imaging.Strip
	for c := 0; c < 3; c++ {
		s.Channels[c] = make([]float64, n)
		s.ChannelClipped[c] = make([]bool, n)
	}
	for i := 0; i < n; i++ {
		g := math.Exp(-(float64(i) - mu) * (float64(i) - mu) / (2 * 1.3 * 1.3))
		s.Channels[0][i] = 0.4*g + 0.002*math.Sin(float64(i)*1.7) // R: unclipped, a little ripple for noise
		s.Channels[1][i] = math.Min(1, 3*g)                       // G: clipped
		s.ChannelClipped[1][i] = 3*g >= 1
		s.Channels[2][i] = 0.02 * g // B: faint
	}
	r := peaks.Result{Peaks: []peaks.Peak{{Center: 60.9, Sigma: 0.4, FWHM: 3.1, Saturated: true, Method: "centroid"}}}
	fromUnclippedChannel(s, &r, 5, 0)
	if p := r.Peaks[0]; p.Channel != "R" || math.Abs(p.Center-mu) > 0.02 {
		t.Errorf("failed fit: centre %.3f from channel %q, truth %.1f in R", p.Center, p.Channel, mu)
	}
	r = peaks.Result{Peaks: []peaks.Peak{{Center: 60.31, Sigma: 0.003, FWHM: 3.1, Saturated: true, Method: "gauss"}}}
	fromUnclippedChannel(s, &r, 5, 0)
	if p := r.Peaks[0]; p.Channel != "" || p.Center != 60.31 {
		t.Errorf("good flank fit replaced: centre %.3f from channel %q", p.Center, p.Channel)
	}
}

// A photo compressed so hard that its noise is gone (a simulated hydrogen
// photo as JPEG of quality 40: profile noise exactly 0, the compression's
// ringing then found as lines) says so; the same photo at quality 90 does
// not.
func TestNoNoiseWarned(t *testing.T) {
	dir := t.TempDir()
	for _, c := range []struct {
		quality string
		warned  bool
	}{{"40", true}, {"90", false}} {
		p, _ := simulate(t, dir, "h"+c.quality+".jpg", "--lamp", "hydrogen", "--size", "1280x720", "--quality", c.quality, "--seed", "5")
		out, stderr, code := runCLI(t, "measure", "--json", p)
		if code != 0 {
			t.Fatalf("exit %d: %s", code, stderr)
		}
		var doc document
		if err := json.Unmarshal([]byte(out), &doc); err != nil {
			t.Fatal(err)
		}
		warned, flat := false, false
		for _, w := range doc.Images[0].Warnings {
			warned = warned || strings.Contains(w, "shows no noise")
			flat = flat || strings.HasPrefix(w, imaging.FlatBackgroundWarning)
		}
		if warned != c.warned {
			t.Errorf("quality %s: warned %v (profile noise %g), want %v", c.quality, warned, doc.Images[0].Quality.ProfileNoise, c.warned)
		}
		if warned && flat {
			// One warning of the one cause: the graver in place of the
			// band's warning of a flat background.
			t.Errorf("quality %s: warned of a flat background besides: %q", c.quality, doc.Images[0].Warnings)
		}
	}
}
