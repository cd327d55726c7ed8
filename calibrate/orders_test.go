package calibrate

import (
	"math"
	"math/rand/v2"
	"testing"
)

// orderScene places a lamp's lines by the grating equation d·sin θ = m·λ
// (REFERENCE-DATA.md section 9, normal incidence) on a pinhole camera of
// focal length f px aimed at angle aim from the grating normal: x = cx +
// f·tan(θ − aim), kept when inside [0, width). The zero order (θ = 0) is
// as bright as all lines together. Positions get Gaussian noise of σ px.
type orderScene struct {
	linesPerMM, f, aimDeg, width, sigma float64
	orders                              []int
}

type placed struct {
	order int // 0: zero order
	nm    float64
}

func (s orderScene) peaks(lamp Lamp, rng *rand.Rand) ([]Peak, []placed) {
	d := 1e6 / s.linesPerMM
	aim := s.aimDeg * math.Pi / 180
	cx := s.width / 2
	var ps []Peak
	var truth []placed
	total := 0.0
	for _, l := range lamp.Lines {
		total += l.Strength
	}
	add := func(th, h float64, pl placed) {
		x := cx + s.f*math.Tan(th-aim)
		if x < 0 || x >= s.width {
			return
		}
		ps = append(ps, Peak{PX: x + s.sigma*rng.NormFloat64(), SigmaPX: s.sigma, Height: h})
		truth = append(truth, pl)
	}
	for _, m := range s.orders {
		if m == 0 {
			add(0, total, placed{0, 0})
			continue
		}
		for _, l := range lamp.Lines {
			add(math.Asin(float64(m)*l.NM/d), l.Strength, placed{m, l.NM})
		}
	}
	return ps, truth
}

// Both first orders and the zero order of a 300 lines/mm grating in one
// frame: FindOrders places the zero order, matches the opposite order's
// lines, and the signed fit gives every line's wavelength and side.
func TestFindOrdersBothSides(t *testing.T) {
	hg, _ := LampByName("mercury")
	cases := []struct {
		name      string
		scene     orderScene
		zero      bool
		opposite  int // at least
		wantOrder bool
	}{
		{"-1, 0, +1 straight on", orderScene{300, 3700, 0, 1920, 0.05, []int{-1, 0, 1}}, true, 5, true},
		{"-1, 0, +1 aimed off by 2°", orderScene{300, 3700, 2, 1920, 0.05, []int{-1, 0, 1}}, true, 5, true},
		{"0 and +1 only", orderScene{300, 3000, 8, 1920, 0.05, []int{0, 1}}, true, 0, true},
		{"+1 alone", orderScene{600, 2600, 19, 1920, 0.05, []int{1}}, false, 0, false},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(5, 7))
			ps, truth := c.scene.peaks(hg, rng)
			id, err := Identify(ps, hg, IdentifyOptions{})
			if err != nil {
				t.Fatalf("identify: %v", err)
			}
			os := FindOrders(ps, id, hg, FitOptions{OpticalCenterPX: c.scene.width / 2})
			if c.zero != (os.Zero >= 0) {
				t.Fatalf("zero order found = %v, want %v", os.Zero >= 0, c.zero)
			}
			if os.Zero >= 0 && truth[os.Zero].order != 0 {
				t.Errorf("zero order put on the %g nm line of order %d", truth[os.Zero].nm, truth[os.Zero].order)
			}
			if os.Opposite < c.opposite {
				t.Errorf("%d lines matched in the opposite order, want at least %d", os.Opposite, c.opposite)
			}
			d, err := FitDispersion(os.Points, FitOptions{OpticalCenterPX: c.scene.width / 2})
			if err != nil {
				t.Fatal(err)
			}
			if d.Signed != c.wantOrder {
				t.Errorf("signed fit = %v, want %v", d.Signed, c.wantOrder)
			}
			// Every matched line: the right line, the right side, and its
			// wavelength from the fit within 4σ (the fit's σ there with the
			// position's own).
			sideOf := 0
			for _, mt := range os.Matches {
				tr := truth[mt.Peak]
				if tr.nm != mt.Line.NM {
					t.Errorf("peak of %g nm (order %d) matched to %g nm", tr.nm, tr.order, mt.Line.NM)
				}
				if c.wantOrder {
					if mt.Order != tr.order && mt.Order != -tr.order {
						t.Errorf("%g nm: order %d, truth ±%d", tr.nm, mt.Order, tr.order)
					}
					// The sign convention is the fit's own (m·λ rising
					// with position); it must map truth's sides one to one.
					s := mt.Order * tr.order
					if sideOf == 0 {
						sideOf = s
					} else if s != sideOf {
						t.Errorf("%g nm order %d: sides mixed up", tr.nm, tr.order)
					}
				}
				nm, _ := d.Resolve(ps[mt.Peak].PX)
				if s := d.Sigma(ps[mt.Peak].PX, ps[mt.Peak].SigmaPX); math.Abs(nm-tr.nm) > 4*s {
					t.Errorf("%g nm (order %d): fit gives %.3f ± %.3f nm", tr.nm, tr.order, nm, s)
				}
			}
			t.Logf("%d points, zero %v, opposite %d, model %s, rms %.4f nm", len(os.Points), os.Zero >= 0, os.Opposite, d.Model, d.RMSNM)
		})
	}
}

// A bright line that is not at the zero order's predicted place is not
// taken for it: a one-sided photo with a strong extra peak far from
// m·λ = 0 comes back unchanged.
func TestFindOrdersIgnoresAStrayBrightPeak(t *testing.T) {
	hg, _ := LampByName("mercury")
	rng := rand.New(rand.NewPCG(9, 9))
	sc := orderScene{600, 2600, 19, 1920, 0.05, []int{1}}
	ps, _ := sc.peaks(hg, rng)
	ps = append(ps, Peak{PX: 15, SigmaPX: 0.05, Height: 10}) // a reflection at the frame edge
	id, err := Identify(ps, hg, IdentifyOptions{})
	if err != nil {
		t.Fatal(err)
	}
	os := FindOrders(ps, id, hg, FitOptions{OpticalCenterPX: 960})
	if os.Zero >= 0 || os.Opposite > 0 {
		t.Errorf("stray peak taken as zero order (%d) or opposite lines (%d)", os.Zero, os.Opposite)
	}
	for _, p := range os.Points {
		if p.Order != 0 || p.ZeroOrder {
			t.Errorf("point %v got an order", p)
		}
	}
}

// With both first orders about the zero order, a pattern spanning the zero
// order can fit another lamp by chance (a hydrogen photo once came out as
// helium, its zero order taken for He 587.56). MirrorCentre finds the zero
// order by the mirrored pairs, identification keeps to one side, and
// Classify names every lamp right; single-order photos show no mirror.
func TestBothOrdersClassifiedRight(t *testing.T) {
	for _, name := range []string{"hydrogen", "mercury", "helium", "neon"} {
		lamp, _ := LampByName(name)
		for _, aim := range []float64{0, 3} {
			sc := orderScene{300, 3700, aim, 1920, 0.05, []int{-1, 0, 1}}
			ps, truth := sc.peaks(lamp, rand.New(rand.NewPCG(21, 22)))
			z, ok := MirrorCentre(ps)
			if !ok || truth[z].order != 0 {
				t.Errorf("%s, aimed %g°: zero order not found by its mirror (%v, %d)", name, aim, ok, z)
			}
			ids := Classify(ps, Lamps(), IdentifyOptions{})
			if len(ids) == 0 || ids[0].Lamp != name {
				got := "nothing"
				if len(ids) > 0 {
					got = ids[0].Lamp
				}
				t.Errorf("%s, aimed %g°: classified as %s", name, aim, got)
			}
		}
		one := orderScene{600, 2600, 19, 1920, 0.05, []int{1}}
		ps, _ := one.peaks(lamp, rand.New(rand.NewPCG(23, 24)))
		if _, ok := MirrorCentre(ps); ok {
			t.Errorf("%s, one order: a mirror found where there is none", name)
		}
	}
}
