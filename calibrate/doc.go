// Package calibrate turns line positions measured along a spectrum into
// wavelengths and wavelengths into a Rydberg constant.
//
// It holds the reference lamp lines (air wavelengths in nm, each with its
// published source), identifies measured positions with reference lines
// without user hints, fits a pixel-to-wavelength dispersion with a full
// covariance, converts air to vacuum wavelengths with the IAU standard
// formula (Morton 2000), and fits R in 1/λ = R(1/4 − 1/n²) by generalised
// least squares.
//
// Conventions: positions are in profile samples (pixels along the
// dispersion axis); wavelengths are in nm and say air or vacuum next to
// them; uncertainties are 1σ. The package takes plain []float64 positions
// and never imports the peak finder or the imaging code.
package calibrate
