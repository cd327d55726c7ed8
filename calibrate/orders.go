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
	// Opposite is how many lines were matched in the opposite first order.
	Opposite int
}

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
// zeroFloorPX is the least position uncertainty given to the zero order.
const zeroFloorPX = 0.15

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
	signed := func(zero int, opp []Match) []Point {
		var pts []Point
		for _, p := range out.Points[:len(id.Matches)] {
			p.Order = m
			pts = append(pts, p)
		}
		for _, mt := range opp {
			p := peaks[mt.Peak]
			pts = append(pts, Point{PX: p.PX, SigmaPX: p.SigmaPX, NM: mt.Line.NM, SigmaNM: mt.Line.SigmaNM, Line: mt.Line.Name, Order: -m})
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
	acceptable := func(d Dispersion) bool {
		if d.DOF == 0 {
			return true
		}
		lim := 1 + 3*math.Sqrt(2/float64(d.DOF))
		return d.ChiSq/float64(d.DOF) <= math.Max(lim, math.Max(4, 2*one.Birge*one.Birge))
	}

	// 1. The zero order: where the grating model reaches m·λ = 0
	// (a + b·t = 0), within the fit's uncertainty there.
	cur := one
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
			v := cur.Wavelength(p.PX)
			if !cur.Signed && out.Zero < 0 {
				// m·λ from the one-sided fit: the far side is where the
				// extrapolated value has the other sign.
				v *= float64(m)
			}
			if v*float64(m) >= 0 || math.IsNaN(v) {
				continue
			}
			idx = append(idx, i)
			nm = append(nm, math.Abs(v))
			sig = append(sig, cur.Sigma(p.PX, p.SigmaPX))
		}
		var got []Match
		for _, mt := range Assign(nm, sig, lamp, 0.5) {
			mt.Peak = idx[mt.Peak]
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
	if out.Zero < 0 && len(opp) == 0 {
		return out
	}
	out.Points = signed(out.Zero, opp)
	out.Opposite = len(opp)
	for i := range out.Matches {
		out.Matches[i].Order = m
	}
	for _, mt := range opp {
		mt.Order = -m
		out.Matches = append(out.Matches, mt)
	}
	sort.Slice(out.Matches, func(a, b int) bool { return peaks[out.Matches[a].Peak].PX < peaks[out.Matches[b].Peak].PX })
	return out
}
