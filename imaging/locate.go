package imaging

import (
	"errors"
	"image"
	"math"
	"sort"
	"sync"

	"gocv.io/x/gocv"

	"lineshot/peaks"
)

// plane is a single-channel image of linear intensity.
type plane struct {
	w, h int
	pix  []float32
}

func (p plane) at(x, y int) float32 { return p.pix[y*p.w+x] }

// point is a bright pixel: position and weight above the background.
type point struct{ x, y, w float64 }

// levels returns the median and the robust σ (1.4826·MAD) of p, from at
// most about 20 000 evenly spread samples, and the maximum.
func levels(p plane) (med, sigma, peak float64) {
	var top float32
	for _, v := range p.pix {
		if v > top {
			top = v
		}
	}
	med, sigma = background(p)
	return med, sigma, float64(top)
}

// background is levels without the peak: the median and robust σ of about
// 20 000 evenly spaced samples.
func background(p plane) (med, sigma float64) {
	b := backgroundSamples(p)
	defer scratch.Put(b)
	return medMAD(*b)
}

// backgroundLevel is background's median alone (the σ is a second
// selection, not needed where the region's level is subtracted).
func backgroundLevel(p plane) float64 {
	b := backgroundSamples(p)
	defer scratch.Put(b)
	return peaks.MedianInPlace(*b)
}

// backgroundSamples borrows a scratch slice holding about 20 000 evenly
// spaced samples of p.
func backgroundSamples(p plane) *[]float64 {
	step := max(1, len(p.pix)/20000)
	b := scratch.borrow(len(p.pix)/step + 1)
	s := *b
	for i := 0; i < len(p.pix); i += step {
		s = append(s, float64(p.pix[i]))
	}
	*b = s
	return b
}

// scratch lends float64 slices for a photo's temporary sample sets (the
// medians of about 20 000 samples taken several times a photo, flatten's
// grid): a third of what each photo of a batch left for Go's collector.
// scratch32 lends the float32 ones (the samples beside the band that
// straighten keeps per column).
var (
	scratch   slicePool[float64]
	scratch32 slicePool[float32]
)

// slicePool lends slices of T, kept between photos by a sync.Pool (which
// drops what it holds when the collector runs, so the lending only ever
// saves work).
type slicePool[T any] struct{ p sync.Pool }

// borrow returns a slice of length 0 and capacity at least n, its
// contents whatever the last borrower left, to be given back with Put once
// nothing refers to it.
func (sp *slicePool[T]) borrow(n int) *[]T {
	b, _ := sp.p.Get().(*[]T)
	if b == nil {
		b = new([]T)
	}
	if cap(*b) < n {
		*b = make([]T, 0, n)
	}
	*b = (*b)[:0]
	return b
}

// Put gives b back.
func (sp *slicePool[T]) Put(b *[]T) { sp.p.Put(b) }

// medMAD returns the median of s and the robust σ 1.4826·MAD about it,
// reordering and overwriting s.
func medMAD(s []float64) (med, sigma float64) {
	med = peaks.MedianInPlace(s)
	for i := range s {
		s[i] = math.Abs(s[i] - med)
	}
	return med, 1.4826 * peaks.MedianInPlace(s)
}

// brightPoints returns the pixels of p brighter than thr, weighted by their
// excess over bg.
func brightPoints(p plane, bg, thr float64) []point {
	var pts []point
	for y := 0; y < p.h; y++ {
		row := p.pix[y*p.w : (y+1)*p.w]
		for x, v := range row {
			if float64(v) > thr {
				pts = append(pts, point{float64(x), float64(y), float64(v) - bg})
			}
		}
	}
	return pts
}

// principalAngle returns the direction of the weighted principal axis of
// the points, degrees in (−90, 90], measured from +x towards +y.
func principalAngle(pts []point) float64 {
	var sw, sx, sy float64
	for _, p := range pts {
		sw += p.w
		sx += p.w * p.x
		sy += p.w * p.y
	}
	mx, my := sx/sw, sy/sw
	var sxx, syy, sxy float64
	for _, p := range pts {
		dx, dy := p.x-mx, p.y-my
		sxx += p.w * dx * dx
		syy += p.w * dy * dy
		sxy += p.w * dx * dy
	}
	a := 0.5 * math.Atan2(2*sxy, sxx-syy) * 180 / math.Pi
	if a <= -90 {
		a += 180
	}
	return a
}

// bandEdges finds the band in a cross-profile prof (index = row offset
// from v0): the half-maximum crossings either side of its maximum,
// interpolated linearly. It returns the centre and half-height in the
// profile's index units, and false when there is no clear maximum.
//
// The band searches walk the smoothed profile (walkSmoothed); the
// per-column centres of the bow fit walk the raw one, as before: walked
// smoothed, their finer centres made a 0.34 px bow of a 12 MP band
// (half-height 151 px) count, and the band was straightened a second time
// to follow it, 19 ms and 11 MB more for a measurement of 50 ms, to no
// effect a line's position could show.
func bandEdges(prof []float64, walkSmoothed bool) (center, half float64, ok bool) {
	if len(prof) < 3 {
		return 0, 0, false
	}
	// Smooth lightly so a noisy top does not split the band.
	sm := make([]float64, len(prof))
	for i := range prof {
		var s, n float64
		for j := max(0, i-2); j <= min(len(prof)-1, i+2); j++ {
			s += prof[j]
			n++
		}
		sm[i] = s / n
	}
	imax := 0
	for i, v := range sm {
		if v > sm[imax] {
			imax = i
		}
	}
	if !(sm[imax] > 0) {
		return 0, 0, false // nothing stands above the background (or no number at all)
	}
	// Plateau level: the median of the samples above 70% of the maximum
	// (the slit image is flat-topped); the edges are where the profile
	// crosses half of it.
	var top []float64
	for _, v := range sm {
		if v > 0.7*sm[imax] {
			top = append(top, v)
		}
	}
	sort.Float64s(top)
	hm := top[len(top)/2] / 2
	if !(hm > 0) {
		return 0, 0, false
	}
	// With walkSmoothed the crossings are walked on the smoothed profile
	// too: on the raw one a faint band's plateau (sharp lines, a dim lamp:
	// bins scattered by a third of its level) ended at its first dip below
	// half, and a simulated photo's band came out 4 px high for 54.
	// sm[imax] > hm (hm is at most half of it), so the edges are always in
	// order. The 5-bin average moves neither crossing of an edge symmetric
	// about its half-way point; it widens a band only a few bins high.
	w := sm
	if !walkSmoothed {
		if !(prof[imax] > hm) {
			// A smoothed maximum on a raw sample below half gave edges
			// outside each other, a negative half-height, and crossBands
			// looped for ever on a damaged photo.
			return 0, 0, false
		}
		w = prof
	}
	l := imax
	for l > 0 && w[l-1] > hm {
		l--
	}
	r := imax
	for r < len(w)-1 && w[r+1] > hm {
		r++
	}
	if l == 0 || r == len(w)-1 {
		return 0, 0, false // the band runs off the searched rows
	}
	le := float64(l-1) + (hm-w[l-1])/(w[l]-w[l-1])
	re := float64(r) + (w[r]-hm)/(w[r]-w[r+1])
	return (le + re) / 2, (re - le) / 2, true
}

// chord returns the range of u for which the point u·(c, s) + v·(−s, c)
// lies inside [0, w−1]×[0, h−1], and false when the line misses the frame.
func chord(w, h int, deg, v float64) (u0, u1 float64, ok bool) {
	s, c := math.Sincos(deg * math.Pi / 180)
	lo, hi := math.Inf(-1), math.Inf(1)
	// x = u c − v s ∈ [0, w−1]; y = u s + v c ∈ [0, h−1].
	clip := func(a, b, lim float64) bool { // a·u + b ∈ [0, lim]
		if math.Abs(a) < 1e-12 {
			return b >= 0 && b <= lim
		}
		t0, t1 := (0-b)/a, (lim-b)/a
		if t0 > t1 {
			t0, t1 = t1, t0
		}
		lo, hi = math.Max(lo, t0), math.Min(hi, t1)
		return true
	}
	if !clip(c, -v*s, float64(w-1)) || !clip(s, v*c, float64(h-1)) || hi <= lo {
		return 0, 0, false
	}
	return lo, hi, true
}

// flatten subtracts a smooth background from p in place: a quadratic
// surface in x and y fitted by least squares to the pixels that are not
// bright (iteratively, dropping those more than 3σ from the surface), then
// adds back the surface's median so that levels still sees the frame's
// background level. Room light gives photos a slope or a bowl across the
// frame; left in, its bright side outweighs a faint band when the band is
// looked for. Lines themselves are untouched (the fit excludes them);
// straighten takes its own per-column background beside the band. A
// surface flatter than the noise is left in place (most photos).
// It returns the surface's range over the frame, in p's units; and, with
// unchanged when it left p as it was, p's median and robust σ as
// background gives them, measured on the way (levels need not again).
// surf is the surface fitted (subtracted or not; zero when none could be).
func flatten(p plane, workers int) (rng, med, sigma float64, unchanged bool, surf roomLight) {
	if p.w < 8 || p.h < 8 {
		return 0, 0, 0, false, roomLight{}
	}
	// About 10 000 samples on a grid are plenty for six coefficients.
	step := max(1, int(math.Sqrt(float64(p.w*p.h)/10000)))
	sx, sy := 2/float64(p.w-1), 2/float64(p.h-1)
	n := ((p.w + step - 1) / step) * ((p.h + step - 1) / step)
	bx, by, bv, br := scratch.borrow(n), scratch.borrow(n), scratch.borrow(n), scratch.borrow(n)
	defer func() { scratch.Put(bx); scratch.Put(by); scratch.Put(bv); scratch.Put(br) }()
	xs, ys, vs := *bx, *by, *bv
	for y := 0; y < p.h; y += step {
		for x := 0; x < p.w; x += step {
			xs, ys, vs = append(xs, float64(x)*sx-1), append(ys, float64(y)*sy-1), append(vs, float64(p.at(x, y)))
		}
	}
	surface := func(c [6]float64, u, v float64) float64 {
		return c[0] + u*(c[1]+c[3]*u+c[4]*v) + v*(c[2]+c[5]*v)
	}
	med, sigma = background(p)
	var c [6]float64
	c[0] = med
	cut := 5 * sigma
	res := (*br)[:len(vs)] // every element written before it is read
	for iter := 0; iter < 4; iter++ {
		var ata [6][6]float64
		var atb [6]float64
		for i, v := range vs {
			r := v - surface(c, xs[i], ys[i])
			res[i] = math.Abs(r)
			if cut > 0 && res[i] > cut {
				continue
			}
			// The upper triangle of Σ b·bᵀ and Σ b·v for the basis
			// b = (1, u, w, u², uw, w²), written out (the loops over j and
			// k were half of flatten's time; the sums are the same).
			u, w := xs[i], ys[i]
			uu, uw, ww := u*u, u*w, w*w
			atb[0] += v
			atb[1] += u * v
			atb[2] += w * v
			atb[3] += uu * v
			atb[4] += uw * v
			atb[5] += ww * v
			ata[0][0]++
			ata[0][1] += u
			ata[0][2] += w
			ata[0][3] += uu
			ata[0][4] += uw
			ata[0][5] += ww
			ata[1][1] += u * u
			ata[1][2] += u * w
			ata[1][3] += u * uu
			ata[1][4] += u * uw
			ata[1][5] += u * ww
			ata[2][2] += w * w
			ata[2][3] += w * uu
			ata[2][4] += w * uw
			ata[2][5] += w * ww
			ata[3][3] += uu * uu
			ata[3][4] += uu * uw
			ata[3][5] += uu * ww
			ata[4][4] += uw * uw
			ata[4][5] += uw * ww
			ata[5][5] += ww * ww
		}
		for j := 0; j < 6; j++ {
			for k := 0; k < j; k++ {
				ata[j][k] = ata[k][j]
			}
		}
		rows := make([][]float64, 6)
		for j := range rows {
			rows[j] = ata[j][:]
		}
		nc, ok := solveSmall(rows, atb[:])
		if !ok {
			return 0, med, sigma, true, roomLight{}
		}
		copy(c[:], nc)
		if iter > 0 {
			cut = 3 * 1.4826 * peaks.MedianInPlace(res)
		}
	}
	// The surface's range and median level over the grid.
	lo, hi := math.Inf(1), math.Inf(-1)
	for i := range vs {
		res[i] = surface(c, xs[i], ys[i])
		lo, hi = min(lo, res[i]), max(hi, res[i])
	}
	surf = roomLight{c: c, level: peaks.MedianInPlace(res), w: p.w, h: p.h}
	if rng = hi - lo; rng < sigma {
		return rng, med, sigma, true, surf
	}
	surf.sub(p, 0, 0, 1, workers)
	return rng, 0, 0, false, surf
}

// roomLight is a smooth background surface flatten fitted to a w×h plane:
// a quadratic in u, v ∈ [−1, 1] across the plane, less its median level.
type roomLight struct {
	c     [6]float64
	level float64
	w, h  int
}

// sub subtracts the surface from p, whose pixel (x, y) lies at (gx0 +
// x·step, gy0 + y·step) on the plane it was fitted to (p: that plane
// itself, 0, 0, 1; or rows of the same frame at another reduction), row by
// row (rows side by side): along a row the surface is a quadratic in u.
func (l roomLight) sub(p plane, gx0, gy0, step float64, workers int) {
	if l.w < 2 || l.h < 2 {
		return
	}
	c := l.c
	sx, sy := 2/float64(l.w-1), 2/float64(l.h-1)
	inParts(p.h, workers, 64, func(y0, y1 int) {
		for y := y0; y < y1; y++ {
			v := (gy0+float64(y)*step)*sy - 1
			a0 := c[0] + c[2]*v + c[5]*v*v - l.level
			a1 := c[1] + c[4]*v
			row := p.pix[y*p.w : (y+1)*p.w]
			for x := range row {
				u := (gx0+float64(x)*step)*sx - 1
				row[x] -= float32(a0 + u*(a1+c[3]*u))
			}
		}
	})
}

// solveSmall solves the small square system a·x = b (normal equations of
// the few-parameter fits here) by Gaussian elimination with partial
// pivoting (too small a system to bring in a linear-algebra package for);
// false when a is singular. a and b are left unchanged.
func solveSmall(a [][]float64, b []float64) ([]float64, bool) {
	n := len(b)
	m := make([][]float64, n)
	for i := range m {
		m[i] = append(append(make([]float64, 0, n+1), a[i]...), b[i])
	}
	for col := 0; col < n; col++ {
		piv := col
		for r := col + 1; r < n; r++ {
			if math.Abs(m[r][col]) > math.Abs(m[piv][col]) {
				piv = r
			}
		}
		if math.Abs(m[piv][col]) < 1e-12 {
			return nil, false
		}
		m[col], m[piv] = m[piv], m[col]
		for r := col + 1; r < n; r++ {
			f := m[r][col] / m[col][col]
			for k := col; k <= n; k++ {
				m[r][k] -= f * m[col][k]
			}
		}
	}
	x := make([]float64, n)
	for r := n - 1; r >= 0; r-- {
		s := m[r][n]
		for k := r + 1; k < n; k++ {
			s -= m[r][k] * x[k]
		}
		x[r] = s / m[r][r]
	}
	return x, true
}

// crossBands finds the band (or with all, every band) across the
// dispersion direction ang on the reduced plane p: the profile across
// the direction, summed along it, holds one flat-topped bump per band.
// Bands come ordered across the frame; each gets the reach halfway to
// its neighbours' edges. A further band counts when its plateau is at
// least a tenth of the strongest band's (dimmer bumps are the strongest
// band's wings or room light) and its height within a factor 3 of it.
func crossBands(p plane, ang, bg, sx, sy float64, all bool, workers int) []bandGuess {
	sn, cs := math.Sincos(ang * math.Pi / 180)
	vmin, vmax := math.Inf(1), math.Inf(-1)
	for _, c := range [][2]float64{{0, 0}, {float64(p.w), 0}, {0, float64(p.h)}, {float64(p.w), float64(p.h)}} {
		v := -(c[0]*sx)*sn + (c[1]*sy)*cs
		vmin, vmax = math.Min(vmin, v), math.Max(vmax, v)
	}
	step := math.Max(sx, sy)
	nb := int((vmax-vmin)/step) + 2
	// The rows go in eight fixed chunks, side by side, each into its own
	// bins, summed in chunk order: the same result for any number of
	// workers.
	const chunks = 8
	var parts [chunks][2][]float64
	inChunks(p.h, chunks, workers, func(c, y0, y1 int) {
		prof, count := make([]float64, nb), make([]float64, nb)
		for y := y0; y < y1; y++ {
			// v along the row, stepped from its first pixel.
			fy := (float64(y)+0.5)*sy - 0.5
			v, dv := -(0.5*sx-0.5)*sn+fy*cs, -sx*sn
			for _, val := range p.pix[y*p.w : (y+1)*p.w] {
				k := int((v - vmin) / step)
				prof[k] += float64(val) - bg
				count[k]++
				v += dv
			}
		}
		parts[c] = [2][]float64{prof, count}
	})
	prof, count := make([]float64, nb), make([]float64, nb)
	for _, pc := range parts {
		for k := range prof {
			prof[k] += pc[0][k]
			count[k] += pc[1][k]
		}
	}
	// The frame's median (bg) sits a little below the background's mean
	// where the noise is skewed (shot noise, JPEG): a small excess in
	// every pixel that, summed along the band, lifted the whole profile,
	// and the part of it left beside a band off the centre passed for a
	// second band. Take the typical bin's mean excess off every bin.
	var means []float64
	for k, n := range count {
		if n > 0 {
			means = append(means, prof[k]/n)
		}
	}
	if off := peaks.MedianInPlace(means); len(means) > 0 {
		for k, n := range count {
			prof[k] -= off * n
		}
	}
	type bump struct{ c, h, level float64 }
	var found []bump
	work := append([]float64(nil), prof...)
	// (Every round blanks at least the bin it found, now that bandEdges
	// keeps its edges in order; the cap on rounds and the check for edges
	// that are not numbers guard the blanking: edges outside each other
	// from a damaged photo once blanked nothing and looped for ever.)
	for round := 0; len(found) < 8 && round < len(work); round++ {
		c, h, ok := bandEdges(work, true)
		if !ok || math.IsNaN(c) || math.IsInf(c, 0) || math.IsNaN(h) || math.IsInf(h, 0) {
			break
		}
		var lv float64
		var n int
		for i := max(0, int(c-h/2)); i <= min(len(work)-1, int(c+h/2)); i++ {
			lv += work[i]
			n++
		}
		lv /= float64(max(1, n))
		if len(found) > 0 && lv < 0.1*found[0].level {
			break
		}
		// Slit images of one slit through one lens are of one height: a
		// bump much wider or narrower than the strongest band is room
		// light or a reflection, not a band.
		if len(found) == 0 || (h < 3*found[0].h && h > found[0].h/3) {
			found = append(found, bump{c, h, lv})
		}
		if !all {
			break
		}
		// Blank it and its wings (as wide again) before looking further.
		for i := max(0, int(c-2*h-2)); i <= min(len(work)-1, int(c+2*h+2)); i++ {
			work[i] = 0
		}
	}
	sort.Slice(found, func(a, b int) bool { return found[a].c < found[b].c })
	out := make([]bandGuess, len(found))
	for k, b := range found {
		reach := math.Inf(1)
		if k > 0 {
			a := found[k-1]
			reach = math.Min(reach, ((b.c-b.h)-(a.c+a.h))/2+b.h)
		}
		if k+1 < len(found) {
			n := found[k+1]
			reach = math.Min(reach, ((n.c-n.h)-(b.c+b.h))/2+b.h)
		}
		out[k] = bandGuess{vc: vmin + (b.c+0.5)*step, hh: math.Max(b.h*step, 2), reach: reach * step, level: b.level}
	}
	return out
}

// glowRange tells a lit bench's stray light (a patch of glow, too round
// and too local for flatten's quadratic surface) on the reduced, flattened
// frame sp: sp is reduced again to about 128 px (area averaging, in linear
// light) and opened (erosion then dilation) by a square a third of its
// smaller side, which takes away a band and its lines (narrower than the
// square in one direction at least) and leaves what is broader. It
// returns the opened map's range away from the edges when that exceeds 8σ
// of the pixel-to-pixel noise of sp (the frame's spread is no measure
// here: a glow widens it) and floor, else 0. The caller's floor is a
// hundredth of the brightest pixel above the background: without it, an
// averaged video of a dark bench, whose noise is all but gone, was taken
// for a lit one for a background range of 0.01 % of full scale.
func glowRange(sp plane, floor float64, workers int) float64 {
	// The noise (about a third of the time) is taken beside the opening on
	// a spare core; it is waited for on every return, as the caller
	// changes sp afterwards.
	var noise float64
	var spare sync.WaitGroup
	defer spare.Wait()
	if workers > 1 {
		spare.Go(func() { noise = pixelNoise(sp) })
	}
	q := max(1, int(math.Ceil(float64(max(sp.w, sp.h))/128)))
	tw, th := max(8, sp.w/q), max(8, sp.h/q)
	src, err := floatMat(sp.pix, sp.h, sp.w, gocv.MatTypeCV32FC1)
	if err != nil {
		return 0
	}
	defer src.Close()
	tiny := gocv.NewMat()
	defer tiny.Close()
	gocv.Resize(src, &tiny, image.Pt(tw, th), 0, 0, gocv.InterpolationArea)
	k := max(3, min(tw, th)/3) | 1
	kernel := gocv.GetStructuringElement(gocv.MorphRect, image.Pt(k, k))
	defer kernel.Close()
	open := gocv.NewMat()
	defer open.Close()
	gocv.MorphologyEx(tiny, &open, gocv.MorphOpen, kernel)
	v, err := open.DataPtrFloat32()
	if err != nil || len(v) < tw*th {
		return 0
	}
	// Within half a square of the edges the opening reads OpenCV's border
	// and is left out.
	lo, hi := math.Inf(1), math.Inf(-1)
	for r := k / 2; r < th-k/2; r++ {
		for c := k / 2; c < tw-k/2; c++ {
			lo, hi = math.Min(lo, float64(v[r*tw+c])), math.Max(hi, float64(v[r*tw+c]))
		}
	}
	spare.Wait()
	if workers <= 1 {
		noise = pixelNoise(sp)
	}
	if !(hi-lo >= 8*noise) || !(hi-lo >= floor) {
		return 0
	}
	return hi - lo
}

// pixelNoise is the noise σ of p from the differences of horizontally
// neighbouring pixels (robust MAD over about 20 000 of them, ÷√2): smooth
// backgrounds and glows hardly change it.
func pixelNoise(p plane) float64 {
	step := max(1, p.w*p.h/20000)
	b := scratch.borrow(len(p.pix)/step + 1)
	defer scratch.Put(b)
	d := *b
	for i := 0; i+1 < len(p.pix); i += step {
		if (i+1)%p.w != 0 {
			d = append(d, float64(p.pix[i+1]-p.pix[i]))
		}
	}
	if len(d) == 0 {
		return 0
	}
	_, sigma := medMAD(d)
	return sigma / math.Sqrt2
}

// lineContrast returns p less its smooth background for a lit bench: the
// lower of two openings (erosion then dilation) of p, by a horizontal
// and by a vertical run of n pixels. Every line image is narrow along the
// dispersion, so one of the two openings takes it away whatever the band's
// direction, while a glow wider than n passes both almost whole: what is
// left is the lines' contrast, on a background near 0.
// (p less the lower opening is the larger of the two differences.)
func lineContrast(p plane, n int) (plane, error) {
	src, err := floatMat(p.pix, p.h, p.w, gocv.MatTypeCV32FC1)
	if err != nil {
		return plane{}, err
	}
	defer src.Close()
	out := plane{w: p.w, h: p.h, pix: make([]float32, len(p.pix))} // the first opening writes it all
	for _, k := range []image.Point{{n, 1}, {1, n}} {
		kernel := gocv.GetStructuringElement(gocv.MorphRect, k)
		opened := gocv.NewMat()
		gocv.MorphologyEx(src, &opened, gocv.MorphOpen, kernel)
		kernel.Close()
		o, err := opened.DataPtrFloat32()
		if err != nil || len(o) != len(p.pix) {
			opened.Close()
			return plane{}, errors.New("locate: OpenCV returned no opening")
		}
		if k.X > 1 {
			for i, v := range o {
				out.pix[i] = p.pix[i] - v
			}
		} else {
			for i, v := range o {
				out.pix[i] = max(out.pix[i], p.pix[i]-v)
			}
		}
		opened.Close()
	}
	return out, nil
}
