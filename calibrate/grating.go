package calibrate

import "math"

// GratingWavelength returns λ = d·sin θ / m in nm for a grating of
// linesPerMM at diffraction angle thetaDeg (normal incidence) in order m.
func GratingWavelength(linesPerMM, thetaDeg float64, m int) float64 {
	d := 1e6 / linesPerMM // nm
	return d * math.Sin(thetaDeg*math.Pi/180) / float64(m)
}

// GratingAngle returns the diffraction angle in degrees of wavelength nm in
// order m at normal incidence, and false when |mλ/d| > 1 (no such order).
func GratingAngle(linesPerMM, nm float64, m int) (float64, bool) {
	s := float64(m) * nm * linesPerMM / 1e6
	if math.Abs(s) > 1 {
		return 0, false
	}
	return math.Asin(s) * 180 / math.Pi, true
}
