// Package vernier turns a class's hand-recorded spectrometer readings
// (circular scale and vernier, degrees and arc-minutes) into diffraction
// angles, wavelengths with honest uncertainties and a Rydberg constant per
// observer, and diagnoses the usual misreadings.
//
// Conventions: angles in degrees; the grating equation at normal incidence
// d·sin θ = m·λ (REFERENCE-DATA.md section 9); θ = (θ_R − θ_L)/2 from the
// two sides of the straight-through position, which removes the zero
// offset (REFERENCE-DATA.md section 10, Stony Brook PHY252 lab notes);
// wavelengths in nm, air (as the reference lines).
package vernier

import (
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"regexp"
	"strconv"
	"strings"

	"lineshot/calibrate"
)

// Side of the straight-through position a reading was taken on.
const (
	SideZero  = "zero"
	SideLeft  = "left"
	SideRight = "right"
)

// Reading is one row of a readings file.
type Reading struct {
	Row      int    // 1-based line number in the file, for messages
	Bench    string // bench or setup name
	Observer string
	Lamp     string // lamp name as written
	Line     string // line as written: nm or a name
	Side     string // SideZero, SideLeft or SideRight
	Text     string // the reading as written
	Deg      float64
	Vernier  string // "A", "B" or "" (one vernier)
	Order    int    // diffraction order, default 1
	Note     string
}

// ParseAngle reads an angle in the notations people write on a record
// sheet: "180 02", "180°02'", "180°2′", "180d02m", "180:02", "180° 02′ 30″"
// or decimal degrees "180.033". Minutes and seconds must be below 60, and
// the angle must lie in [0°, 360°).
func ParseAngle(s string) (float64, error) {
	t := strings.TrimSpace(s)
	if t == "" {
		return 0, errors.New("empty reading")
	}
	if m := angleRe.FindStringSubmatch(t); m != nil {
		d, _ := strconv.Atoi(m[1])
		mins, err := strconv.ParseFloat(m[2], 64)
		if err != nil {
			return 0, fmt.Errorf("reading %q: minutes are not a number", s)
		}
		var secs float64
		if m[3] != "" {
			secs, _ = strconv.ParseFloat(m[3], 64)
		}
		if mins >= 60 {
			return 0, fmt.Errorf("reading %q: %g minutes (must be below 60)", s, mins)
		}
		if secs >= 60 {
			return 0, fmt.Errorf("reading %q: %g seconds (must be below 60)", s, secs)
		}
		v := float64(d) + mins/60 + secs/3600
		if v >= 360 {
			return 0, fmt.Errorf("reading %q is not below 360°", s)
		}
		return v, nil
	}
	if degRe.MatchString(t) {
		v, err := strconv.ParseFloat(strings.TrimRight(t, "°"), 64)
		if err == nil {
			if v >= 360 {
				return 0, fmt.Errorf("reading %q is not below 360°", s)
			}
			return v, nil
		}
	}
	if strings.HasPrefix(t, "-") || strings.HasPrefix(t, "−") {
		return 0, fmt.Errorf("reading %q is negative (readings lie in 0°-360°)", s)
	}
	return 0, fmt.Errorf("reading %q is not an angle (write e.g. 180 02, 180°02', 180d02m, 180:02 or 180.033)", s)
}

var (
	// degrees, a separator, minutes, optional seconds; separators: space, °,
	// d, deg, :, with ' ′ m min after minutes and " ″ s after seconds.
	angleRe = regexp.MustCompile(`^(\d{1,3})\s*(?:°|º|d|deg|:|\s)\s*(\d{1,2}(?:\.\d+)?)\s*(?:'|′|’|m|min)?\s*(?:(\d{1,2}(?:\.\d+)?)\s*(?:"|″|”|s|sec))?$`)
	degRe   = regexp.MustCompile(`^\d{1,3}(?:\.\d+)?°?$`)
)

// FormatAngle writes an angle as degrees and whole arc-minutes, 180°02′.
func FormatAngle(deg float64) string {
	deg = math.Mod(deg, 360)
	if deg < 0 {
		deg += 360
	}
	total := int(math.Round(deg * 60))
	return fmt.Sprintf("%d°%02d′", (total/60)%360, total%60)
}

// ReadCSV reads readings with at least the columns
// bench,observer,lamp,line,side,reading (any order, header row first) and
// optionally vernier, order and note. Errors name the row and the reason.
//
// Fields are separated by commas or, when the header row holds more
// semicolons than commas, by semicolons: what a spreadsheet saves as CSV
// where the decimal mark is a comma (much of Europe); the readings of such
// a file may then write the arc-minutes' decimals with a comma, 19°08,5′.
func ReadCSV(r io.Reader) ([]Reading, error) {
	cr, semi := calibrate.SpreadsheetCSV(r)
	head, err := cr.Read()
	if err != nil {
		return nil, fmt.Errorf("no header row: %v", err)
	}
	col := map[string]int{}
	for i, h := range head {
		col[strings.ToLower(strings.TrimSpace(h))] = i
	}
	for _, need := range []string{"bench", "observer", "lamp", "line", "side", "reading"} {
		if _, ok := col[need]; !ok {
			return nil, fmt.Errorf("the header %q lacks the column %q (need bench,observer,lamp,line,side,reading)", strings.Join(head, ","), need)
		}
	}
	var out []Reading
	for {
		rec, err := cr.Read()
		if err == io.EOF {
			break
		}
		if err != nil {
			var pe *csv.ParseError
			if errors.As(err, &pe) {
				return nil, fmt.Errorf("row %d: %v", pe.Line, pe.Err)
			}
			return nil, err
		}
		line, _ := cr.FieldPos(0)
		get := func(name string) string {
			if i, ok := col[name]; ok && i < len(rec) {
				return strings.TrimSpace(rec[i])
			}
			return ""
		}
		rd := Reading{Row: line, Bench: get("bench"), Observer: get("observer"), Lamp: get("lamp"), Line: get("line"),
			Side: strings.ToLower(get("side")), Text: get("reading"), Vernier: strings.ToUpper(get("vernier")), Note: get("note"), Order: 1}
		text := calibrate.Number(rd.Text, semi)
		switch rd.Side {
		case SideZero, SideLeft, SideRight:
		case "l":
			rd.Side = SideLeft
		case "r":
			rd.Side = SideRight
		case "0", "straight", "straight-through":
			rd.Side = SideZero
		default:
			return nil, fmt.Errorf("row %d: side %q (want zero, left or right)", line, get("side"))
		}
		if rd.Observer == "" || rd.Bench == "" {
			return nil, fmt.Errorf("row %d: bench and observer must not be empty", line)
		}
		if rd.Side != SideZero && rd.Line == "" {
			return nil, fmt.Errorf("row %d: no line named for a %s reading", line, rd.Side)
		}
		if rd.Vernier != "" && rd.Vernier != "A" && rd.Vernier != "B" {
			return nil, fmt.Errorf("row %d: vernier %q (want A or B)", line, rd.Vernier)
		}
		if o := get("order"); o != "" {
			n, err := strconv.Atoi(o)
			if err != nil || n < 1 || n > 10 {
				return nil, fmt.Errorf("row %d: order %q (want a whole number 1-10)", line, o)
			}
			rd.Order = n
		}
		rd.Deg, err = ParseAngle(text)
		if err != nil {
			return nil, fmt.Errorf("row %d: %v", line, err)
		}
		out = append(out, rd)
	}
	if len(out) == 0 {
		return nil, errors.New("no readings")
	}
	return out, nil
}
