package imaging

import (
	"math"
	"sort"
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
	step := max(1, len(p.pix)/20000)
	s := make([]float64, 0, len(p.pix)/step+1)
	for i := 0; i < len(p.pix); i += step {
		s = append(s, float64(p.pix[i]))
	}
	var top float32
	for _, v := range p.pix {
		if v > top {
			top = v
		}
	}
	peak = float64(top)
	sort.Float64s(s)
	med = s[len(s)/2]
	for i := range s {
		s[i] = math.Abs(s[i] - med)
	}
	sort.Float64s(s)
	return med, 1.4826 * s[len(s)/2], peak
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
func bandEdges(prof []float64) (center, half float64, ok bool) {
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
	if hm <= 0 {
		return 0, 0, false
	}
	l := imax
	for l > 0 && prof[l-1] > hm {
		l--
	}
	r := imax
	for r < len(prof)-1 && prof[r+1] > hm {
		r++
	}
	if l == 0 || r == len(prof)-1 {
		return 0, 0, false // the band runs off the searched rows
	}
	le := float64(l-1) + (hm-prof[l-1])/(prof[l]-prof[l-1])
	re := float64(r) + (prof[r]-hm)/(prof[r]-prof[r+1])
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
// straighten takes its own per-column background beside the band.
// It returns the surface's range over the frame, in p's units.
func flatten(p plane) float64 {
	if p.w < 8 || p.h < 8 {
		return 0
	}
	step := max(1, int(math.Sqrt(float64(p.w*p.h)/40000)))
	sx, sy := 2/float64(p.w-1), 2/float64(p.h-1)
	basis := func(x, y int, b *[6]float64) {
		u, v := float64(x)*sx-1, float64(y)*sy-1
		*b = [6]float64{1, u, v, u * u, u * v, v * v}
	}
	eval := func(c [6]float64, x, y int) float64 {
		var b [6]float64
		basis(x, y, &b)
		var s float64
		for k := range b {
			s += c[k] * b[k]
		}
		return s
	}
	med, sigma, _ := levels(p)
	var c [6]float64
	c[0] = med
	cut := 5 * sigma
	for iter := 0; iter < 4; iter++ {
		var ata [6][6]float64
		var atb [6]float64
		var res []float64
		var b [6]float64
		for y := 0; y < p.h; y += step {
			for x := 0; x < p.w; x += step {
				r := float64(p.at(x, y)) - eval(c, x, y)
				if iter > 0 {
					res = append(res, math.Abs(r))
				}
				if math.Abs(r) > cut && cut > 0 {
					continue
				}
				basis(x, y, &b)
				v := float64(p.at(x, y))
				for i := range b {
					atb[i] += b[i] * v
					for j := range b {
						ata[i][j] += b[i] * b[j]
					}
				}
			}
		}
		nc, ok := solve6(ata, atb)
		if !ok {
			return 0
		}
		c = nc
		if len(res) > 0 {
			sort.Float64s(res)
			cut = 3 * 1.4826 * res[len(res)/2]
		}
	}
	// Subtract the surface, keeping its median level.
	lo, hi := math.Inf(1), math.Inf(-1)
	var vals []float64
	for y := 0; y < p.h; y += step {
		for x := 0; x < p.w; x += step {
			v := eval(c, x, y)
			vals = append(vals, v)
			lo, hi = math.Min(lo, v), math.Max(hi, v)
		}
	}
	sort.Float64s(vals)
	level := vals[len(vals)/2]
	for y := 0; y < p.h; y++ {
		row := p.pix[y*p.w : (y+1)*p.w]
		for x := range row {
			row[x] -= float32(eval(c, x, y) - level)
		}
	}
	return hi - lo
}

// solve6 solves the 6×6 normal equations a·x = b by Gaussian elimination
// with partial pivoting (too small a system to bring in a linear-algebra
// package for); false when a is singular.
func solve6(a [6][6]float64, b [6]float64) ([6]float64, bool) {
	const n = 6
	for col := 0; col < n; col++ {
		piv := col
		for r := col + 1; r < n; r++ {
			if math.Abs(a[r][col]) > math.Abs(a[piv][col]) {
				piv = r
			}
		}
		if math.Abs(a[piv][col]) < 1e-12 {
			return [6]float64{}, false
		}
		a[col], a[piv] = a[piv], a[col]
		b[col], b[piv] = b[piv], b[col]
		for r := col + 1; r < n; r++ {
			f := a[r][col] / a[col][col]
			for k := col; k < n; k++ {
				a[r][k] -= f * a[col][k]
			}
			b[r] -= f * b[col]
		}
	}
	var x [6]float64
	for r := n - 1; r >= 0; r-- {
		s := b[r]
		for k := r + 1; k < n; k++ {
			s -= a[r][k] * x[k]
		}
		x[r] = s / a[r][r]
	}
	return x, true
}
