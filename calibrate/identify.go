package calibrate

import (
	"cmp"
	"errors"
	"fmt"
	"math"
	"runtime"
	"slices"
	"sort"

	"golang.org/x/sync/errgroup"
)

// ErrNoMatch is returned when no assignment of peaks to reference lines is
// convincing.
var ErrNoMatch = errors.New("calibrate: the peaks match no reference pattern")

// Peak is what identification needs to know about a measured line.
type Peak struct {
	PX      float64 // position along the profile, px
	SigmaPX float64 // 1σ, px
	Height  float64 // above baseline, any unit; only ratios are used
}

// Match pairs a measured peak with a reference line.
type Match struct {
	Peak int  // index into the peaks given
	Line Line // the reference line
	// Order is the line's signed diffraction order (±1, ±2) once
	// FindOrders has placed the zero order, the opposite order or the
	// second order; 0 when only one first order is known.
	Order int
}

// Identification is the assignment of a photo's peaks to one lamp's lines.
type Identification struct {
	Lamp    string
	Matches []Match // sorted by peak position
	// Score in [0, 1]: the product of the share of the lamp's strength (over
	// the lines expected in frame) that was found, the share of the photo's
	// peak height that the matches explain, 1/(1 + (RMSPX/0.3 px)²), and
	// min(1, (matches − 2)/3).
	Score float64
	// RMSPX is the rms residual of the matches about a smooth dispersion, px.
	RMSPX float64
}

// Pin forces the peak nearest PX to be the reference line at NM.
type Pin struct{ NM, PX float64 }

// IdentifyOptions tunes Identify. The zero value is usable.
type IdentifyOptions struct {
	// Pins are user-given assignments every hypothesis must honour.
	Pins []Pin
	// TolPX is the match tolerance of the first, coarse pass; 0 means
	// max(3 px, 1% of the span of the peaks).
	TolPX float64
	// Workers is how many lamps Classify tries at once; 0 means one per
	// CPU. A batch measuring a photo per CPU sets 1.
	Workers int
}

// Identify assigns peaks to the lines of lamp with no hints. It tries every
// mapping of three of the strongest peaks onto three of the strongest lines
// (either direction of dispersion), keeps the quadratic dispersions that are
// smooth and monotonic, scores each by how many strong lines land on strong
// peaks, then refines the best by refitting and re-matching. Missing lines,
// extra peaks and weak lines are tolerated; it returns ErrNoMatch when fewer
// than three lines (two for a two-line lamp) can be matched.
func Identify(peaks []Peak, lamp Lamp, opt IdentifyOptions) (Identification, error) {
	// Both first orders about the zero order: identify on one side only
	// (a pattern spanning the zero order can fit some other lamp by
	// chance); FindOrders adds the rest.
	if z, ok := MirrorCentre(peaks); ok && len(opt.Pins) == 0 {
		var side []Peak
		var back []int
		for i, p := range peaks {
			if p.PX > peaks[z].PX+2 {
				side, back = append(side, p), append(back, i)
			}
		}
		if id, err := identify(side, lamp, opt); err == nil {
			for k := range id.Matches {
				id.Matches[k].Peak = back[id.Matches[k].Peak]
			}
			return id, nil
		}
	}
	return identify(peaks, lamp, opt)
}

// MirrorCentre finds the zero order of a photo holding both first orders:
// the bright peak (one of the three brightest) about which at least three
// pairs of other peaks lie mirrored, each pair's distances within 5 % + 2 px
// of each other (a camera aimed off the grating normal by a few degrees
// makes the two sides differ by a few per cent; common practice, checked on
// the simulator), and the pairs make up at least 40 % of the peaks on the
// sparser side.
func MirrorCentre(peaks []Peak) (int, bool) {
	if len(peaks) < 7 {
		return -1, false
	}
	order := strongest(len(peaks), min(3, len(peaks)), func(i int) float64 { return peaks[i].Height })
	for _, z := range order {
		c := peaks[z].PX
		var left, right []float64
		for i, p := range peaks {
			switch {
			case i == z:
			case p.PX < c-2:
				left = append(left, c-p.PX)
			case p.PX > c+2:
				right = append(right, p.PX-c)
			}
		}
		pairs := 0
		used := make([]bool, len(right))
		for _, dl := range left {
			for j, dr := range right {
				if !used[j] && math.Abs(dl-dr) <= 0.05*dl+2 {
					used[j] = true
					pairs++
					break
				}
			}
		}
		if pairs >= 3 && float64(pairs) >= 0.4*float64(min(len(left), len(right))) {
			return z, true
		}
	}
	return -1, false
}

func identify(peaks []Peak, lamp Lamp, opt IdentifyOptions) (Identification, error) {
	refs := lamp.sorted()
	need := 3
	if len(refs) < 3 {
		need = len(refs)
	}
	if need < 2 || len(peaks) < need {
		return Identification{}, fmt.Errorf("%w: %d peaks for the %s lamp's %d lines", ErrNoMatch, len(peaks), lamp.Name, len(refs))
	}
	byPos := make([]int, len(peaks))
	for i := range byPos {
		byPos[i] = i
	}
	sort.Slice(byPos, func(a, b int) bool { return peaks[byPos[a]].PX < peaks[byPos[b]].PX })
	lo, hi := peaks[byPos[0]].PX, peaks[byPos[len(byPos)-1]].PX
	span := hi - lo
	tol := opt.TolPX
	if tol == 0 {
		tol = math.Max(3, 0.01*span)
	}
	hmax := 0.0
	for _, p := range peaks {
		hmax = math.Max(hmax, p.Height)
	}
	cand := strongest(len(peaks), 14, func(i int) float64 { return peaks[i].Height })
	sort.Slice(cand, func(a, b int) bool { return peaks[cand[a]].PX < peaks[cand[b]].PX })
	rc := strongest(len(refs), 10, func(i int) float64 { return refs[i].Strength })
	sort.Ints(rc)

	h := &hypo{peaks: peaks, byPos: byPos, refs: refs, hmax: hmax, lo: lo, hi: hi}
	best := scored{score: -1}
	tryMap := func(ps []int, ls []int) {
		var m mapping
		if !m.through(peaks, ps, refs, ls) || !m.plausible(lo, hi) {
			return
		}
		s := h.score(m, tol, opt.Pins)
		if s.score > best.score {
			best = s.keep()
		}
	}
	comb(len(cand), need, func(pi []int) {
		ps := make([]int, need)
		for k, v := range pi {
			ps[k] = cand[v]
		}
		comb(len(rc), need, func(li []int) {
			ls := make([]int, need)
			rev := make([]int, need)
			for k, v := range li {
				ls[k] = rc[v]
				rev[need-1-k] = rc[v]
			}
			tryMap(ps, ls)
			tryMap(ps, rev)
		})
	})
	if best.score < 0 || len(best.matches) < need {
		return Identification{}, fmt.Errorf("%w: %s lamp, %d peaks", ErrNoMatch, lamp.Name, len(peaks))
	}
	// Refine: refit to all matches and re-match with tighter tolerances.
	final := mapping{}
	final.fit(peaks, best.matches)
	for iter, t := range []float64{math.Max(2, 0.004*span), math.Max(1, 0.0015*span), math.Max(1, 0.0015*span)} {
		var m mapping
		if !m.fit(peaks, best.matches) {
			break
		}
		s := h.score(m, t, opt.Pins)
		if len(s.matches) < need || (iter == 0 && len(s.matches) < len(best.matches)) {
			break
		}
		best = s.keep()
		final = m
		final.fit(peaks, best.matches)
	}
	// A true assignment leaves residuals of a fraction of a pixel; chance
	// matches of a dense lamp leave about a pixel. Weigh the score by that,
	// and by how many lines beyond the three that any parabola fits agree.
	var ss float64
	for _, mt := range best.matches {
		p := peaks[mt.Peak].PX
		r := (final.at(p) - mt.Line.NM) / final.slope(p)
		ss += r * r
	}
	rms := math.Sqrt(ss / float64(len(best.matches)))
	q := 1 / (1 + (rms/0.3)*(rms/0.3))
	extra := math.Min(1, float64(len(best.matches)-2)/3)
	out := Identification{Lamp: lamp.Name, Matches: best.matches, Score: h.share(best) * q * extra, RMSPX: rms}
	sort.Slice(out.Matches, func(a, b int) bool { return peaks[out.Matches[a].Peak].PX < peaks[out.Matches[b].Peak].PX })
	return out, nil
}

// Classify identifies the peaks against each lamp and returns the
// identifications, best score first. Lamps that match nothing are left out.
func Classify(peaks []Peak, lamps []Lamp, opt IdentifyOptions) []Identification {
	// Each lamp is tried on its own (concurrently, up to opt.Workers);
	// the order of the result does not depend on which finished first.
	ids := make([]*Identification, len(lamps))
	var g errgroup.Group
	g.SetLimit(max(1, cmp.Or(opt.Workers, runtime.GOMAXPROCS(0))))
	for k, l := range lamps {
		g.Go(func() error {
			if id, ok := classifyOne(peaks, l, opt); ok {
				ids[k] = &id
			}
			return nil
		})
	}
	g.Wait()
	var out []Identification
	for _, id := range ids {
		if id != nil {
			out = append(out, *id)
		}
	}
	sort.SliceStable(out, func(a, b int) bool { return out[a].Score > out[b].Score })
	return out
}

// classifyOne identifies lamp l and scores it, the lines its other
// orders explain included.
func classifyOne(peaks []Peak, l Lamp, opt IdentifyOptions) (Identification, bool) {
	id, err := Identify(peaks, l, opt)
	if err != nil {
		return Identification{}, false
	}
	// A photo with the zero order or both first orders: the lines the
	// orders explain count too (the score's share of the photo's peak
	// height), or a lamp seen on both sides would lose to whichever
	// lamp's pattern the mirrored lines happen to fit.
	if os := FindOrders(peaks, id, l, FitOptions{}); os.Signed() {
		var base, with float64
		for _, mt := range id.Matches {
			base += peaks[mt.Peak].Height
		}
		for _, mt := range os.Matches { // the identification's and every other order's
			with += peaks[mt.Peak].Height
		}
		if os.Zero >= 0 {
			with += peaks[os.Zero].Height
		}
		if base > 0 {
			id.Score *= with / base
		}
	}
	return id, true
}

// Assign matches peaks whose calibrated wavelengths are known to the nearest
// line of lamp within max(tolNM, 4σ). Each line is used once, by its
// nearest peak.
func Assign(nm, sigmaNM []float64, lamp Lamp, tolNM float64) []Match {
	used := map[int]int{} // line index → peak index
	dist := map[int]float64{}
	for i, w := range nm {
		j, d := lamp.Nearest(w)
		if j < 0 || d > math.Max(tolNM, 4*sigmaNM[i]) {
			continue
		}
		if old, ok := dist[j]; ok && old <= d {
			continue
		}
		used[j], dist[j] = i, d
	}
	var out []Match
	for j, i := range used {
		out = append(out, Match{Peak: i, Line: lamp.Lines[j]})
	}
	sort.Slice(out, func(a, b int) bool { return out[a].Peak < out[b].Peak })
	return out
}

// mapping is a cubic λ(p) = c0 + c1·t + c2·t² + c3·t³, t = p − p0.
type mapping struct{ p0, c0, c1, c2, c3 float64 }

func (m mapping) at(p float64) float64 {
	t := p - m.p0
	return m.c0 + t*(m.c1+t*(m.c2+t*m.c3))
}

func (m mapping) slope(p float64) float64 {
	t := p - m.p0
	return m.c1 + t*(2*m.c2+3*m.c3*t)
}

// through sets m to the curve through the given peaks and lines (two: a
// line; three: a parabola). It reports false for coincident positions.
func (m *mapping) through(peaks []Peak, ps []int, refs []Line, ls []int) bool {
	x0, y0 := peaks[ps[0]].PX, refs[ls[0]].NM
	x1, y1 := peaks[ps[1]].PX, refs[ls[1]].NM
	if x1 == x0 {
		return false
	}
	*m = mapping{p0: x0, c0: y0, c1: (y1 - y0) / (x1 - x0)}
	if len(ps) == 2 {
		return true
	}
	x2, y2 := peaks[ps[2]].PX, refs[ls[2]].NM
	if x2 == x1 || x2 == x0 {
		return false
	}
	// Newton's divided differences.
	d01 := (y1 - y0) / (x1 - x0)
	d12 := (y2 - y1) / (x2 - x1)
	m.c2 = (d12 - d01) / (x2 - x0)
	m.c1 = d01 - m.c2*(x1-x0)
	return true
}

// fit sets m to the least-squares polynomial through the matched peaks:
// a line for fewer than 4, a parabola for fewer than 6, else a cubic.
func (m *mapping) fit(peaks []Peak, ms []Match) bool {
	if len(ms) < 2 {
		return false
	}
	pts := make([]Point, len(ms))
	var mean float64
	for i, mt := range ms {
		pts[i] = Point{PX: peaks[mt.Peak].PX, NM: mt.Line.NM}
		mean += pts[i].PX / float64(len(ms))
	}
	deg := 3
	switch {
	case len(pts) < 4:
		deg = 1
	case len(pts) < 6:
		deg = 2
	}
	c, err := polyFit(pts, deg, mean, 1, nil)
	if err != nil {
		return false
	}
	*m = mapping{p0: mean, c0: c[0], c1: c[1]}
	if deg >= 2 {
		m.c2 = c[2]
	}
	if deg == 3 {
		m.c3 = c[3]
	}
	return true
}

// plausible reports whether m is a dispersion a grating could give over
// [lo, hi]: monotonic, between 0.005 and 50 nm/px, and with the local
// dispersion changing by less than a factor 2 across the frame.
func (m mapping) plausible(lo, hi float64) bool {
	a, b := m.slope(lo), m.slope(hi)
	if a*b <= 0 {
		return false
	}
	a, b = math.Abs(a), math.Abs(b)
	if math.Min(a, b) < 0.005 || math.Max(a, b) > 50 {
		return false
	}
	r := a / b
	return r > 0.5 && r < 2
}

type hypo struct {
	peaks  []Peak
	byPos  []int
	refs   []Line
	hmax   float64
	lo, hi float64
	// score's scratch, reused from call to call (a hypo is scored by one
	// goroutine): which peaks are matched, and the matches.
	used    []bool
	matches []Match
}

type scored struct {
	score   float64
	matches []Match
	inRange float64 // total strength of lines expected within the frame
}

// keep returns s with its own copy of the matches (score's are scratch).
func (s scored) keep() scored {
	s.matches = slices.Clone(s.matches)
	return s
}

// score matches every reference line to its nearest peak under m within
// tol px and sums (0.5 + strength)·(0.5 + height/hmax) over the matches.
// The matches it returns are h's scratch, valid until the next call: a
// caller keeping them clones them (keep).
func (h *hypo) score(m mapping, tol float64, pins []Pin) scored {
	var s scored
	if len(h.used) != len(h.peaks) {
		h.used = make([]bool, len(h.peaks))
	}
	usedPeak := h.used
	clear(usedPeak)
	s.matches = h.matches[:0]
	for _, pin := range pins {
		i := h.nearestPeakPX(pin.PX)
		if i < 0 || math.Abs(m.at(h.peaks[i].PX)-pin.NM) > tol*math.Abs(m.slope(h.peaks[i].PX)) {
			return scored{score: -1}
		}
	}
	lamLo, lamHi := m.at(h.lo), m.at(h.hi)
	if lamLo > lamHi {
		lamLo, lamHi = lamHi, lamLo
	}
	for _, r := range h.refs {
		margin := tol * math.Abs(m.slope(h.lo))
		if r.NM < lamLo-margin || r.NM > lamHi+margin {
			continue
		}
		s.inRange += r.Strength
		best, bd := -1, math.Inf(1)
		for _, i := range h.byPos {
			if usedPeak[i] {
				continue
			}
			p := h.peaks[i].PX
			d := math.Abs(m.at(p)-r.NM) / math.Abs(m.slope(p))
			if d < bd {
				best, bd = i, d
			}
		}
		if best < 0 || bd > tol {
			continue
		}
		usedPeak[best] = true
		s.matches = append(s.matches, Match{Peak: best, Line: r})
		s.score += (0.5 + r.Strength) * (0.5 + h.peaks[best].Height/h.hmax) * (1 - 0.5*bd/tol)
	}
	h.matches = s.matches // (grown, for the next call)
	return s
}

// share is the normalised score used to compare lamps.
func (h *hypo) share(s scored) float64 {
	var found, explained, total float64
	for _, m := range s.matches {
		found += m.Line.Strength
		explained += h.peaks[m.Peak].Height
	}
	for _, p := range h.peaks {
		total += p.Height
	}
	if s.inRange == 0 || total == 0 {
		return 0
	}
	return math.Min(1, found/s.inRange) * explained / total
}

func (h *hypo) nearestPeakPX(px float64) int {
	best, bd := -1, math.Inf(1)
	for i, p := range h.peaks {
		if d := math.Abs(p.PX - px); d < bd {
			best, bd = i, d
		}
	}
	return best
}

// strongest returns the indices of the k largest values of key among n.
func strongest(n, k int, key func(int) float64) []int {
	idx := make([]int, n)
	for i := range idx {
		idx[i] = i
	}
	sort.SliceStable(idx, func(a, b int) bool { return key(idx[a]) > key(idx[b]) })
	if len(idx) > k {
		idx = idx[:k]
	}
	return idx
}

// comb calls f with every increasing k-subset of 0..n-1.
func comb(n, k int, f func([]int)) {
	c := make([]int, k)
	var rec func(start, depth int)
	rec = func(start, depth int) {
		if depth == k {
			f(c)
			return
		}
		for i := start; i <= n-(k-depth); i++ {
			c[depth] = i
			rec(i+1, depth+1)
		}
	}
	rec(0, 0)
}
