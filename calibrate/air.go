package calibrate

// Air/vacuum conversion for standard air (dry, 1 atm, 15 °C, 0.045 % CO2),
// the convention of NIST ASD air wavelengths.
//
// VacuumToAir is the IAU standard formula of Morton (2000, ApJS 130, 403),
// from Birch & Downs (1994); AirToVacuum is its inverse by N. Piskunov, as
// given on the VALD3 wiki "Air-to-vacuum conversion". Both are valid above
// 200 nm; below that all wavelengths are vacuum by convention and the input
// is returned unchanged.

const airVacMinNM = 200

// VacuumToAir returns the standard-air wavelength of a vacuum wavelength, nm.
func VacuumToAir(vacNM float64) float64 {
	if vacNM < airVacMinNM {
		return vacNM
	}
	s := 1e3 / vacNM // 10^4 / λ[Å] = wavenumber in µm⁻¹
	s2 := s * s
	n := 1 + 0.0000834254 + 0.02406147/(130-s2) + 0.00015998/(38.9-s2)
	return vacNM / n
}

// AirToVacuum returns the vacuum wavelength of a standard-air wavelength, nm.
func AirToVacuum(airNM float64) float64 {
	if airNM < airVacMinNM {
		return airNM
	}
	s := 1e3 / airNM
	s2 := s * s
	n := 1 + 0.00008336624212083 + 0.02408926869968/(130.1065924522-s2) + 0.0001599740894897/(38.92568793293-s2)
	return airNM * n
}

// AirToVacuumSlope returns dλ_vac/dλ_air at airNM, used to carry an
// uncertainty through the conversion.
func AirToVacuumSlope(airNM float64) float64 {
	const h = 1e-3
	return (AirToVacuum(airNM+h) - AirToVacuum(airNM-h)) / (2 * h)
}
