package main

import (
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"
	"strings"

	"lineshot/calibrate/vernier"
)

const vernierUsage = `Usage: lineshot vernier [options] READINGS.csv

Checks a class's spectrometer readings (circular scale and vernier, first
order, both sides of the straight-through position): angles to wavelengths
with d·sin θ = m·λ, the grating spacing d from the calibration line (mercury
green unless told), a Rydberg constant per observer, and for every line more
than 3σ from its reference the usual misreading that explains it, with the
corrected reading and the wavelength it gives.

READINGS.csv has a header and at least the columns
bench,observer,lamp,line,side,reading; optional vernier (A/B), order, note.
See README.md for the format and an example class.

Examples:
  lineshot vernier --lines-per-mm 600 class-tuesday.csv
  lineshot vernier --least-count 0.5 --csv checked.csv --json class.csv > class.json
`

func runVernier(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("vernier", vernierUsage, stderr)
	lpm := fs.Float64("lines-per-mm", 0, "nominal grating ruling (used where no calibration line was read, and as a check)")
	dUM := fs.Float64("d-um", 0, "nominal grating spacing in µm, instead of --lines-per-mm")
	lc := fs.Float64("least-count", 1, "vernier least count, arc-minutes")
	cal := fs.Float64Slice("calibration-line", []float64{546.0735}, "reference line(s) that fix d, air nm")
	csvOut := fs.String("csv", "", "also write the per-line table to this CSV file")
	against := fs.String("against", "", "results.json of 'lineshot batch' for the same benches: compare each line with the photo measurement")
	asJSON := fs.Bool("json", false, "print JSON instead of tables")
	if err := parse(fs, args); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		fs.Usage()
		return usagef("vernier: give one readings file")
	}
	if err := outside("vernier", "d-um", *dUM, 0, 1000, " µm"); err != nil {
		return err
	}
	if err := outside("vernier", "lines-per-mm", *lpm, 0, 10000, ""); err != nil {
		return err
	}
	if *dUM > 0 {
		if *lpm > 0 {
			return usagef("vernier: give --lines-per-mm or --d-um, not both")
		}
		*lpm = 1e3 / *dUM
	}
	// The batch's range (its --readings): below 0.6″ is no vernier's.
	if err := outside("vernier", "least-count", *lc, minLeastCount, 30, " arc-minutes"); err != nil {
		return err
	}
	path := fs.Arg(0)
	if err := clobbers("vernier", "--csv", *csvOut, path, *against); err != nil {
		return err
	}
	f, err := os.Open(path)
	if err != nil {
		return err
	}
	defer f.Close()
	rs, err := vernier.ReadCSV(f)
	if err != nil {
		return fmt.Errorf("%s: %v", path, err)
	}
	opt := vernier.Options{LinesPerMM: *lpm, LeastCountArcmin: *lc, CalibrationNM: *cal}
	if *against != "" {
		raw, err := os.ReadFile(*against)
		if err != nil {
			return err
		}
		var d batchDoc
		if err := json.Unmarshal(raw, &d); err != nil || d.Tool != "lineshot" {
			return fmt.Errorf("%s: not a lineshot batch result", *against)
		}
		opt.Photo = photoWavelengths(d)
	}
	obs, err := vernier.Analyze(rs, opt)
	if err != nil {
		return fmt.Errorf("%s: %v", path, err)
	}
	if *csvOut != "" {
		if err := writeFileAtomic(*csvOut, func(w io.Writer) error { return vernierCSV(w, obs) }); err != nil {
			return err
		}
	}
	if *asJSON {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		if err := enc.Encode(map[string]any{"file": path, "observers": obs, "summary": classSummary(obs)}); err != nil {
			return err
		}
		return notChecked(stderr, path, obs)
	}
	printVernier(stdout, path, obs)
	return notChecked(stderr, path, obs)
}

// notChecked names, a line each, the observers whose readings could not
// be checked, and then reports the command as partly failed.
func notChecked(stderr io.Writer, path string, obs []vernier.Observer) error {
	n := 0
	for _, o := range obs {
		if o.Error != "" {
			say(stderr, "lineshot: %s: %s", path, notCheckedReason(o))
			n++
		}
	}
	if n > 0 {
		return errReported
	}
	return nil
}

// notCheckedReason is the failure line of an observer whose readings
// could not be checked (stderr, and a batch's failures).
func notCheckedReason(o vernier.Observer) string {
	return fmt.Sprintf("bench %s, observer %s: not checked: %s", o.Bench, o.Name, o.Error)
}

// notCheckedSummary is such an observer's line in the output and the
// class summary.
func notCheckedSummary(o vernier.Observer) string {
	return fmt.Sprintf("%s / %s: not checked: %s", o.Bench, o.Name, o.Error)
}

func printVernier(w io.Writer, path string, obs []vernier.Observer) {
	for _, o := range obs {
		if o.Error != "" {
			fmt.Fprintf(w, "%s\n\n", notCheckedSummary(o))
			continue
		}
		fmt.Fprintf(w, "%s / %s: d = %.2f ± %.2f nm (%.1f lines/mm)", o.Bench, o.Name, o.DNM, o.DSigma, 1e6/o.DNM)
		if o.DFromNominal {
			fmt.Fprint(w, " (nominal)")
		}
		fmt.Fprintln(w)
		fmt.Fprintf(w, "  %-10s %-12s %9s %7s %10s %7s %10s %6s %10s  %s\n", "line", "reference", "θ", "±′", "λ air nm", "±nm", "ref nm", "z", "photo nm", "check")
		for _, l := range o.Lines {
			check := "ok"
			switch {
			case l.Calibration:
				check = "calibrates d"
			case l.Flag != nil:
				check = l.Flag.Kind
			}
			photo := "-"
			if l.PhotoNM > 0 {
				photo = fmt.Sprintf("%.3f", l.PhotoNM)
				if math.Abs(l.PhotoZ) > 3 && l.Flag == nil {
					check = fmt.Sprintf("%.1fσ from the photo", l.PhotoZ)
				}
			}
			fmt.Fprintf(w, "  %-10s %-12s %9s %7.2f %10.3f %7.3f %10.4f %+6.1f %10s  %s\n", l.Asked, l.Name, vernier.FormatAngle(l.ThetaDeg),
				l.ThetaSigma*60, l.NM, l.SigmaNM, l.RefNM, l.Z, photo, check)
		}
		for _, l := range o.Lines {
			if l.Flag != nil {
				fmt.Fprintf(w, "  flag: %s", l.Flag.Explain)
				if l.Flag.Kind != vernier.KindUnexplained && l.Flag.Kind != vernier.KindSides {
					fmt.Fprintf(w, " → %.3f nm", l.Flag.CorrectedNM)
				}
				fmt.Fprintln(w)
			}
		}
		if r := o.Rydberg; r != nil {
			fmt.Fprintf(w, "  R = %.0f ± %.0f m⁻¹ from n = %v: %+.2f %% (%+.1fσ) from CODATA 2018 R_H\n", r.R, r.Sigma, r.LinesUsed, r.DevPercent, r.DevSigma)
		}
		if o.RydbergNote != "" {
			fmt.Fprintf(w, "  %s\n", o.RydbergNote)
		}
		for _, n := range o.Notes {
			fmt.Fprintf(w, "  note: %s\n", n)
		}
		fmt.Fprintln(w)
	}
	seen := map[string]bool{}
	var names []string
	for _, o := range obs {
		for _, l := range o.Lines {
			if l.Resolved != "" && !seen[l.Resolved] {
				seen[l.Resolved] = true
				names = append(names, l.Resolved)
			}
		}
	}
	if len(names) > 0 {
		fmt.Fprintf(w, "line names resolved: %s\n\n", strings.Join(names, "; "))
	}
	fmt.Fprintf(w, "class summary (%s):\n", path)
	for _, s := range classSummary(obs) {
		fmt.Fprintf(w, "  %s\n", s)
	}
}

// classSummary says in one line per observer who is fine and who must
// re-measure which line and why.
func classSummary(obs []vernier.Observer) []string {
	var out []string
	for _, o := range obs {
		if o.Error != "" {
			out = append(out, notCheckedSummary(o))
			continue
		}
		if o.Fine() {
			out = append(out, fmt.Sprintf("%s / %s: fine", o.Bench, o.Name))
			continue
		}
		var todo []string
		for _, l := range o.Lines {
			if l.Flag == nil || l.Flag.Kind == vernier.KindSides {
				continue
			}
			what := l.Flag.Kind
			if l.Flag.Row > 0 && l.Flag.Corrected != "" {
				what += fmt.Sprintf(" (row %d: %s → %s)", l.Flag.Row, l.Flag.Was, l.Flag.Corrected)
			}
			todo = append(todo, fmt.Sprintf("%s: %s", l.Asked, what))
		}
		out = append(out, fmt.Sprintf("%s / %s: check or re-measure %s", o.Bench, o.Name, strings.Join(todo, "; ")))
	}
	return out
}

// photoWavelengths collects, per bench of a batch result, the mean
// calibrated wavelength of each identified reference line.
func photoWavelengths(d batchDoc) map[string]map[float64]float64 {
	out := map[string]map[float64]float64{}
	for _, b := range d.Benches {
		sum, n := map[float64]float64{}, map[float64]float64{}
		for _, r := range append(append([]imageResult(nil), b.CalPhotos...), b.Photos...) {
			if r.Calibration == nil {
				continue
			}
			for _, l := range r.Lines {
				if l.RefNM > 0 {
					sum[l.RefNM] += l.WavelengthNM
					n[l.RefNM]++
				}
			}
		}
		m := map[float64]float64{}
		for k, s := range sum {
			m[k] = s / n[k]
		}
		out[b.Name] = m
	}
	return out
}

func vernierCSV(w io.Writer, obs []vernier.Observer) error {
	cw := csv.NewWriter(w)
	cw.Write([]string{"bench", "observer", "line", "reference", "ref_nm", "order", "theta_deg", "theta_err_deg", "wavelength_nm", "wavelength_err_nm", "z", "flag", "row", "recorded", "corrected", "corrected_nm", "explain", "photo_nm"})
	f := func(v float64, p int) string { return strconv.FormatFloat(v, 'f', p, 64) }
	for _, o := range obs {
		if o.Error != "" {
			rec := make([]string, 18)
			rec[0], rec[1], rec[11], rec[16] = o.Bench, o.Name, "not checked", o.Error
			if err := cw.Write(rec); err != nil {
				return err
			}
			continue
		}
		for _, l := range o.Lines {
			rec := []string{o.Bench, o.Name, l.Asked, l.Name, f(l.RefNM, 4), strconv.Itoa(l.Order), f(l.ThetaDeg, 5), f(l.ThetaSigma, 5), f(l.NM, 4), f(l.SigmaNM, 4), f(l.Z, 2), "", "", "", "", "", "", ""}
			if l.PhotoNM > 0 {
				rec[17] = f(l.PhotoNM, 4)
			}
			if fl := l.Flag; fl != nil {
				rec[11], rec[12], rec[13], rec[14], rec[15], rec[16] = fl.Kind, strconv.Itoa(fl.Row), fl.Was, fl.Corrected, f(fl.CorrectedNM, 4), fl.Explain
			}
			if err := cw.Write(rec); err != nil {
				return err
			}
		}
	}
	cw.Flush()
	return cw.Error()
}
