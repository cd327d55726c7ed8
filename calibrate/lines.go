package calibrate

import (
	"fmt"
	"io"
	"math"
	"sort"
	"strconv"
	"strings"
)

// Line is one reference emission line.
type Line struct {
	Name     string  // short label, e.g. "Hg 546.07" or "Hβ"
	NM       float64 // air wavelength, nm (standard air, the NIST ASD convention 200-2000 nm)
	Strength float64 // relative strength within its lamp, 0..1 (qualitative, see Source)
	N        int     // upper principal quantum number for a Balmer line, 0 otherwise
	SigmaNM  float64 // uncertainty of NM when it is a broad band rather than a line; 0 for atomic lines
	Source   string  // where NM comes from
}

// Lamp is a named set of reference lines.
type Lamp struct {
	Name  string // "mercury", "hydrogen", ...
	Lines []Line // sorted by wavelength
}

// Source keys, spelled out in ../shared/REFERENCE-DATA.md ("Source key").
const (
	srcBAL50 = "NIST Handbook Hg I (Burns, Adams & Longwell 1950)"
	srcASDH  = "NIST ASD v5.5.6 H I, fine-structure centre of gravity"
	srcASDHe = "NIST ASD v5.5.6 He I"
	srcHBNe  = "NIST Handbook Ne I (Saloman & Sansonetti 2004)"
	srcASDNa = "NIST ASD Na I"
	// Relative strengths are qualitative for every lamp: the published
	// intensity scales refer to other sources (ASD's H I intensities are
	// solar-corona values), so lamp strengths are from memory.
)

// Mercury returns the Hg I lines usable for calibration in the visible.
// The orange/red lines near 623 and 691 nm are left out: no published
// value was confirmed (REFERENCE-DATA.md section 1).
func Mercury() Lamp {
	return Lamp{Name: "mercury", Lines: []Line{
		{Name: "Hg 404.66", NM: 404.6563, Strength: 0.5, Source: srcBAL50},
		{Name: "Hg 407.78", NM: 407.7831, Strength: 0.1, Source: srcBAL50},
		{Name: "Hg 435.83", NM: 435.8328, Strength: 1.0, Source: srcBAL50},
		{Name: "Hg 491.61", NM: 491.6068, Strength: 0.05, Source: srcBAL50},
		{Name: "Hg 546.07", NM: 546.0735, Strength: 1.0, Source: srcBAL50},
		{Name: "Hg 576.96", NM: 576.9598, Strength: 0.3, Source: srcBAL50},
		{Name: "Hg 579.07", NM: 579.0663, Strength: 0.3, Source: srcBAL50},
	}}
}

// Hydrogen returns the visible Balmer lines, Hα to Hε, as the centres of
// gravity of their fine-structure components (what a lamp photographed at
// low resolution shows); Hε has no component data in ASD, so its unlabelled
// blend value is used (REFERENCE-DATA.md section 2).
func Hydrogen() Lamp {
	return Lamp{Name: "hydrogen", Lines: []Line{
		{Name: "Hε", NM: 397.0072, Strength: 0.05, N: 7, Source: "NIST Handbook H I strong lines (blend)"},
		{Name: "Hδ", NM: 410.1735, Strength: 0.1, N: 6, Source: srcASDH},
		{Name: "Hγ", NM: 434.0463, Strength: 0.2, N: 5, Source: srcASDH},
		{Name: "Hβ", NM: 486.1325, Strength: 0.5, N: 4, Source: srcASDH},
		{Name: "Hα", NM: 656.2795, Strength: 1.0, N: 3, Source: srcASDH},
	}}
}

// Helium returns He I lines in the visible.
func Helium() Lamp {
	return Lamp{Name: "helium", Lines: []Line{
		{Name: "He 388.86", NM: 388.8648, Strength: 0.5, Source: srcASDHe},
		{Name: "He 402.62", NM: 402.61914, Strength: 0.1, Source: srcASDHe},
		{Name: "He 447.15", NM: 447.14802, Strength: 0.4, Source: srcASDHe},
		{Name: "He 471.31", NM: 471.31457, Strength: 0.1, Source: srcASDHe},
		{Name: "He 492.19", NM: 492.19313, Strength: 0.1, Source: srcASDHe},
		{Name: "He 501.57", NM: 501.56783, Strength: 0.3, Source: srcASDHe},
		{Name: "He 587.56", NM: 587.5621, Strength: 1.0, Source: srcASDHe},
		{Name: "He 667.82", NM: 667.8151, Strength: 0.3, Source: srcASDHe},
		{Name: "He 706.52", NM: 706.519, Strength: 0.4, Source: srcASDHe},
	}}
}

// Neon returns the strongest Ne I lines between 585 and 725 nm. Strengths
// follow the Handbook's SS04 scale, divided by its largest value.
func Neon() Lamp {
	l := []Line{
		{NM: 585.2488, Strength: 200}, {NM: 588.1895, Strength: 100},
		{NM: 594.4834, Strength: 50}, {NM: 597.5534, Strength: 60},
		{NM: 602.9997, Strength: 100}, {NM: 607.4338, Strength: 100},
		{NM: 614.3063, Strength: 100}, {NM: 616.3594, Strength: 100},
		{NM: 621.7281, Strength: 100}, {NM: 626.6495, Strength: 100},
		{NM: 633.4428, Strength: 100}, {NM: 638.2992, Strength: 100},
		{NM: 640.2248, Strength: 200}, {NM: 650.6528, Strength: 150},
		{NM: 659.8953, Strength: 100}, {NM: 692.9467, Strength: 1000},
		{NM: 702.405, Strength: 300}, {NM: 703.2413, Strength: 800},
		{NM: 717.3938, Strength: 800}, {NM: 724.5167, Strength: 800},
	}
	for i := range l {
		l[i].Name = fmt.Sprintf("Ne %.2f", l[i].NM)
		l[i].Strength /= 1000
		l[i].Source = srcHBNe
	}
	return Lamp{Name: "neon", Lines: l}
}

// Sodium returns the Na I D doublet.
func Sodium() Lamp {
	return Lamp{Name: "sodium", Lines: []Line{
		{Name: "Na D2", NM: 588.995095, Strength: 1.0, Source: srcASDNa},
		{Name: "Na D1", NM: 589.592424, Strength: 0.5, Source: srcASDNa},
	}}
}

// CFL returns the sharp features of a compact fluorescent lamp: its mercury
// lines and the peaks of its rare-earth phosphors. The phosphor peaks are
// bands known to about ±1 nm (REFERENCE-DATA.md section 6: NJSAS credits
// Stanford Materials; peterhers.co.za CFL spectra), so they weigh little in
// a dispersion fit; the Eu²⁺ blue band near 450 nm is too broad to use.
func CFL() Lamp {
	return Lamp{Name: "cfl", Lines: []Line{
		{Name: "Hg 404.66", NM: 404.6563, Strength: 0.3, Source: srcBAL50},
		{Name: "Hg 435.83", NM: 435.8328, Strength: 0.8, Source: srcBAL50},
		{Name: "Tb 488", NM: 488, Strength: 0.3, SigmaNM: 1, Source: "Tb³⁺ phosphor band (peterhers.co.za CFL spectra)"},
		{Name: "Tb 542", NM: 542, Strength: 0.6, SigmaNM: 1, Source: "Tb³⁺ phosphor band (NJSAS, Stanford Materials)"},
		{Name: "Hg 546.07", NM: 546.0735, Strength: 1.0, Source: srcBAL50},
		{Name: "Hg 576.96", NM: 576.9598, Strength: 0.15, Source: srcBAL50},
		{Name: "Hg 579.07", NM: 579.0663, Strength: 0.15, Source: srcBAL50},
		{Name: "Eu 611", NM: 611, Strength: 1.0, SigmaNM: 1, Source: "Eu³⁺ phosphor band (NJSAS, Stanford Materials)"},
	}}
}

// Lamps returns every built-in lamp, calibration lamps first.
func Lamps() []Lamp {
	return []Lamp{Mercury(), Helium(), Neon(), Sodium(), CFL(), Hydrogen()}
}

// LampByName returns the built-in lamp with the given name (case-insensitive;
// chemical symbols work too).
func LampByName(name string) (Lamp, error) {
	key := strings.ToLower(strings.TrimSpace(name))
	alias := map[string]string{"hg": "mercury", "h": "hydrogen", "h2": "hydrogen", "he": "helium", "ne": "neon", "na": "sodium", "fluorescent": "cfl"}
	if a, ok := alias[key]; ok {
		key = a
	}
	var names []string
	for _, l := range Lamps() {
		if l.Name == key {
			return l, nil
		}
		names = append(names, l.Name)
	}
	return Lamp{}, fmt.Errorf("calibrate: unknown lamp %q (known: %s)", name, strings.Join(names, ", "))
}

// Nearest returns the index of the line closest to nm and its distance.
// It returns -1 for an empty lamp.
func (l Lamp) Nearest(nm float64) (int, float64) {
	best, dist := -1, math.Inf(1)
	for i, ln := range l.Lines {
		if d := math.Abs(ln.NM - nm); d < dist {
			best, dist = i, d
		}
	}
	return best, dist
}

// sorted returns a copy of the lamp's lines sorted by wavelength.
func (l Lamp) sorted() []Line {
	s := append([]Line(nil), l.Lines...)
	sort.Slice(s, func(i, j int) bool { return s[i].NM < s[j].NM })
	return s
}

// ReadLines reads a user's reference line list: CSV with a header naming
// at least the columns "nm" (air wavelength) and optionally "name",
// "strength" (relative, default 1), "sigma_nm" and "source". Lines starting
// with # are comments. A spreadsheet's CSV is read as SpreadsheetCSV says
// (semicolons and decimal commas too). The lamp takes the given name.
// Errors name the row.
func ReadLines(r io.Reader, lampName string) (Lamp, error) {
	cr, semi := SpreadsheetCSV(r)
	head, err := cr.Read()
	if err != nil {
		return Lamp{}, fmt.Errorf("calibrate: line list: no header row: %v", err)
	}
	col := map[string]int{}
	for i, h := range head {
		col[strings.ToLower(strings.TrimSpace(h))] = i
	}
	nmCol, ok := col["nm"]
	if !ok {
		return Lamp{}, fmt.Errorf("calibrate: line list: the header %q has no \"nm\" column", strings.Join(head, ","))
	}
	get := func(rec []string, name string) (string, bool) {
		i, ok := col[name]
		if !ok || i >= len(rec) {
			return "", false
		}
		return strings.TrimSpace(rec[i]), true
	}
	lamp := Lamp{Name: lampName}
	for row := 2; ; row++ {
		rec, err := cr.Read()
		if err == io.EOF {
			break
		}
		if err != nil {
			return Lamp{}, fmt.Errorf("calibrate: line list row %d: %v", row, err)
		}
		if nmCol >= len(rec) {
			return Lamp{}, fmt.Errorf("calibrate: line list row %d: no nm value", row)
		}
		nm, err := strconv.ParseFloat(Number(strings.TrimSpace(rec[nmCol]), semi), 64)
		if err != nil || !(nm >= 100 && nm <= 3000) {
			return Lamp{}, fmt.Errorf("calibrate: line list row %d: wavelength %q is not a number of nm between 100 and 3000", row, rec[nmCol])
		}
		l := Line{NM: nm, Strength: 1, Name: fmt.Sprintf("%s %.2f", lampName, nm), Source: "user line list"}
		if v, ok := get(rec, "name"); ok && v != "" {
			l.Name = v
		}
		if v, ok := get(rec, "source"); ok && v != "" {
			l.Source = v
		}
		for _, f := range []struct {
			name string
			dst  *float64
		}{{"strength", &l.Strength}, {"sigma_nm", &l.SigmaNM}} {
			if v, ok := get(rec, f.name); ok && v != "" {
				x, err := strconv.ParseFloat(Number(v, semi), 64)
				if err != nil || x < 0 || math.IsInf(x, 0) {
					return Lamp{}, fmt.Errorf("calibrate: line list row %d: %s %q is not a non-negative number", row, f.name, v)
				}
				*f.dst = x
			}
		}
		lamp.Lines = append(lamp.Lines, l)
	}
	if len(lamp.Lines) < 2 {
		return Lamp{}, fmt.Errorf("calibrate: line list has %d lines; at least 2 are needed", len(lamp.Lines))
	}
	sort.Slice(lamp.Lines, func(i, j int) bool { return lamp.Lines[i].NM < lamp.Lines[j].NM })
	var max float64
	for _, l := range lamp.Lines {
		max = math.Max(max, l.Strength)
	}
	for i := range lamp.Lines {
		if max > 0 {
			lamp.Lines[i].Strength /= max
		}
	}
	return lamp, nil
}
