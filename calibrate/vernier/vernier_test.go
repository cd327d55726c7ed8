package vernier

import (
	"bytes"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"regexp"
	"strings"
	"testing"

	"lineshot/calibrate"
)

// Vernier worked example (AIEEE 2012, REFERENCE-DATA.md section 10): main
// scale 58.5° plus 9 vernier divisions of 1′ reads 58°39′ = 58.65°.
func TestParseAngleNotations(t *testing.T) {
	good := map[string]float64{
		"180 02": 180 + 2.0/60, "180°02'": 180 + 2.0/60, "180°2′": 180 + 2.0/60, "180d02m": 180 + 2.0/60,
		"180:02": 180 + 2.0/60, "180.033": 180.033, "58°39′": 58.65, "290°35'": 290 + 35.0/60, "0 00": 0,
		"359°59'": 359 + 59.0/60, "12° 30′ 30″": 12.5 + 30.0/3600, "7deg 5min": 7 + 5.0/60, "45": 45,
	}
	for in, want := range good {
		got, err := ParseAngle(in)
		if err != nil || math.Abs(got-want) > 1e-9 {
			t.Errorf("ParseAngle(%q) = %v, %v; want %v", in, got, err, want)
		}
	}
	for _, bad := range []string{"180 60", "180°75'", "-3 10", "360 00", "400", "green", "", "180 02 99s", "12..5"} {
		if v, err := ParseAngle(bad); err == nil {
			t.Errorf("ParseAngle(%q) accepted as %v", bad, v)
		}
	}
	if s := FormatAngle(199 + 10.0/60); s != "199°10′" {
		t.Errorf("FormatAngle = %s", s)
	}
}

func TestReadCSVErrorsNameTheRow(t *testing.T) {
	cases := map[string]string{
		"bench,observer,lamp,line\n": "lacks the column",
		"bench,observer,lamp,line,side,reading\nB1,Ana,Hg,green,left,160 75\n":    "row 2",
		"bench,observer,lamp,line,side,reading\nB1,Ana,Hg,green,up,160 05\n":      "side",
		"bench,observer,lamp,line,side,reading,order\nB1,Ana,Hg,green,left,1,x\n": "order",
		"bench,observer,lamp,line,side,reading\nB1,,Hg,green,left,160 05\n":       "observer",
		"bench,observer,lamp,line,side,reading,vernier\nB1,A,Hg,green,left,1,C\n": "vernier",
		"bench,observer,lamp,line,side,reading\n":                                 "no readings",
		"bench,observer,lamp,line,side,reading\nB1,Ana,Hg,green,right,abc 12\n":   "row 2: reading",
		"bench,observer,lamp,line,side,reading\nB1,Ana,Hg,green,left,180 00\nx\n": "row 3",
	}
	for in, want := range cases {
		_, err := ReadCSV(strings.NewReader(in))
		if err == nil || !strings.Contains(err.Error(), want) {
			t.Errorf("%q: error %v, want %q", in, err, want)
		}
	}
}

// class writes the readings a careful observer would take with a
// 600 lines/mm grating (d sin θ = mλ, REFERENCE-DATA.md section 9) and a
// 1′ vernier, zero at 180°02′ (a typical straight-through reading, common
// practice), each reading rounded to the least count.
type classWriter struct {
	b    strings.Builder
	row  int
	rows map[string]int // "observer/line/side[/vernier]" → row
}

func newClass() *classWriter {
	c := &classWriter{rows: map[string]int{}}
	c.b.WriteString("bench,observer,lamp,line,side,reading,vernier,order\n")
	c.row = 1
	return c
}

func (c *classWriter) add(bench, obs, lamp, line, side string, deg float64, vern string, order int) {
	c.row++
	c.rows[obs+"/"+line+"/"+side+"/"+vern] = c.row
	total := int(math.Round(math.Mod(deg+360, 360) * 60))
	fmt.Fprintf(&c.b, "%s,%s,%s,%s,%s,%d %02d,%s,%d\n", bench, obs, lamp, line, side, total/60, total%60, vern, order)
}

// session adds one observer's full set; mod may alter a reading (in degrees)
// before it is written.
func (c *classWriter) session(bench, obs string, verniers []string, mod func(line, side, vern string, deg float64) float64) {
	const d = 1e6 / 600.0
	lines := []struct {
		lamp, name string
		nm         float64
	}{
		{"mercury", "violet", 404.6563}, {"mercury", "blue", 435.8328}, {"mercury", "green", 546.0735},
		{"mercury", "yellow 1", 576.9598}, {"mercury", "yellow 2", 579.0663},
		{"hydrogen", "H-alpha", 656.2795}, {"hydrogen", "H-beta", 486.1325}, {"hydrogen", "H-gamma", 434.0463},
	}
	if mod == nil {
		mod = func(_, _, _ string, deg float64) float64 { return deg }
	}
	for _, v := range verniers {
		zero := 180 + 2.0/60
		if v == "B" {
			zero = 2.0/60 + 0.05 // 180° away, with a little eccentricity
		}
		c.add(bench, obs, "mercury", "", "zero", mod("", "zero", v, zero), v, 1)
		for _, l := range lines {
			th := math.Asin(l.nm/d) * 180 / math.Pi
			c.add(bench, obs, l.lamp, l.name, "right", mod(l.name, "right", v, zero+th), v, 1)
			c.add(bench, obs, l.lamp, l.name, "left", mod(l.name, "left", v, zero-th), v, 1)
		}
	}
}

func analyzeText(t *testing.T, text string) []Observer {
	t.Helper()
	rs, err := ReadCSV(strings.NewReader(text))
	if err != nil {
		t.Fatal(err)
	}
	obs, err := Analyze(rs, Options{LinesPerMM: 600})
	if err != nil {
		t.Fatal(err)
	}
	return obs
}

// A clean class: every wavelength within 3σ of NIST (no flag), d within
// its σ of 1/600 mm, and R per observer within 2 % of CODATA R_H.
func TestCleanClassRaisesNoFlag(t *testing.T) {
	c := newClass()
	c.session("B1", "Ana", []string{""}, nil)
	c.session("B2", "Bo", []string{"A", "B"}, nil)
	for _, o := range analyzeText(t, c.b.String()) {
		if !o.Fine() {
			for _, l := range o.Lines {
				if l.Flag != nil {
					t.Errorf("%s: %s flagged: %s", o.Name, l.Name, l.Flag.Explain)
				}
			}
		}
		if math.Abs(o.DNM-1e6/600) > 3*o.DSigma {
			t.Errorf("%s: d = %.2f ± %.2f nm", o.Name, o.DNM, o.DSigma)
		}
		if o.Rydberg == nil || math.Abs(o.Rydberg.R/calibrate.RHydrogen()-1) > 0.02 {
			t.Errorf("%s: Rydberg %+v", o.Name, o.Rydberg)
		}
	}
}

// For each usual misreading, a class where one observer made it: the
// misread line is flagged with the right kind, and for a reading error the
// right row; everybody else stays clean.
func TestMisreadingsDiagnosed(t *testing.T) {
	const d = 1e6 / 600.0
	theta := func(nm float64, m int) float64 { return math.Asin(float64(m)*nm/d) * 180 / math.Pi }
	cases := []struct {
		name, obs, line, side, vern, kind string
		verniers                          []string
		mod                               func(line, side, vern string, deg float64) float64
	}{
		{name: "half degree", obs: "Cleo", line: "H-beta", side: "right", kind: KindHalfDegree, verniers: []string{""},
			mod: func(l, s, v string, deg float64) float64 {
				if l == "H-beta" && s == "right" {
					return deg + 0.5
				}
				return deg
			}},
		{name: "whole degree", obs: "Dev", line: "H-gamma", side: "left", kind: KindWholeDegree, verniers: []string{""},
			mod: func(l, s, v string, deg float64) float64 {
				if l == "H-gamma" && s == "left" {
					return deg - 1
				}
				return deg
			}},
		// The violet right reading, 194°05′, read from the far end says
		// 194°25′: 20′ off (an error near 15 divisions would be too small
		// to see).
		{name: "vernier wrong end", obs: "Eli", line: "violet", side: "right", kind: KindVernierEnd, verniers: []string{""},
			mod: func(l, s, v string, deg float64) float64 {
				if l == "violet" && s == "right" {
					m := math.Round(deg * 60)
					base := math.Floor(m/30) * 30
					return (base + 30 - (m - base)) / 60
				}
				return deg
			}},
		{name: "another order", obs: "Fay", line: "H-beta", kind: KindOrder, verniers: []string{""},
			mod: func(l, s, v string, deg float64) float64 {
				if l == "H-beta" {
					z := 180 + 2.0/60
					if s == "right" {
						return z + theta(486.1325, 2)
					}
					return z - theta(486.1325, 2)
				}
				return deg
			}},
		{name: "neighbouring line", obs: "Gus", line: "yellow 1", kind: KindNeighbour, verniers: []string{""},
			mod: func(l, s, v string, deg float64) float64 {
				if l == "yellow 1" {
					z := 180 + 2.0/60
					if s == "right" {
						return z + theta(579.0663, 1)
					}
					return z - theta(579.0663, 1)
				}
				return deg
			}},
		{name: "wrong vernier", obs: "Hal", line: "H-alpha", side: "left", vern: "A", kind: KindVernierAB, verniers: []string{"A", "B"},
			mod: func(l, s, v string, deg float64) float64 {
				if l == "H-alpha" && s == "left" && v == "A" {
					return deg + 180
				}
				return deg
			}},
	}
	for _, tc := range cases {
		c := newClass()
		c.session("B1", "Ana", []string{""}, nil)
		c.session("B1", tc.obs, tc.verniers, tc.mod)
		obs := analyzeText(t, c.b.String())
		for _, o := range obs {
			if o.Name == "Ana" {
				if !o.Fine() {
					t.Errorf("%s: the clean observer got a flag", tc.name)
				}
				continue
			}
			var got *Line
			for i := range o.Lines {
				if o.Lines[i].Asked == tc.line {
					got = &o.Lines[i]
				}
			}
			if got == nil || got.Flag == nil {
				t.Errorf("%s: line %s not flagged", tc.name, tc.line)
				continue
			}
			if got.Flag.Kind != tc.kind {
				t.Errorf("%s: diagnosed as %q (%s), want %q", tc.name, got.Flag.Kind, got.Flag.Explain, tc.kind)
			}
			if tc.side != "" {
				if want := c.rows[tc.obs+"/"+tc.line+"/"+tc.side+"/"+tc.vern]; got.Flag.Row != want {
					t.Errorf("%s: points at row %d, want %d", tc.name, got.Flag.Row, want)
				}
			}
			if math.Abs(got.Flag.CorrectedNM-got.RefNM) > 1 && tc.kind != KindNeighbour {
				t.Errorf("%s: corrected reading gives %.3f nm, reference %.4f", tc.name, got.Flag.CorrectedNM, got.RefNM)
			}
			t.Logf("%s: %s", tc.name, got.Flag.Explain)
		}
	}
}

func TestSidesSwappedIsNoted(t *testing.T) {
	c := newClass()
	c.session("B1", "Ivy", []string{""}, func(l, s, v string, deg float64) float64 {
		if l == "blue" {
			return 2*(180+2.0/60) - deg // the left reading written as right and back
		}
		return deg
	})
	o := analyzeText(t, c.b.String())[0]
	for _, l := range o.Lines {
		if l.Asked == "blue" {
			if l.Flag == nil || l.Flag.Kind != KindSides {
				t.Errorf("blue: flag %+v", l.Flag)
			}
		} else if l.Flag != nil {
			t.Errorf("%s flagged: %s", l.Asked, l.Flag.Explain)
		}
	}
}

func TestWrapThroughZero(t *testing.T) {
	// Zero at 0°10′: the left readings fall below 0°, written near 360°.
	c := newClass()
	c.b.Reset()
	c.b.WriteString("bench,observer,lamp,line,side,reading\n")
	th := math.Asin(546.0735/(1e6/600)) * 180 / math.Pi
	z := 10.0 / 60
	fmt.Fprintf(&c.b, "B9,Jo,Hg,green,zero,%s\n", FormatAngle(z))
	fmt.Fprintf(&c.b, "B9,Jo,Hg,green,right,%s\n", FormatAngle(z+th))
	fmt.Fprintf(&c.b, "B9,Jo,Hg,green,left,%s\n", FormatAngle(z-th))
	fmt.Fprintf(&c.b, "B9,Jo,Hg,435.8,left,%s\n", FormatAngle(z-math.Asin(435.8328/(1e6/600))*180/math.Pi))
	o := analyzeText(t, c.b.String())[0]
	if math.Abs(o.Lines[0].ThetaDeg-th) > 1.0/60 {
		t.Errorf("θ = %.4f°, want %.4f°", o.Lines[0].ThetaDeg, th)
	}
	b := o.Lines[1]
	if b.Method != "one side against zero" || math.Abs(b.NM-435.8328) > 1 || b.Resolved == "" {
		t.Errorf("blue from one side: %+v", b)
	}
}

func FuzzParseAngle(f *testing.F) {
	for _, s := range []string{"180 02", "180°02'", "180d02m", "180:02", "180.033", "359 59", "12° 30′ 30″"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		v, err := ParseAngle(s)
		if err == nil && (v < 0 || v >= 360 || math.IsNaN(v)) {
			t.Fatalf("%q → %v", s, v)
		}
	})
}

func FuzzReadCSV(f *testing.F) {
	f.Add("bench,observer,lamp,line,side,reading\nB1,Ana,Hg,green,left,160 54\n")
	f.Add("bench,observer,lamp,line,side,reading,vernier,order\nB1,Ana,Hg,green,right,199°10',A,2\n")
	f.Fuzz(func(t *testing.T, s string) {
		rs, err := ReadCSV(strings.NewReader(s))
		if err != nil {
			return
		}
		for _, r := range rs {
			if r.Deg < 0 || r.Deg >= 360 || r.Order < 1 {
				t.Fatalf("bad reading accepted: %+v", r)
			}
		}
		Analyze(rs, Options{LinesPerMM: 600}) // must not panic
	})
}

// A misread calibration line shifts d and so every other line: the
// diagnosis finds the one reading behind it.
func TestMisreadCalibrationLineFound(t *testing.T) {
	c := newClass()
	c.session("B3", "Kai", []string{""}, func(l, s, v string, deg float64) float64 {
		if l == "green" && s == "left" {
			return deg - 0.5
		}
		return deg
	})
	o := analyzeText(t, c.b.String())[0]
	want := c.rows["Kai/green/left/"]
	found := false
	for _, l := range o.Lines {
		if l.Flag != nil && l.Flag.Row == want && l.Flag.Kind == KindHalfDegree {
			found = true
		}
	}
	if !found {
		for _, l := range o.Lines {
			if l.Flag != nil {
				t.Logf("%s: %s", l.Asked, l.Flag.Explain)
			}
		}
		t.Errorf("the misread green reading (row %d) was not named", want)
	}
}

// A spreadsheet's CSV where the decimal mark is a comma separates fields
// with semicolons and may write decimals with a comma: read as the same
// readings as the comma-separated file (the example class), the text of
// each reading kept as written; a comma file with semicolons in its notes
// stays a comma file.
func TestReadCSVSemicolons(t *testing.T) {
	raw, err := os.ReadFile(filepath.Join("..", "..", "testdata", "vernier", "class-b12.csv"))
	if err != nil {
		t.Fatal(err)
	}
	want, err := ReadCSV(bytes.NewReader(raw))
	if err != nil {
		t.Fatal(err)
	}
	semi := bytes.ReplaceAll(raw, []byte(","), []byte(";"))
	got, err := ReadCSV(bytes.NewReader(semi))
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(got, want) {
		t.Errorf("semicolon file: %d readings, differ from the comma file's %d", len(got), len(want))
	}
	dec, err := ReadCSV(strings.NewReader("bench;observer;lamp;line;side;reading\nb;Ana;mercury;;zero;180°02'\nb;Ana;mercury;green;right;199°10,5'\nb;Ana;mercury;green;left;160°54'\n"))
	if err != nil || len(dec) != 3 || math.Abs(dec[1].Deg-(199+10.5/60)) > 1e-9 || dec[1].Text != "199°10,5'" {
		t.Errorf("decimal comma: %+v, %v", dec, err)
	}
	// Seconds written with a double quote, as typed in a text editor
	// (unquoted), and as a spreadsheet saves them (quoted, the quote
	// doubled).
	secs, err := ReadCSV(strings.NewReader("bench,observer,lamp,line,side,reading\nb,Ana,mercury,,zero,180°02'\nb,Ana,mercury,green,right,199°10'30\"\nb,Ana,mercury,green,left,\"160°54'15\"\"\"\n"))
	if err != nil || len(secs) != 3 || math.Abs(secs[1].Deg-(199+10.5/60)) > 1e-9 || math.Abs(secs[2].Deg-(160+54.25/60)) > 1e-9 {
		t.Errorf("seconds with a double quote: %+v, %v", secs, err)
	}
	notes, err := ReadCSV(strings.NewReader("bench,observer,lamp,line,side,reading,note\nb,Ana,mercury,,zero,180°02',lamp warm; bench 3 noisy; redo\n"))
	if err != nil || len(notes) != 1 || notes[0].Note != "lamp warm; bench 3 noisy; redo" {
		t.Errorf("notes with semicolons: %+v, %v", notes, err)
	}
}

var rowNumber = regexp.MustCompile(`row \d+`)

// One observer who read no calibration line (and no grating given) is
// left unchecked with the reason; the class's other observers come out
// exactly as they do without that observer's rows. With nobody checkable
// Analyze fails.
func TestAnalyzeGoesOnPastAnObserver(t *testing.T) {
	raw, err := os.ReadFile("../../testdata/vernier/class-b12.csv")
	if err != nil {
		t.Fatal(err)
	}
	var gap, without []string
	for i, ln := range strings.Split(strings.TrimSpace(string(raw)), "\n") {
		isTomas := i > 0 && strings.HasPrefix(ln, "bench1,Tomas,")
		if !(isTomas && strings.Contains(ln, ",green,")) {
			gap = append(gap, ln)
		}
		if !isTomas {
			without = append(without, ln)
		}
	}
	read := func(lines []string) []Reading {
		rs, err := ReadCSV(strings.NewReader(strings.Join(lines, "\n") + "\n"))
		if err != nil {
			t.Fatal(err)
		}
		return rs
	}
	got, err := Analyze(read(gap), Options{})
	if err != nil {
		t.Fatal(err)
	}
	want, err := Analyze(read(without), Options{})
	if err != nil {
		t.Fatal(err)
	}
	var rest []Observer
	for _, o := range got {
		if o.Bench == "bench1" && o.Name == "Tomas" {
			if !strings.Contains(o.Error, "no calibration line") || len(o.Lines) != 0 || o.Fine() {
				t.Errorf("Tomas, with no green line: error %q, %d lines, fine %v", o.Error, len(o.Lines), o.Fine())
			}
			continue
		}
		rest = append(rest, o)
	}
	if len(rest) != len(want) || len(rest) == 0 {
		t.Fatalf("%d observers checked beside Tomas, want %d", len(rest), len(want))
	}
	// The CSV row numbers differ by the rows left out; nothing else may.
	unrowed := func(obs []Observer) []Observer {
		out := append([]Observer(nil), obs...)
		for k := range out {
			out[k].Lines = append([]Line(nil), out[k].Lines...)
			for i := range out[k].Lines {
				l := &out[k].Lines[i]
				l.Rows = nil
				if l.Flag != nil {
					f := *l.Flag
					f.Row, f.Explain = 0, rowNumber.ReplaceAllString(f.Explain, "row")
					l.Flag = &f
				}
			}
		}
		return out
	}
	if a, b := unrowed(rest), unrowed(want); !reflect.DeepEqual(a, b) {
		for k := range a {
			if !reflect.DeepEqual(a[k], b[k]) {
				t.Errorf("%s / %s differs from the class's analysis without Tomas:\n got %+v\nwant %+v", a[k].Bench, a[k].Name, a[k], b[k])
			}
		}
	}
	var tomas []string
	for i, ln := range gap {
		if i == 0 || strings.HasPrefix(ln, "bench1,Tomas,") {
			tomas = append(tomas, ln)
		}
	}
	if _, err := Analyze(read(tomas), Options{}); err == nil || !strings.Contains(err.Error(), "bench bench1, observer Tomas") {
		t.Errorf("no observer checkable: error %v, want one naming Tomas", err)
	}
}
