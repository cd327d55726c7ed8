package vernier

import (
	"cmp"
	"errors"
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"

	"gonum.org/v1/gonum/mat"

	"lineshot/calibrate"
)

// Options tunes Analyze. The zero value needs a green-line reading per
// observer to calibrate the grating.
type Options struct {
	// LinesPerMM is the grating's nominal ruling. It is used only where an
	// observer read no calibration line, and to say when the calibrated d
	// disagrees with it by more than 5 %.
	LinesPerMM float64
	// LeastCountArcmin is the vernier's least count; 0 means 1′ (a
	// 30-division vernier on a half-degree scale, REFERENCE-DATA.md
	// section 10). Each reading is taken as uncertain by one least count.
	LeastCountArcmin float64
	// CalibrationNM are the reference lines that fix d; nil means the
	// mercury green line, 546.0735 nm (NIST Handbook, BAL50).
	CalibrationNM []float64
	// Photo holds wavelengths measured objectively (lineshot batch) per
	// bench and reference wavelength, for the cross-check; may be nil.
	Photo map[string]map[float64]float64
}

// Line is one line as one observer measured it.
type Line struct {
	Bench, Observer, Lamp string
	Asked                 string  // the line as written
	Resolved              string  // how Asked was resolved, when not literally
	Name                  string  // reference line name
	RefNM                 float64 // reference air wavelength
	N                     int     // Balmer upper level, 0 otherwise
	Order                 int
	ThetaDeg, ThetaSigma  float64 // degrees
	Method                string  // "left-right" or "one side against zero"
	NM, SigmaNM           float64
	Z                     float64 // (NM − RefNM)/SigmaNM
	PhotoNM               float64 // objective measurement of the same bench, 0 if none
	PhotoZ                float64 // (NM − PhotoNM)/SigmaNM when PhotoNM is known
	Calibration           bool    // used to find d
	Flag                  *Diagnosis
	Rows                  []int
	sign                  float64 // sign of R − L, 0 if not both read
	mid                   float64 // (R + L)/2 − zero, degrees; NaN when not measured
}

// Diagnosis explains a line that lies more than 3σ off.
type Diagnosis struct {
	Kind        string // see the kinds below
	Explain     string
	Row         int     // the reading to correct (0 for kinds about a whole line)
	Was         string  // as recorded
	Corrected   string  // what the record should say
	CorrectedNM float64 // the wavelength the correction gives
}

// Diagnosis kinds, in order of preference on a tie.
const (
	KindNeighbour   = "neighbouring line"
	KindHalfDegree  = "half-degree mark missed"
	KindWholeDegree = "wrong whole degree"
	KindVernierEnd  = "vernier read from the wrong end"
	KindOrder       = "line from another order"
	KindVernierAB   = "wrong vernier of two"
	KindSides       = "left and right swapped"
	KindUnexplained = "unexplained"
)

// Observer is one observer's session.
type Observer struct {
	Bench, Name  string
	DNM, DSigma  float64 // grating spacing d, nm, and its 1σ
	DFromNominal bool
	Lines        []Line
	Rydberg      *calibrate.Rydberg
	RydbergNote  string
	Notes        []string
	// Error says why this observer's readings could not be checked (no
	// calibration line read, say); the rest of the fields are then empty.
	// One observer's gap does not stop the class's check.
	Error string `json:",omitempty"`
}

// Fine reports whether the session was checked and no line of it flagged.
func (o Observer) Fine() bool {
	if o.Error != "" {
		return false
	}
	for _, l := range o.Lines {
		if l.Flag != nil && l.Flag.Kind != KindSides {
			return false
		}
	}
	return true
}

// Analyze computes every observer's angles, d, wavelengths and R, flags
// lines more than 3σ from their reference and names the misreading that
// explains each. Observers come out sorted by bench and name. An observer
// whose readings cannot be checked comes out with Error set; Analyze
// fails only when no observer can be checked.
func Analyze(rs []Reading, opt Options) ([]Observer, error) {
	if len(rs) == 0 {
		return nil, errors.New("vernier: no readings")
	}
	lc := opt.LeastCountArcmin
	if lc == 0 {
		lc = 1
	}
	if !(lc > 0 && lc <= 30) {
		return nil, fmt.Errorf("vernier: least count %g′ outside (0, 30]", lc)
	}
	groups := map[[2]string][]Reading{}
	var keys [][2]string
	for _, r := range rs {
		k := [2]string{r.Bench, r.Observer}
		if _, ok := groups[k]; !ok {
			keys = append(keys, k)
		}
		groups[k] = append(groups[k], r)
	}
	sort.Slice(keys, func(i, j int) bool {
		if keys[i][0] != keys[j][0] {
			return keys[i][0] < keys[j][0]
		}
		return keys[i][1] < keys[j][1]
	})
	var out []Observer
	var first error
	checked := 0
	for _, k := range keys {
		o, err := analyzeObserver(groups[k], opt, lc/60)
		if err != nil {
			first = cmp.Or(first, fmt.Errorf("vernier: bench %s, observer %s: %w", k[0], k[1], err))
			out = append(out, Observer{Bench: k[0], Name: k[1], Error: err.Error()})
			continue
		}
		checked++
		out = append(out, o)
	}
	if checked == 0 {
		return nil, first
	}
	return out, nil
}

// session is one observer's readings resolved into lines, the form the
// diagnosis rewrites and recomputes.
type session struct {
	bench, name string
	zero        map[string][]Reading // by vernier
	lines       []*lineReadings
	opt         Options
	lcDeg       float64
	calNM       []float64
}

type lineReadings struct {
	lamp, asked, resolved string
	ref                   calibrate.Line
	lampLines             calibrate.Lamp
	order                 int
	reads                 []Reading // left and right, any vernier
}

func analyzeObserver(rs []Reading, opt Options, lcDeg float64) (Observer, error) {
	s := &session{bench: rs[0].Bench, name: rs[0].Observer, zero: map[string][]Reading{}, opt: opt, lcDeg: lcDeg, calNM: opt.CalibrationNM}
	if s.calNM == nil {
		s.calNM = []float64{546.0735}
	}
	byKey := map[string]*lineReadings{}
	for _, r := range rs {
		if r.Side == SideZero {
			s.zero[r.Vernier] = append(s.zero[r.Vernier], r)
			continue
		}
		ref, lamp, note, err := resolveLine(r.Lamp, r.Line)
		if err != nil {
			return Observer{}, fmt.Errorf("row %d: %v", r.Row, err)
		}
		key := fmt.Sprintf("%s|%g|%d", lamp.Name, ref.NM, r.Order)
		lr, ok := byKey[key]
		if !ok {
			lr = &lineReadings{lamp: r.Lamp, asked: r.Line, resolved: note, ref: ref, lampLines: lamp, order: r.Order}
			byKey[key] = lr
			s.lines = append(s.lines, lr)
		}
		lr.reads = append(lr.reads, r)
	}
	o, err := s.compute()
	if err != nil {
		return Observer{}, err
	}
	s.diagnose(&o)
	s.fitRydberg(&o)
	return o, nil
}

// theta returns a line's diffraction angle and its σ (degrees), the
// method, and the sign of R − L (0 when not both sides were read).
func (s *session) theta(lr *lineReadings) (th, sig float64, method string, sign, mid float64, err error) {
	sigR := s.lcDeg // one least count per reading
	byV := map[string][2][]float64{}
	for _, r := range lr.reads {
		v := byV[r.Vernier]
		if r.Side == SideLeft {
			v[0] = append(v[0], r.Deg)
		} else {
			v[1] = append(v[1], r.Deg)
		}
		byV[r.Vernier] = v
	}
	var ths, sigs, mids []float64
	for vern, v := range byV {
		switch {
		case len(v[0]) > 0 && len(v[1]) > 0:
			d := wrap(circMean(v[1]) - circMean(v[0]))
			ths = append(ths, math.Abs(d)/2)
			z := s.zero[vern]
			if len(z) == 0 {
				z = s.zero[""]
			}
			if len(z) > 0 {
				var zs []float64
				for _, r := range z {
					zs = append(zs, r.Deg)
				}
				mids = append(mids, wrap(circMean(v[0])+d/2-circMean(zs)))
			}
			sigs = append(sigs, sigR*math.Sqrt(1/float64(len(v[0]))+1/float64(len(v[1])))/2)
			if d >= 0 {
				sign += 1
			} else {
				sign -= 1
			}
			method = "left-right"
		default:
			z := s.zero[vern]
			if len(z) == 0 {
				z = s.zero[""]
			}
			if len(z) == 0 {
				return 0, 0, "", 0, 0, fmt.Errorf("line %s: one side read and no zero (straight-through) reading", lr.asked)
			}
			var zs []float64
			for _, r := range z {
				zs = append(zs, r.Deg)
			}
			side := v[0]
			if len(side) == 0 {
				side = v[1]
			}
			ths = append(ths, math.Abs(wrap(circMean(side)-circMean(zs))))
			sigs = append(sigs, sigR*math.Sqrt(1/float64(len(side))+1/float64(len(zs))))
			if method == "" {
				method = "one side against zero"
			}
		}
	}
	var sw, st float64
	for i := range ths {
		w := 1 / (sigs[i] * sigs[i])
		sw += w
		st += w * ths[i]
	}
	if sign > 0 {
		sign = 1
	} else if sign < 0 {
		sign = -1
	}
	mid = math.NaN()
	if len(mids) > 0 {
		mid = 0
		for _, m := range mids {
			mid += m / float64(len(mids))
		}
	}
	return st / sw, 1 / math.Sqrt(sw), method, sign, mid, nil
}

// compute turns the session's readings into d, wavelengths and z-scores.
func (s *session) compute() (Observer, error) {
	o := Observer{Bench: s.bench, Name: s.name}
	type th struct{ v, sig float64 }
	thetas := make([]th, len(s.lines))
	for i, lr := range s.lines {
		v, sig, method, sign, mid, err := s.theta(lr)
		if err != nil {
			return o, err
		}
		thetas[i] = th{v, sig}
		var rows []int
		for _, r := range lr.reads {
			rows = append(rows, r.Row)
		}
		o.Lines = append(o.Lines, Line{Bench: s.bench, Observer: s.name, Lamp: lr.lampLines.Name, Asked: lr.asked, Resolved: lr.resolved,
			Name: lr.ref.Name, RefNM: lr.ref.NM, N: lr.ref.N, Order: lr.order, ThetaDeg: v, ThetaSigma: sig, Method: method, Rows: rows, sign: sign, mid: mid})
	}
	// d from the calibration lines: d = mλ / sin θ, σ_d = d·cot θ·σ_θ.
	var sw, sd float64
	for i, l := range o.Lines {
		if !s.isCal(l.RefNM) {
			continue
		}
		t := thetas[i].v * math.Pi / 180
		if math.Sin(t) <= 0 {
			continue
		}
		d := float64(l.Order) * l.RefNM / math.Sin(t)
		sig := d / math.Tan(t) * thetas[i].sig * math.Pi / 180
		w := 1 / (sig * sig)
		sw += w
		sd += w * d
		o.Lines[i].Calibration = true
	}
	switch {
	case sw > 0:
		o.DNM, o.DSigma = sd/sw, 1/math.Sqrt(sw)
		if s.opt.LinesPerMM > 0 {
			nom := 1e6 / s.opt.LinesPerMM
			if math.Abs(o.DNM/nom-1) > 0.05 {
				o.Notes = append(o.Notes, fmt.Sprintf("d = %.1f nm from the calibration line differs from the nominal %.1f nm (%.0f lines/mm) by %.1f %%: wrong grating, or the calibration line misread", o.DNM, nom, s.opt.LinesPerMM, 100*(o.DNM/nom-1)))
			}
		}
	case s.opt.LinesPerMM > 0:
		o.DNM, o.DFromNominal = 1e6/s.opt.LinesPerMM, true
		o.Notes = append(o.Notes, "no calibration line read: d is the grating's nominal value, taken as exact")
	default:
		return o, errors.New("no calibration line (mercury green by default) was read and no --lines-per-mm given: d is unknown")
	}
	for i := range o.Lines {
		l := &o.Lines[i]
		t, st := thetas[i].v*math.Pi/180, thetas[i].sig*math.Pi/180
		m := float64(l.Order)
		l.NM = o.DNM * math.Sin(t) / m
		a := o.DNM * math.Cos(t) * st / m
		b := math.Sin(t) * o.DSigma / m
		l.SigmaNM = math.Hypot(a, b)
		if l.Calibration && len(s.calNM) == 1 {
			l.SigmaNM = math.Max(l.SigmaNM, a) // the line defines d: its own scatter is its reading error
		}
		l.Z = (l.NM - l.RefNM) / l.SigmaNM
		if p, ok := s.opt.Photo[s.bench]; ok && p[l.RefNM] > 0 {
			l.PhotoNM = p[l.RefNM]
			l.PhotoZ = (l.NM - l.PhotoNM) / l.SigmaNM
		}
	}
	return o, nil
}

func (s *session) isCal(nm float64) bool {
	for _, c := range s.calNM {
		if math.Abs(c-nm) < 1e-3 {
			return true
		}
	}
	return false
}

// chi2 sums z² over the lines that are not calibration lines (a single
// calibration line has z = 0 by construction), plus the symmetry of each
// line's two sides about the zero reading: (R + L)/2 should fall on the
// straight-through position, up to an offset common to all lines (the
// grating not quite square), with σ two least counts. Symmetry is what
// tells which of the two sides was misread.
func (s *session) chi2(o Observer) float64 {
	var sum float64
	var mids []float64
	for _, l := range o.Lines {
		if !l.Calibration {
			sum += l.Z * l.Z
		}
		if !math.IsNaN(l.mid) {
			mids = append(mids, l.mid)
		}
	}
	if len(mids) >= 3 {
		sort.Float64s(mids)
		med := mids[len(mids)/2]
		sm := 2 * s.lcDeg
		for _, m := range mids {
			r := (m - med) / sm
			sum += r * r
		}
	}
	return sum
}

// hypothesis is one candidate misreading: a change to the session.
type hypothesis struct {
	kind    string
	row     int
	apply   func(s *session) (undo func())
	explain string
	was     string
	fixed   string
	line    int // index of the line it concerns
}

// diagnose flags lines more than 3σ off and, for up to three of them, finds
// the single change to the record that explains the most.
func (s *session) diagnose(o *Observer) {
	// Sides: the sign of R − L should be the same for every line.
	var pos, neg int
	for _, l := range o.Lines {
		if l.sign > 0 {
			pos++
		} else if l.sign < 0 {
			neg++
		}
	}
	for i := range o.Lines {
		l := &o.Lines[i]
		if (l.sign < 0 && pos > neg) || (l.sign > 0 && neg > pos) {
			l.Flag = &Diagnosis{Kind: KindSides, Explain: "the left and right readings of this line are the other way round from the observer's other lines: harmless for θ = |R − L|/2, but check the record"}
		}
	}
	// Search on a working copy of the record; o keeps the values as
	// recorded, the flags carry the corrections.
	cur := *o
	flagged := map[int]bool{}
	for round := 0; round < 3; round++ {
		worst := -1
		for i, l := range cur.Lines {
			if math.Abs(l.Z) > 3 && !flagged[i] && (worst < 0 || math.Abs(l.Z) > math.Abs(cur.Lines[worst].Z)) {
				worst = i
			}
		}
		if worst < 0 {
			return
		}
		flagged[worst] = true
		base := s.chi2(cur)
		var best *hypothesis
		var bestO Observer
		bestGain := 9.0 // a correction must remove more than 3σ² of χ²
		for _, h := range s.hypotheses() {
			undo := h.apply(s)
			no, err := s.compute()
			undo()
			if err != nil || math.Abs(no.Lines[worst].Z) > 3 || (h.line >= 0 && math.Abs(no.Lines[h.line].Z) > 3) {
				continue
			}
			if gain := base - s.chi2(no); gain > bestGain+1e-9 {
				hh := h
				best, bestGain, bestO = &hh, gain, no
			}
		}
		if best == nil {
			l := cur.Lines[worst]
			o.Lines[worst].Flag = &Diagnosis{Kind: KindUnexplained, Explain: fmt.Sprintf("%.3f nm is %.1fσ from %s (%.4f nm) and no single usual misreading explains it: re-measure", l.NM, l.Z, l.Name, l.RefNM)}
			continue
		}
		target := worst
		if best.line >= 0 {
			target = best.line
		}
		o.Lines[target].Flag = &Diagnosis{Kind: best.kind, Explain: best.explain, Row: best.row, Was: best.was, Corrected: best.fixed, CorrectedNM: bestO.Lines[target].NM}
		if best.kind == KindNeighbour {
			o.Lines[target].Flag.CorrectedNM = cur.Lines[target].NM // the wavelength stands; its name changes
		}
		if target != worst {
			// The misread line moved d and dragged this one off with it.
			o.Lines[worst].Flag = &Diagnosis{Kind: best.kind, Explain: fmt.Sprintf("follows from row %d (%s): with that corrected this line gives %.3f nm", best.row, best.kind, bestO.Lines[worst].NM),
				Row: best.row, Was: best.was, Corrected: best.fixed, CorrectedNM: bestO.Lines[worst].NM}
		}
		flagged[target] = true
		// Lines the correction brings back within 3σ were dragged by it too.
		for i := range bestO.Lines {
			if !flagged[i] && math.Abs(cur.Lines[i].Z) > 3 && math.Abs(bestO.Lines[i].Z) <= 3 {
				o.Lines[i].Flag = &Diagnosis{Kind: best.kind, Explain: fmt.Sprintf("follows from row %d (%s): with that corrected this line gives %.3f nm", best.row, best.kind, bestO.Lines[i].NM),
					Row: best.row, Was: best.was, Corrected: best.fixed, CorrectedNM: bestO.Lines[i].NM}
				flagged[i] = true
			}
		}
		best.apply(s)
		cur = bestO
	}
}

// hypotheses lists every single change of the usual kinds.
func (s *session) hypotheses() []hypothesis {
	var hs []hypothesis
	for li, lr := range s.lines {
		for ri := range lr.reads {
			r := &lr.reads[ri]
			orig := r.Deg
			add := func(kind string, nd float64, explain string) {
				nd = math.Mod(nd+360, 360)
				hs = append(hs, hypothesis{kind: kind, row: r.Row, line: -1, was: r.Text, fixed: FormatAngle(nd),
					explain: fmt.Sprintf("row %d (%s, %s side): %s; the reading %s should be %s", r.Row, lr.asked, r.Side, explain, r.Text, FormatAngle(nd)),
					apply:   func(*session) func() { r.Deg = nd; return func() { r.Deg = orig } }})
			}
			add(KindHalfDegree, orig+0.5, "30′ short, the half-degree mark passed unnoticed")
			add(KindHalfDegree, orig-0.5, "30′ over, a half-degree mark counted that was not passed")
			add(KindWholeDegree, orig+1, "1° short, the wrong whole degree")
			add(KindWholeDegree, orig-1, "1° over, the wrong whole degree")
			// A 30-division vernier read from its far end gives 30 − v
			// divisions instead of v.
			half := 0.5
			base := math.Floor(orig/half+1e-9) * half
			v := orig - base
			if v > s.lcDeg/2 {
				add(KindVernierEnd, base+half-v, "the vernier was read from the wrong end")
			}
			if r.Vernier != "" {
				add(KindVernierAB, orig+180, "taken from the other vernier, 180° away")
				add(KindVernierAB, orig-180, "taken from the other vernier, 180° away")
			}
		}
		li := li
		lr := lr
		for _, m := range []int{lr.order + 1, lr.order - 1} {
			if m < 1 {
				continue
			}
			old := lr.order
			hs = append(hs, hypothesis{kind: KindOrder, line: li, was: fmt.Sprintf("order %d", old), fixed: fmt.Sprintf("order %d", m),
				explain: fmt.Sprintf("%s: this is the order-%d image of the line, not order %d", lr.asked, m, old),
				apply:   func(*session) func() { lr.order = m; return func() { lr.order = old } }})
		}
		for _, other := range lr.lampLines.Lines {
			if other.NM == lr.ref.NM || s.isCal(lr.ref.NM) {
				continue
			}
			old := lr.ref
			o := other
			hs = append(hs, hypothesis{kind: KindNeighbour, line: li, was: old.Name, fixed: o.Name,
				explain: fmt.Sprintf("%s: the telescope was on %s (%.4f nm), not on %s", lr.asked, o.Name, o.NM, old.Name),
				apply:   func(*session) func() { lr.ref = o; return func() { lr.ref = old } }})
		}
	}
	for v, zs := range s.zero {
		for zi := range zs {
			r := &s.zero[v][zi]
			orig := r.Deg
			for _, c := range []struct {
				kind string
				d    float64
			}{{KindHalfDegree, 0.5}, {KindHalfDegree, -0.5}, {KindWholeDegree, 1}, {KindWholeDegree, -1}} {
				nd := math.Mod(orig+c.d+360, 360)
				hs = append(hs, hypothesis{kind: c.kind, row: r.Row, line: -1, was: r.Text, fixed: FormatAngle(nd),
					explain: fmt.Sprintf("row %d (straight-through reading): %s should be %s", r.Row, r.Text, FormatAngle(nd)),
					apply:   func(*session) func() { r.Deg = nd; return func() { r.Deg = orig } }})
			}
		}
	}
	// Prefer the simplest kind on equal gain: stable order.
	rank := map[string]int{KindNeighbour: 0, KindHalfDegree: 1, KindWholeDegree: 2, KindVernierEnd: 3, KindOrder: 4, KindVernierAB: 5}
	sort.SliceStable(hs, func(i, j int) bool { return rank[hs[i].kind] < rank[hs[j].kind] })
	return hs
}

// fitRydberg fits R to the observer's unflagged Balmer lines with the
// covariance the shared d puts between them.
func (s *session) fitRydberg(o *Observer) {
	var in []calibrate.Balmer
	var idx []int
	for i, l := range o.Lines {
		if l.N >= 3 && (l.Flag == nil || l.Flag.Kind == KindSides) {
			in = append(in, calibrate.Balmer{N: l.N, AirNM: l.NM, SigmaNM: l.SigmaNM})
			idx = append(idx, i)
		}
	}
	if len(in) < 2 {
		if len(in) > 0 || hasBalmer(o.Lines) {
			o.RydbergNote = fmt.Sprintf("%d usable Balmer line(s): no Rydberg fit", len(in))
		}
		return
	}
	cov := mat.NewSymDense(len(in), nil)
	for a, i := range idx {
		for b, j := range idx {
			if b < a {
				continue
			}
			li, lj := o.Lines[i], o.Lines[j]
			si := math.Sin(li.ThetaDeg*math.Pi/180) / float64(li.Order)
			sj := math.Sin(lj.ThetaDeg*math.Pi/180) / float64(lj.Order)
			v := si * sj * o.DSigma * o.DSigma
			if a == b {
				v = li.SigmaNM * li.SigmaNM
			}
			cov.SetSym(a, b, v)
		}
	}
	r, err := calibrate.FitRydberg(in, cov)
	if err != nil {
		o.RydbergNote = "Rydberg fit failed: " + err.Error()
		return
	}
	o.Rydberg = &r
	if n := len(idx); n < countBalmer(o.Lines) {
		o.RydbergNote = fmt.Sprintf("from %d of %d Balmer lines (flagged lines left out)", n, countBalmer(o.Lines))
	}
}

func hasBalmer(ls []Line) bool { return countBalmer(ls) > 0 }

func countBalmer(ls []Line) int {
	n := 0
	for _, l := range ls {
		if l.N >= 3 {
			n++
		}
	}
	return n
}

// wrap returns a in (−180, 180].
func wrap(a float64) float64 {
	a = math.Mod(a, 360)
	if a > 180 {
		a -= 360
	} else if a <= -180 {
		a += 360
	}
	return a
}

// circMean averages angles that may straddle 0°/360°.
func circMean(v []float64) float64 {
	ref := v[0]
	var s float64
	for _, x := range v {
		s += wrap(x - ref)
	}
	return math.Mod(ref+s/float64(len(v))+360, 360)
}

// lineNames maps the plain names people write to reference wavelengths,
// per lamp (colours as they look in a spectrometer; common practice).
var lineNames = map[string]map[string]float64{
	"mercury": {"violet": 404.6563, "violet1": 404.6563, "violet2": 407.7831, "deepviolet": 404.6563, "blue": 435.8328, "indigo": 435.8328,
		"bluegreen": 491.6068, "cyan": 491.6068, "green": 546.0735, "yellow": 576.9598, "yellow1": 576.9598, "yellow2": 579.0663},
	"hydrogen": {"red": 656.2795, "halpha": 656.2795, "hα": 656.2795, "alpha": 656.2795, "bluegreen": 486.1325, "cyan": 486.1325,
		"hbeta": 486.1325, "hβ": 486.1325, "beta": 486.1325, "violet": 434.0463, "blue": 434.0463, "hgamma": 434.0463, "hγ": 434.0463,
		"gamma": 434.0463, "hdelta": 410.1735, "hδ": 410.1735, "delta": 410.1735, "deepviolet": 410.1735},
	"helium": {"yellow": 587.5621, "red": 667.8151, "green": 501.56783, "blue": 447.14802, "violet": 388.8648, "deepred": 706.519},
	"sodium": {"yellow": 588.995095, "d2": 588.995095, "d1": 589.592424},
}

// resolveLine finds the reference line a record names: a wavelength
// (nearest line of the lamp within 3 nm) or a plain name. The note says how
// it was resolved when that was not literal.
func resolveLine(lampName, text string) (calibrate.Line, calibrate.Lamp, string, error) {
	lamp, err := calibrate.LampByName(lampName)
	if err != nil {
		return calibrate.Line{}, calibrate.Lamp{}, "", err
	}
	t := strings.TrimSpace(text)
	if v, err := strconv.ParseFloat(strings.TrimSuffix(strings.TrimSpace(strings.TrimSuffix(t, "nm")), " "), 64); err == nil {
		i, d := lamp.Nearest(v)
		if i < 0 || d > 3 {
			return calibrate.Line{}, lamp, "", fmt.Errorf("no %s line within 3 nm of %s", lamp.Name, t)
		}
		note := ""
		if d > 0.005 {
			note = fmt.Sprintf("%s → %s (%.4f nm), the nearest %s line", t, lamp.Lines[i].Name, lamp.Lines[i].NM, lamp.Name)
		}
		return lamp.Lines[i], lamp, note, nil
	}
	key := strings.NewReplacer(" ", "", "-", "", "_", "").Replace(strings.ToLower(t))
	for _, l := range lamp.Lines {
		if strings.EqualFold(strings.ReplaceAll(l.Name, " ", ""), key) {
			return l, lamp, "", nil
		}
	}
	if nm, ok := lineNames[lamp.Name][key]; ok {
		i, _ := lamp.Nearest(nm)
		return lamp.Lines[i], lamp, fmt.Sprintf("%q → %s (%.4f nm)", t, lamp.Lines[i].Name, lamp.Lines[i].NM), nil
	}
	return calibrate.Line{}, lamp, "", fmt.Errorf("line %q is neither a wavelength nor a name known for %s", t, lamp.Name)
}
