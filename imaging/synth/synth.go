// Package synth renders synthetic photographs of an emission-line lamp seen
// through a transmission grating by a camera, together with the exact
// position of every line, so that the measuring pipeline can be checked
// against a known truth and users can plan a setup before building it.
//
// Geometry: a distant slit illuminates a plane transmission grating at normal
// incidence; the grating's grooves are vertical. A pinhole camera with focal
// length f (px) and principal point at the image centre looks at the grating
// with its axis turned by the camera angle θc from the grating normal, then
// the camera is rolled by the tilt angle about its axis. A ray of wavelength
// λ leaves the grating with direction cosine kx = mλ/d (the grating equation
// at normal incidence, REFERENCE-DATA.md section 9) and ky = sin η, η the
// elevation within the slit, which is rendered exactly (conical diffraction
// included). Pixel (i, j) has its centre at (i, j); the truth is the centre
// of each line image at η = 0.
//
// Photometry: the signal in electrons passes through three made-up colour
// responses (Gaussians centred at 455, 535 and 605 nm: an invented camera,
// not a measured one), gets Poisson shot noise and Gaussian read noise, is
// scaled to full scale, clipped, encoded with the sRGB transfer curve and
// quantised to 8 bits.
package synth

import (
	"errors"
	"fmt"
	"image"
	"image/color"
	"math"
	"math/rand/v2"
)

// Emission is one line of the lamp to render.
type Emission struct {
	NM       float64 `json:"nm"`       // air wavelength, nm
	Strength float64 `json:"strength"` // relative peak height, any scale
	Name     string  `json:"name,omitempty"`
	FWHMNM   float64 `json:"fwhm_nm,omitempty"` // intrinsic width (phosphor bands), Gaussian; 0 for a line
}

// Params describes the lamp, grating and camera. The zero value of each
// optional field (marked) picks a sensible default, see Defaults.
type Params struct {
	Width          int     `json:"width"`  // px; 0 (with Height 0) → 1920×1080
	Height         int     `json:"height"` // px
	LinesPerMM     float64 `json:"lines_per_mm"`
	Order          int     `json:"order"`            // diffraction order; 0 → 1
	FocalPX        float64 `json:"focal_px"`         // 0 → fit 380-720 nm into 85% of the width
	CameraAngleDeg float64 `json:"camera_angle_deg"` // 0 → aimed at the middle of 380-720 nm
	TiltDeg        float64 `json:"tilt_deg"`         // roll about the optical axis, degrees; positive turns the band clockwise on screen (image y points down)
	PSFSigmaPX     float64 `json:"psf_sigma_px"`     // Gaussian blur σ; 0 → 1.2
	LineHeightPX   float64 `json:"line_height_px"`   // length of each line image; 0 → Height/10
	PeakLevel      float64 `json:"peak_level"`       // brightest line's peak in its strongest channel, fraction of full scale; 0 → 0.8 (above 1 saturates)
	FullWell       float64 `json:"full_well_e"`      // electrons at full scale; 0 → 6000
	ReadNoise      float64 `json:"read_noise_e"`     // electrons rms; 0 → 4
	Background     float64 `json:"background"`       // uniform background, fraction of full scale; 0 → 0.01
	// Orders lists the signed diffraction orders to render; empty means
	// just Order. 0 is the zero order: the slit seen straight through the
	// grating, every line at once, white. Negative orders appear on the
	// other side of it.
	Orders []int `json:"orders,omitempty"`
	// ZeroOrderGain is the zero order's brightness per line relative to
	// the first order (0 → 1); HigherOrderGain that of orders |m| ≥ 2
	// (0 → 0.15). Demo values (from memory): real gratings vary widely.
	ZeroOrderGain   float64 `json:"zero_order_gain,omitempty"`
	HigherOrderGain float64 `json:"higher_order_gain,omitempty"`
	// BackgroundGradient adds a room-light slope to the background: its
	// change from the left edge of the frame to the right, fraction of
	// full scale (the background stays at Background in the middle).
	BackgroundGradient float64 `json:"background_gradient,omitempty"`
	// Glows are patches of stray light (a lit bench, a desk lamp's
	// reflection, the lamp housing): each adds Level (fraction of full
	// scale, white) at its centre, falling off as a Gaussian of σ SigmaPX.
	Glows []Glow `json:"glows,omitempty"`
	// Stacked are further lamps seen through the same grating, their slit
	// images above or below the first (two lamps photographed together,
	// one band over the other). Their strengths share the first lamp's
	// scale.
	Stacked []StackedLamp `json:"stacked,omitempty"`
	// RadialK1 is the lens's radial distortion: a point at distance r from
	// the image centre in the pinhole image appears at r·(1 + k1·(r/R)²),
	// R the half-diagonal. Negative: barrel (wide phone lenses), positive:
	// pincushion. The first term of the usual radial model (common
	// practice).
	RadialK1 float64 `json:"radial_k1,omitempty"`
	// PitchDeg turns the camera about its own horizontal axis (across the
	// dispersion), degrees; positive looks down (the band moves up the
	// frame, by f·tan(pitch)). A camera not square to
	// the grating this way sees the line images converge (keystone: their
	// lean changes along the band) and the band move off the centre.
	PitchDeg  float64    `json:"pitch_deg,omitempty"`
	NoNoise   bool       `json:"no_noise"` // render the expected image without noise
	Seed      uint64     `json:"seed"`
	Emissions []Emission `json:"emissions"`
}

// Glow is a round patch of stray white light centred at (X, Y),
// original-image px.
type Glow struct {
	X       float64 `json:"x"`
	Y       float64 `json:"y"`
	SigmaPX float64 `json:"sigma_px"`
	Level   float64 `json:"level"`
}

// StackedLamp is a further lamp in the frame: its lines, and how far its
// slit image's centre lies below the first lamp's (px in the image before
// the roll; negative: above).
type StackedLamp struct {
	Emissions []Emission `json:"emissions"`
	OffsetPX  float64    `json:"offset_px"`
}

// Defaults returns p with every zero optional field set.
func (p Params) Defaults() Params {
	if p.Width == 0 && p.Height == 0 {
		p.Width, p.Height = 1920, 1080
	}
	if p.Order == 0 {
		p.Order = 1
	}
	if p.LinesPerMM == 0 {
		p.LinesPerMM = 600
	}
	if p.PSFSigmaPX == 0 {
		p.PSFSigmaPX = 1.2
	}
	if p.LineHeightPX == 0 {
		p.LineHeightPX = float64(p.Height) / 10
	}
	if p.PeakLevel == 0 {
		p.PeakLevel = 0.8
	}
	if p.FullWell == 0 {
		p.FullWell = 6000
	}
	if p.ReadNoise == 0 {
		p.ReadNoise = 4
	}
	if p.Background == 0 {
		p.Background = 0.01
	}
	if len(p.Orders) == 0 {
		p.Orders = []int{p.Order}
	}
	if p.ZeroOrderGain == 0 {
		p.ZeroOrderGain = 1
	}
	if p.HigherOrderGain == 0 {
		p.HigherOrderGain = 0.15
	}
	// Aim at the middle of what the orders send out between 380 and 720 nm
	// (just the first order: its own middle; −1, 0, +1: straight through).
	d := p.dNM()
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, m := range p.Orders {
		for _, nm := range []float64{380, 720} {
			a := math.Asin(math.Max(-1, math.Min(1, float64(m)*nm/d)))
			lo, hi = math.Min(lo, a), math.Max(hi, a)
		}
	}
	if p.CameraAngleDeg == 0 {
		p.CameraAngleDeg = (lo + hi) / 2 * 180 / math.Pi
	}
	if p.FocalPX == 0 {
		tc := p.CameraAngleDeg * math.Pi / 180
		p.FocalPX = 0.85 * float64(p.Width) / (math.Tan(hi-tc) - math.Tan(lo-tc))
	}
	return p
}

func (p Params) dNM() float64 { return 1e6 / p.LinesPerMM }

// TruthLine is the exact image of one line.
type TruthLine struct {
	NM         float64 `json:"nm"` // air wavelength, nm
	Name       string  `json:"name,omitempty"`
	X          float64 `json:"x"` // centre at η = 0, original-image px
	Y          float64 `json:"y"`
	InFrame    bool    `json:"in_frame"`
	Order      int     `json:"order,omitempty"`      // signed diffraction order (0 in older files: the first)
	Zero       bool    `json:"zero_order,omitempty"` // the zero order (NM is 0)
	Band       int     `json:"band,omitempty"`       // 0: the first lamp; k: Stacked[k−1]
	Dispersion float64 `json:"nm_per_px"`            // local dispersion along the band
	// Dir is the unit direction in which the line image runs through
	// (X, Y), towards larger η: square to the band for a camera square to
	// the grating, leaning with pitch, conical diffraction or distortion.
	Dir   [2]float64 `json:"dir"`
	PeakE float64    `json:"peak_e"` // expected peak signal, electrons, strongest channel
}

// Truth is everything Render knows about the picture it made.
type Truth struct {
	Params Params      `json:"params"`
	Lines  []TruthLine `json:"lines"`
}

// Validate reports the first parameter that makes no sense.
func (p Params) Validate() error {
	switch {
	case p.Width < 16 || p.Height < 16 || p.Width > 20000 || p.Height > 20000:
		return fmt.Errorf("synth: image size %dx%d outside 16..20000 px", p.Width, p.Height)
	case p.LinesPerMM <= 0 || p.LinesPerMM > 5000:
		return fmt.Errorf("synth: %g lines/mm outside (0, 5000]", p.LinesPerMM)
	case p.FocalPX <= 0, p.PSFSigmaPX <= 0, p.LineHeightPX <= 0, p.FullWell <= 0:
		return errors.New("synth: focal length, PSF, line height and full well must be positive")
	case p.ReadNoise < 0 || p.Background < 0 || p.PeakLevel < 0:
		return errors.New("synth: noise, background and peak level must not be negative")
	case !glowsValid(p.Glows):
		return errors.New("synth: a glow needs σ > 0 and a level in 0..1")
	case math.Abs(p.PitchDeg) > 20:
		return fmt.Errorf("synth: camera pitch %g° outside ±20°", p.PitchDeg)
	case math.Abs(p.RadialK1) > 0.3:
		return fmt.Errorf("synth: radial distortion %g outside ±0.3", p.RadialK1)
	case math.Abs(p.TiltDeg) > 45:
		return fmt.Errorf("synth: tilt %g° outside ±45°", p.TiltDeg)
	case len(p.Emissions) == 0:
		return errors.New("synth: no emission lines to render")
	case len(p.Orders) > 7:
		return errors.New("synth: at most 7 orders")
	}
	for _, m := range p.Orders {
		if m < -5 || m > 5 {
			return fmt.Errorf("synth: order %d outside -5..5", m)
		}
	}
	return nil
}

// response returns the invented camera's R, G, B sensitivity at nm.
func response(nm float64) [3]float64 {
	g := func(c, s float64) float64 { d := (nm - c) / s; return math.Exp(-d * d / 2) }
	return [3]float64{g(605, 45), g(535, 45), g(455, 35)}
}

// Render draws the photograph. It returns an error for invalid parameters.
func Render(p Params) (*image.RGBA, Truth, error) {
	p = p.Defaults()
	if err := p.Validate(); err != nil {
		return nil, Truth{}, err
	}
	W, H := p.Width, p.Height
	cx, cy := float64(W-1)/2, float64(H-1)/2
	f := p.FocalPX
	tc := p.CameraAngleDeg * math.Pi / 180
	st, ct := math.Sincos(p.TiltDeg * math.Pi / 180)
	sc, cc := math.Sincos(tc)
	sp, cp := math.Sincos(p.PitchDeg * math.Pi / 180)
	d := p.dNM()
	fw := p.FullWell

	// Scale strengths so the brightest line peaks at PeakLevel of full scale
	// in its strongest channel in the first order. A line of unit amplitude
	// peaks at 1 on a Gaussian cross-section times the slit profile's
	// plateau (1).
	type ln struct {
		dm      float64 // d/m, nm: this line's order
		nm, amp float64
		rgb     [3]float64
		xu      float64 // unrolled x of the line at η = 0
		sigNM   float64 // intrinsic Gaussian σ, nm
	}
	// One band per lamp: its slit's elevation η and its lines.
	type band struct {
		eta     float64
		lines   []ln
		zero    bool
		zeroRGB [3]float64 // the zero order's amplitude per channel
	}
	lamps := [][]Emission{p.Emissions}
	etas := []float64{0}
	for _, sl := range p.Stacked {
		lamps = append(lamps, sl.Emissions)
		etas = append(etas, math.Atan(sl.OffsetPX/f))
	}
	var truth Truth
	maxv := 0.0
	for _, em := range lamps {
		for _, e := range em {
			r := response(e.NM)
			v := e.Strength * math.Max(r[0], math.Max(r[1], r[2]))
			maxv = math.Max(maxv, v)
		}
	}
	if maxv <= 0 {
		return nil, Truth{}, errors.New("synth: every emission has zero strength or lies outside the camera's response")
	}
	k := p.PeakLevel * fw / maxv
	// at places the ray of grating direction cosines (kx, sin η) in the
	// image: the camera turned by θc, then rolled.
	at := func(kx, eta float64) (x, y float64) {
		ky := math.Sin(eta)
		kz := math.Sqrt(math.Max(0, 1-kx*kx-ky*ky))
		xc, zc := kx*cc-kz*sc, kx*sc+kz*cc
		yc := ky
		yc, zc = yc*cp-zc*sp, yc*sp+zc*cp // the camera's pitch
		xu, yu := cx+f*xc/zc, cy+f*yc/zc
		return cx + (xu-cx)*ct - (yu-cy)*st, cy + (xu-cx)*st + (yu-cy)*ct
	}
	// distort moves a pinhole-image point by the lens's radial
	// distortion; undistort inverts it (fixed-point iteration, converged
	// to 1e-6 px for |k1| ≤ 0.3 within the frame).
	R2 := cx*cx + cy*cy
	distort := func(x, y float64) (float64, float64) {
		if p.RadialK1 == 0 {
			return x, y
		}
		dx, dy := x-cx, y-cy
		g := 1 + p.RadialK1*(dx*dx+dy*dy)/R2
		return cx + dx*g, cy + dy*g
	}
	undistort := func(x, y float64) (float64, float64) {
		dx, dy := x-cx, y-cy
		ux, uy := dx, dy
		for k := 0; k < 30; k++ {
			g := 1 + p.RadialK1*(ux*ux+uy*uy)/R2
			nx, ny := dx/g, dy/g
			done := math.Abs(nx-ux)+math.Abs(ny-uy) < 1e-7
			ux, uy = nx, ny
			if done {
				break
			}
		}
		return cx + ux, cy + uy
	}
	addTruth := func(t TruthLine, xu, kx, eta float64) {
		if eta == 0 && p.PitchDeg == 0 {
			t.X = cx + (xu-cx)*ct
			t.Y = cy + (xu-cx)*st
		} else {
			t.X, t.Y = at(kx, eta)
		}
		t.X, t.Y = distort(t.X, t.Y)
		// The line image's direction: a central difference over ±1e-4 rad.
		x1, y1 := distort(at(kx, eta-1e-4))
		x2, y2 := distort(at(kx, eta+1e-4))
		n := math.Hypot(x2-x1, y2-y1)
		t.Dir = [2]float64{(x2 - x1) / n, (y2 - y1) / n}
		t.InFrame = t.X >= 0 && t.X <= float64(W-1) && t.Y >= 0 && t.Y <= float64(H-1)
		truth.Lines = append(truth.Lines, t)
	}
	zeroXU := cx + f*math.Tan(-tc)
	bands := make([]band, len(lamps))
	for bi, em := range lamps {
		bd := &bands[bi]
		bd.eta = etas[bi]
		for _, m := range p.Orders {
			if m == 0 {
				bd.zero = true
				continue
			}
			gain := 1.0
			if m > 1 || m < -1 {
				gain = p.HigherOrderGain
			}
			dm := d / float64(m)
			for _, e := range em {
				s := e.NM / dm
				if math.Abs(s) >= 1 {
					continue // this order does not exist for this line
				}
				th := math.Asin(s)
				if math.Abs(th-tc) >= math.Pi/2*0.95 {
					continue
				}
				xu := cx + f*math.Tan(th-tc)
				r := response(e.NM)
				l := ln{dm: dm, nm: e.NM, amp: e.Strength * k * gain, rgb: r, xu: xu, sigNM: e.FWHMNM / 2.3548200450309493}
				bd.lines = append(bd.lines, l)
				X := (xu - cx) / f
				addTruth(TruthLine{NM: e.NM, Name: e.Name, Order: m, Band: bi, Dispersion: math.Abs(dm) * math.Cos(tc+math.Atan(X)) / (1 + X*X) / f,
					PeakE: l.amp * math.Max(r[0], math.Max(r[1], r[2]))}, xu, s, bd.eta)
			}
		}
		if bd.zero {
			for _, e := range em {
				r := response(e.NM)
				for ch := range bd.zeroRGB {
					bd.zeroRGB[ch] += e.Strength * k * p.ZeroOrderGain * r[ch]
				}
			}
			addTruth(TruthLine{Name: "zero order", Zero: true, Band: bi, PeakE: math.Max(bd.zeroRGB[0], math.Max(bd.zeroRGB[1], bd.zeroRGB[2]))}, zeroXU, 0, bd.eta)
		}
	}
	truth.Params = p

	// Expected signal, electrons, per channel.
	sig := make([]float32, 3*W*H)
	for j := 0; j < H; j++ {
		for i := 0; i < W; i++ {
			b := p.Background
			if W > 1 {
				b += p.BackgroundGradient * (float64(i)/float64(W-1) - 0.5)
			}
			for _, g := range p.Glows {
				dx, dy := (float64(i)-g.X)/g.SigmaPX, (float64(j)-g.Y)/g.SigmaPX
				if d2 := dx*dx + dy*dy; d2 < 50 {
					b += g.Level * math.Exp(-d2/2)
				}
			}
			v := float32(math.Max(0, b) * fw)
			base := 3 * (j*W + i)
			sig[base], sig[base+1], sig[base+2] = v, v, v
		}
	}
	halfH := p.LineHeightPX / 2 / f // slit half-height as an angle
	sEta := p.PSFSigmaPX / f
	// Bounding box of the bands in the image.
	yMargin := p.LineHeightPX/2 + 6*p.PSFSigmaPX
	if p.PitchDeg != 0 {
		// The band moves by f·tan(pitch) and its lines lean: render the
		// whole height.
		yMargin = float64(W + H)
	}
	vLo, vHi := cy-yMargin, cy+yMargin
	for _, sl := range p.Stacked {
		vLo, vHi = math.Min(vLo, cy+sl.OffsetPX-yMargin), math.Max(vHi, cy+sl.OffsetPX+yMargin)
	}
	reachY := math.Max(cy-vLo, vHi-cy)
	xMin, xMax := math.Inf(1), math.Inf(-1)
	for _, bd := range bands {
		for _, l := range bd.lines {
			xMin, xMax = math.Min(xMin, l.xu), math.Max(xMax, l.xu)
		}
		if bd.zero {
			xMin, xMax = math.Min(xMin, zeroXU), math.Max(xMax, zeroXU)
		}
	}
	xMin -= 6*p.PSFSigmaPX + 2*reachY*reachY/f + 2
	xMax += 6*p.PSFSigmaPX + 2*reachY*reachY/f + 2
	bx0, by0, bx1, by1 := math.Inf(1), math.Inf(1), math.Inf(-1), math.Inf(-1)
	for _, u := range []float64{xMin, xMax} {
		for _, v := range []float64{vLo, vHi} {
			x := cx + (u-cx)*ct - (v-cy)*st
			y := cy + (u-cx)*st + (v-cy)*ct
			bx0, bx1 = math.Min(bx0, x), math.Max(bx1, x)
			by0, by1 = math.Min(by0, y), math.Max(by1, y)
		}
	}
	if p.RadialK1 != 0 {
		// Distortion moves the band by up to |k1|·R at the corners.
		m := math.Abs(p.RadialK1)*math.Sqrt(R2) + 2
		bx0, by0, bx1, by1 = bx0-m, by0-m, bx1+m, by1+m
	}
	i0, i1 := max(0, int(math.Floor(bx0))), min(W-1, int(math.Ceil(bx1)))
	j0, j1 := max(0, int(math.Floor(by0))), min(H-1, int(math.Ceil(by1)))
	for j := j0; j <= j1; j++ {
		for i := i0; i <= i1; i++ {
			dx, dy := float64(i)-cx, float64(j)-cy
			if p.RadialK1 != 0 {
				// The pinhole-image point this pixel shows.
				ux, uy := undistort(float64(i), float64(j))
				dx, dy = ux-cx, uy-cy
			}
			xu := dx*ct + dy*st // unrolled, relative to the principal point
			yu := -dx*st + dy*ct
			X, Y := xu/f, yu/f
			if p.PitchDeg != 0 {
				// The ray in the camera's frame before its pitch.
				y, z := Y*cp+sp, -Y*sp+cp
				if z <= 0 {
					continue
				}
				X, Y = X/z, y/z
			}
			nrm := math.Sqrt(1 + X*X + Y*Y)
			ky := Y / nrm
			eta := math.Asin(ky)
			kx := (X*cc + sc) / nrm
			// dkx/dx along the band, per px, for the blur width.
			dkdx := (cc*(1+Y*Y) - sc*X) / (nrm * nrm * nrm) / f
			base := 3 * (j*W + i)
			for _, bd := range bands {
				e := eta - bd.eta
				if e < -halfH-6*sEta || e > halfH+6*sEta {
					continue
				}
				slit := 0.5 * (math.Erf((e+halfH)/(math.Sqrt2*sEta)) - math.Erf((e-halfH)/(math.Sqrt2*sEta)))
				for _, l := range bd.lines {
					w := kx * l.dm
					sw := p.PSFSigmaPX * math.Abs(dkdx*l.dm)
					d := (w - l.nm) / math.Sqrt(sw*sw+l.sigNM*l.sigNM)
					if d > 7 || d < -7 {
						continue
					}
					s := l.amp * math.Exp(-d*d/2) * slit
					sig[base] += float32(s * l.rgb[0])
					sig[base+1] += float32(s * l.rgb[1])
					sig[base+2] += float32(s * l.rgb[2])
				}
				if bd.zero {
					// Straight through: kx = 0, blurred by the PSF alone.
					d := kx / dkdx / p.PSFSigmaPX
					if d < 7 && d > -7 {
						s := math.Exp(-d*d/2) * slit
						sig[base] += float32(s * bd.zeroRGB[0])
						sig[base+1] += float32(s * bd.zeroRGB[1])
						sig[base+2] += float32(s * bd.zeroRGB[2])
					}
				}
			}
		}
	}

	rng := rand.New(rand.NewPCG(p.Seed, 0x5eed))
	lut := srgbLUT()
	img := image.NewRGBA(image.Rect(0, 0, W, H))
	for j := 0; j < H; j++ {
		for i := 0; i < W; i++ {
			base := 3 * (j*W + i)
			var c [3]uint8
			for ch := 0; ch < 3; ch++ {
				e := float64(sig[base+ch])
				if !p.NoNoise {
					e += math.Sqrt(e)*rng.NormFloat64() + p.ReadNoise*rng.NormFloat64()
				}
				v := e / fw
				if v < 0 {
					v = 0
				} else if v > 1 {
					v = 1
				}
				c[ch] = lut[int(v*float64(len(lut)-1)+0.5)]
			}
			img.SetRGBA(i, j, color.RGBA{c[0], c[1], c[2], 255})
		}
	}
	return img, truth, nil
}

// srgbLUT maps linear intensity in [0, 1] (65536 steps) to 8-bit sRGB
// (IEC 61966-2-1 transfer curve).
func srgbLUT() []uint8 {
	lut := make([]uint8, 65536)
	for i := range lut {
		v := float64(i) / float64(len(lut)-1)
		var s float64
		if v <= 0.0031308 {
			s = 12.92 * v
		} else {
			s = 1.055*math.Pow(v, 1/2.4) - 0.055
		}
		lut[i] = uint8(math.Round(s * 255))
	}
	return lut
}

func glowsValid(gs []Glow) bool {
	for _, g := range gs {
		if !(g.SigmaPX > 0) || !(g.Level >= 0 && g.Level <= 1) {
			return false
		}
	}
	return true
}
