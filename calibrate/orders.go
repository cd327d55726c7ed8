package calibrate

import (
	"math"
	"sort"
)

// OrderSet is a calibration photo's lines with their diffraction orders:
// the first order that identification found, and, when they are in the
// photo, the zero order and the opposite first order.
type OrderSet struct {
	// Points are the calibration points. With the zero order or the
	// opposite order found they carry signed orders (the fit becomes a
	// signed one); otherwise they are the identification's, order +1.
	Points []Point
	// Matches are the identification's matches and the opposite order's,
	// each with its signed order (0 when no order was found).
	Matches []Match
	// Zero is the index of the zero-order peak, −1 when none was found.
	Zero int
	// Opposite is how many lines were matched in the opposite first order,
	// Second how many in the second order on the identified side.
	Opposite, Second int
}

// Signed reports whether any order beyond the identified first order was
// found: the points then carry signed orders and fit m·λ.
func (o OrderSet) Signed() bool { return o.Zero >= 0 || o.Opposite > 0 || o.Second > 0 }

// zeroFloorPX is the least position uncertainty given to the zero order.
const zeroFloorPX = 0.15

// FindOrders looks beyond a first-order identification for the zero order
// and the opposite first order.
//
// Seen through a transmission grating the slit appears straight through
// (m = 0, white, where sin θ = 0) and in the first order on both sides of
// it (m = ±1, mirror images in sin θ); the grating equation d·sin θ = m·λ
// (REFERENCE-DATA.md section 9) is one smooth function of position for
// every order, taking the value m·λ. FindOrders fits the grating model to
// the identified lines, takes the unmatched peak nearest the predicted
// zero order (m·λ = 0) when it is bright, refits with it, and matches the
// unmatched peaks on the far side of it to the lamp's lines in the
// opposite order, keeping each addition only when the joint fit stays as
// good as the one-sided fit. peaks and id are those Identify saw; opt is
// passed to the fits.
//
// Both first orders measured together cancel the zero-point offset of the
// fit (the symmetric measurement of a spectrometer); the zero order pins
// sin θ = 0. With neither in the photo the identification's points come
// back unchanged.
func FindOrders(peaks []Peak, id Identification, lamp Lamp, opt FitOptions) OrderSet {
	out := OrderSet{Zero: -1, Matches: append([]Match(nil), id.Matches...)}
	for _, mt := range id.Matches {
		p := peaks[mt.Peak]
		out.Points = append(out.Points, Point{PX: p.PX, SigmaPX: p.SigmaPX, NM: mt.Line.NM, SigmaNM: mt.Line.SigmaNM, Line: mt.Line.Name})
	}
	if len(out.Points) < 3 {
		return out
	}
	gopt := opt
	gopt.Model, gopt.EstimateFloor = ModelGrating, false
	one, err := FitDispersion(out.Points, gopt)
	if err != nil || len(one.Params) != 3 || one.Params[1] == 0 {
		return out
	}
	// The identified lines' order: the signed model rises with position,
	// so lines whose wavelength falls with position are order −1.
	m := 1
	if one.Slope((one.MinPX+one.MaxPX)/2) < 0 {
		m = -1
	}
	used := map[int]bool{}
	maxH := 0.0
	for _, mt := range id.Matches {
		used[mt.Peak] = true
		maxH = math.Max(maxH, peaks[mt.Peak].Height)
	}
	// signed: the calibration points with their orders; extra matches
	// carry their own (Match.Order).
	signed := func(zero int, extra []Match) []Point {
		var pts []Point
		for _, p := range out.Points[:len(id.Matches)] {
			p.Order = m
			pts = append(pts, p)
		}
		for _, mt := range extra {
			p := peaks[mt.Peak]
			pts = append(pts, Point{PX: p.PX, SigmaPX: p.SigmaPX, NM: mt.Line.NM, SigmaNM: mt.Line.SigmaNM, Line: mt.Line.Name, Order: mt.Order})
		}
		if zero >= 0 {
			// The zero order is the brightest thing in frame, often
			// saturated and measured on its flanks, where its fit's σ
			// (thousandths of a pixel) understates the error of its shape
			// (clipped top, white light through a lens that is not
			// achromatic). A floor of 0.15 px keeps it from outvoting the
			// lines; on simulated tilted photos its residual reached
			// 0.15 px with a 0.05 px floor.
			p := peaks[zero]
			pts = append(pts, Point{PX: p.PX, SigmaPX: math.Hypot(p.SigmaPX, zeroFloorPX), Line: "zero order", ZeroOrder: true})
		}
		return pts
	}
	// acceptable: the joint fit is not much worse than the one-sided one.
	// A wrong assignment multiplies χ²/dof by hundreds; blends and
	// saturated lines, whose fit σ understate their errors, by a few (the
	// final calibration fit estimates that floor). So: χ²/dof within its
	// 3σ range, or within 4 and twice the one-sided fit's.
	cur := one
	acceptable := func(d Dispersion) bool {
		if d.DOF == 0 {
			return true
		}
		lim := 1 + 3*math.Sqrt(2/float64(d.DOF))
		return d.ChiSq/float64(d.DOF) <= math.Max(lim, math.Max(4, 2*one.Birge*one.Birge))
	}

	// onSide is m·λ at position px, oriented so that the identified side
	// is positive: the one-sided fit gives λ there (and its extrapolation
	// turns negative across the zero order), a signed fit m·λ.
	onSide := func(px float64) float64 {
		v := cur.Wavelength(px)
		if cur.Signed {
			v *= float64(m)
		}
		return v
	}

	// 1. The zero order: where the grating model reaches m·λ = 0
	// (a + b·t = 0), within the fit's uncertainty there.
	if p0 := one.Center - one.Scale*one.Params[0]/one.Params[1]; !math.IsNaN(p0) {
		tol := math.Max(4, 5*one.Sigma(p0, 0)/math.Abs(one.Slope(p0)))
		best := -1
		for i, p := range peaks {
			if used[i] || math.Abs(p.PX-p0) > tol || p.Height < 0.2*maxH {
				continue
			}
			if best < 0 || p.Height > peaks[best].Height {
				best = i
			}
		}
		if best >= 0 {
			if d, err := FitDispersion(signed(best, nil), gopt); err == nil && acceptable(d) {
				out.Zero, cur = best, d
				used[best] = true
			}
		}
	}

	// 2. The opposite first order: the unmatched peaks on the far side of
	// the zero order, matched to the lamp's lines at −m·λ; twice, the
	// second time with the joint fit's better prediction.
	var opp []Match
	for round := 0; round < 2; round++ {
		var idx []int
		var nm, sig []float64
		for i, p := range peaks {
			if used[i] {
				continue
			}
			v := onSide(p.PX) // negative on the far side of the zero order
			if v >= 0 || math.IsNaN(v) {
				continue
			}
			idx = append(idx, i)
			nm = append(nm, -v)
			sig = append(sig, cur.Sigma(p.PX, p.SigmaPX))
		}
		var got []Match
		for _, mt := range Assign(nm, sig, lamp, 0.5) {
			mt.Peak, mt.Order = idx[mt.Peak], -m
			got = append(got, mt)
		}
		if len(got) < 2 {
			break
		}
		d, err := FitDispersion(signed(out.Zero, got), gopt)
		if err != nil || !acceptable(d) {
			break
		}
		opp, cur = got, d
	}
	for _, mt := range opp {
		used[mt.Peak] = true
	}

	// 3. The second order on the identified side: unmatched peaks past
	// the first order's reach where m·λ is twice a lamp line (a lamp's
	// violet lines reappear beyond the red end), matched at half their
	// value; kept, like the others, only if the joint fit stays good. They
	// pin the grating model far better than an extrapolation of the first
	// order alone.
	minNM := math.Inf(1)
	for _, l := range lamp.Lines {
		minNM = math.Min(minNM, l.NM)
	}
	var sec []Match
	for round := 0; round < 2; round++ {
		var idx []int
		var nm, sig []float64
		for i, p := range peaks {
			if used[i] {
				continue
			}
			v := onSide(p.PX)
			s := cur.Sigma(p.PX, p.SigmaPX)
			if math.IsNaN(v) || v < 2*minNM-4*s-1 {
				continue
			}
			idx = append(idx, i)
			nm = append(nm, v/2)
			// The first round extrapolates the first order's fit far past
			// its lines, where its σ was seen to be 2-3 times too small:
			// a wider window then (a wrong match fails the joint fit).
			if round == 0 {
				s *= 3
			}
			sig = append(sig, s/2)
		}
		var got []Match
		for _, mt := range Assign(nm, sig, lamp, 0.5) {
			if round == 0 && ambiguous(lamp, nm[mt.Peak], math.Max(0.5, 4*sig[mt.Peak])) {
				continue // two lamp lines in the window: wait for a better fit
			}
			mt.Peak, mt.Order = idx[mt.Peak], 2*m
			got = append(got, mt)
		}
		// Far out, close pairs (the mercury yellow lines) may swap: drop
		// the worst-fitting match until the joint fit is good; the second
		// round, predicted by the better fit, finds the dropped ones.
		var d Dispersion
		var err error
		for len(got) >= 2 {
			d, err = FitDispersion(signed(out.Zero, append(append([]Match(nil), opp...), got...)), gopt)
			if err == nil && acceptable(d) {
				break
			}
			if err != nil {
				got = nil
				break
			}
			worst, wr := -1, 0.0
			for k, mt := range got {
				p := peaks[mt.Peak]
				r := math.Abs(d.Wavelength(p.PX)/float64(mt.Order)-mt.Line.NM) / math.Max(d.Sigma(p.PX, p.SigmaPX), 1e-6)
				if r > wr {
					worst, wr = k, r
				}
			}
			if worst < 0 {
				got = nil // no residual to go by (NaN σ): give up the order
				break
			}
			got = append(got[:worst:worst], got[worst+1:]...)
		}
		if len(got) < 2 {
			break
		}
		sec, cur = got, d
	}
	if out.Zero < 0 && len(opp) == 0 && len(sec) == 0 {
		return out
	}
	extra := append(append([]Match(nil), opp...), sec...)
	out.Points = signed(out.Zero, extra)
	out.Opposite, out.Second = len(opp), len(sec)
	for i := range out.Matches {
		out.Matches[i].Order = m
	}
	out.Matches = append(out.Matches, extra...)
	sort.Slice(out.Matches, func(a, b int) bool { return peaks[out.Matches[a].Peak].PX < peaks[out.Matches[b].Peak].PX })
	return out
}

// ambiguous reports whether more than one of lamp's lines lies within tol
// of nm.
func ambiguous(lamp Lamp, nm, tol float64) bool {
	n := 0
	for _, l := range lamp.Lines {
		if math.Abs(l.NM-nm) <= tol {
			n++
		}
	}
	return n > 1
}
