package calibrate

// Physical constants, CODATA 2018 recommended values (NIST "Complete
// Listing" allascii.txt, as stored in scipy/constants/codata_constants_2018.txt).
const (
	// RInfinity is the Rydberg constant for infinite nuclear mass, m⁻¹ (CODATA 2018).
	RInfinity = 10973731.568160
	// RInfinitySigma is its standard uncertainty, m⁻¹ (CODATA 2018).
	RInfinitySigma = 0.000021
	// ElectronProtonMassRatio is m_e/m_p (CODATA 2018).
	ElectronProtonMassRatio = 5.44617021487e-4
	// Planck is h in J Hz⁻¹ (exact since 2019).
	Planck = 6.62607015e-34
	// SpeedOfLight is c in m s⁻¹ (exact).
	SpeedOfLight = 299792458.0
	// ElementaryCharge is e in C (exact).
	ElementaryCharge = 1.602176634e-19
)

// RHydrogen returns the Rydberg constant for hydrogen corrected for the
// reduced mass of the electron, R_H = R∞ / (1 + m_e/m_p), m⁻¹.
// With CODATA 2018 this is 10 967 758.340 m⁻¹.
func RHydrogen() float64 { return RInfinity / (1 + ElectronProtonMassRatio) }

// EnergyEV returns the energy h·c·R in electronvolts for a Rydberg value in
// m⁻¹: the ground-state binding energy of the Bohr atom with that R.
func EnergyEV(perM float64) float64 { return Planck * SpeedOfLight * perM / ElementaryCharge }
