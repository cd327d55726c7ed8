package main

import (
	"bufio"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"
	"strings"

	"lineshot/peaks"
)

const peaksUsage = `Usage: lineshot peaks [options] --profile FILE.csv

Finds and measures the lines of a 1-D profile you already have (from another
instrument, or exported from elsewhere): one intensity per line, or two
columns position,intensity (positions increasing). A header line and lines
starting with # are skipped.

Examples:
  lineshot peaks --profile scan.csv
  lineshot peaks --profile scan.csv --min-snr 8 --json
`

func runPeaks(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("peaks", peaksUsage, stderr)
	path := fs.String("profile", "", "profile CSV to read")
	minSNR := fs.Float64("min-snr", 5, "least line height and prominence, in units of the profile noise (1-1000)")
	gain := fs.Float64("gain", 0, "profile units per detected photoelectron, to weight by shot noise; 0: unknown")
	asJSON := fs.Bool("json", false, "print JSON instead of a table")
	if err := parse(fs, args); err != nil {
		return err
	}
	if *path == "" {
		fs.Usage()
		return usagef("peaks: --profile FILE is required")
	}
	if err := outside("peaks", "min-snr", *minSNR, 1, 1000, " (noise σ)"); err != nil {
		return err
	}
	if err := outside("peaks", "gain", *gain, 0, 1e9, " units per photoelectron"); err != nil {
		return err
	}
	f, err := os.Open(*path)
	if err != nil {
		return err
	}
	defer f.Close()
	pos, y, err := parseProfileCSV(f)
	if err != nil {
		return fmt.Errorf("%s: %w", *path, err)
	}
	r, err := peaks.Find(y, peaks.Options{MinSNR: *minSNR, Gain: *gain})
	if err != nil {
		return fmt.Errorf("%s: %w", *path, err)
	}
	type row struct {
		Position    float64 `json:"position"`
		PositionErr float64 `json:"position_err"`
		FWHM        float64 `json:"fwhm"`
		Height      float64 `json:"height"`
		Area        float64 `json:"area"`
		SNR         float64 `json:"snr"`
		Prominence  float64 `json:"prominence"`
		Sample      float64 `json:"sample"`
		Blend       bool    `json:"blend"`
		Unresolved  bool    `json:"unresolved"`
		Method      string  `json:"method"`
	}
	var rows []row
	for _, p := range r.Peaks {
		x, scale := atSample(pos, p.Center)
		rows = append(rows, row{Position: x, PositionErr: p.Sigma * scale, FWHM: p.FWHM * scale, Height: p.Height,
			Area: p.Area * scale, SNR: p.SNR, Prominence: p.Prominence, Sample: p.Center, Blend: p.Blend, Unresolved: p.Unresolved, Method: p.Method})
	}
	if *asJSON {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(map[string]any{"file": *path, "samples": len(y), "noise": r.Noise, "lines": rows})
	}
	fmt.Fprintf(stdout, "%s: %d samples, noise %.4g, %d lines\n", *path, len(y), r.Noise, len(rows))
	fmt.Fprintf(stdout, "  %12s %9s %8s %11s %8s %11s  %s\n", "position", "±", "FWHM", "height", "SNR", "prominence", "notes")
	for _, x := range rows {
		var notes []string
		if x.Blend {
			notes = append(notes, "fitted with its neighbour")
		}
		if x.Unresolved {
			notes = append(notes, "wide: possibly an unresolved blend")
		}
		if x.Method != "gauss" {
			notes = append(notes, "centre of gravity (fit failed)")
		}
		fmt.Fprintf(stdout, "  %12.4f %9.4f %8.3f %11.4g %8.1f %11.4g  %s\n", x.Position, x.PositionErr, x.FWHM, x.Height, x.SNR, x.Prominence, strings.Join(notes, "; "))
	}
	return nil
}

// atSample maps a fractional sample index to a position by linear
// interpolation, with the local spacing (position units per sample).
func atSample(pos []float64, s float64) (float64, float64) {
	if pos == nil {
		return s, 1
	}
	i := int(math.Floor(s))
	i = max(0, min(len(pos)-2, i))
	step := pos[i+1] - pos[i]
	return pos[i] + (s-float64(i))*step, step
}

// parseProfileCSV reads one intensity per line or position,intensity
// pairs. Errors name the line.
func parseProfileCSV(r io.Reader) (pos, y []float64, err error) {
	sc := bufio.NewScanner(r)
	sc.Buffer(make([]byte, 64*1024), 1024*1024)
	cols := 0
	line := 0
	for sc.Scan() {
		line++
		text := strings.TrimSpace(sc.Text())
		if text == "" || strings.HasPrefix(text, "#") {
			continue
		}
		fields := strings.FieldsFunc(text, func(r rune) bool { return r == ',' || r == ';' || r == '\t' || r == ' ' })
		vals := make([]float64, len(fields))
		numeric := true
		for k, f := range fields {
			v, err := strconv.ParseFloat(f, 64)
			if err != nil || !finite(v) {
				numeric = false
				break
			}
			vals[k] = v
		}
		if !numeric {
			if len(y) == 0 && cols == 0 {
				continue // a header
			}
			return nil, nil, fmt.Errorf("line %d: %q is not a number", line, text)
		}
		if cols == 0 {
			cols = len(vals)
			if cols != 1 && cols != 2 {
				return nil, nil, fmt.Errorf("line %d: %d columns; want one (intensity) or two (position,intensity)", line, cols)
			}
		} else if len(vals) != cols {
			return nil, nil, fmt.Errorf("line %d: %d columns, earlier lines had %d", line, len(vals), cols)
		}
		if cols == 2 {
			if len(pos) > 0 && vals[0] <= pos[len(pos)-1] {
				return nil, nil, fmt.Errorf("line %d: position %g does not increase", line, vals[0])
			}
			pos = append(pos, vals[0])
			y = append(y, vals[1])
		} else {
			y = append(y, vals[0])
		}
		if len(y) > 10_000_000 {
			return nil, nil, fmt.Errorf("more than 10 million samples")
		}
	}
	if err := sc.Err(); err != nil {
		return nil, nil, err
	}
	if len(y) < 8 {
		return nil, nil, fmt.Errorf("%d samples; a profile needs at least 8", len(y))
	}
	return pos, y, nil
}
