package main

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"strings"

	"lineshot/calibrate"
)

// writeFileAtomic writes a file through a temporary file beside it and a
// rename, so that a reader never sees half of it and an interrupted run
// leaves the old file (or none) in place; the data reach the disk before
// the rename (fsync), so that a power cut cannot leave an empty results
// file behind either.
func writeFileAtomic(path string, write func(w io.Writer) error) error {
	return writeAtomic(path, true, write)
}

// writeDerivedAtomic is writeFileAtomic without the flush to disk, for
// files the batch can make again: its cache records and band images. Two
// such flushes a photo cost a batch with two workers about a tenth of its
// throughput on ext4 (concurrent flushes wait for each other's journal
// commits); after a power cut a damaged record is unreadable JSON and a
// damaged image is empty, and either way the photo is measured again.
func writeDerivedAtomic(path string, write func(w io.Writer) error) error {
	return writeAtomic(path, false, write)
}

func writeAtomic(path string, durable bool, write func(w io.Writer) error) (err error) {
	dir := filepath.Dir(path)
	f, err := os.CreateTemp(dir, "."+filepath.Base(path)+".tmp-*")
	if err != nil {
		return fmt.Errorf("%s: cannot write: %w", path, errNoPath(err))
	}
	defer func() {
		if err != nil {
			f.Close()
			os.Remove(f.Name())
			err = fmt.Errorf("%s: %w", path, errNoPath(err))
		}
	}()
	if err = write(f); err != nil {
		return err
	}
	if durable {
		if err = f.Sync(); err != nil {
			return err
		}
	}
	if err = f.Close(); err != nil {
		return err
	}
	if err = os.Chmod(f.Name(), 0o644); err != nil {
		return err
	}
	return os.Rename(f.Name(), path)
}

// writeByPathAtomic is writeAtomic for writers that take a path, not an
// io.Writer (OpenCV's video writer, libheif): write makes the file under a
// temporary name beside path, ending in ext (such writers choose the
// format by it), and it is renamed to path; a failure leaves nothing.
func writeByPathAtomic(path, ext string, write func(tmp string) error) error {
	tmp := filepath.Join(filepath.Dir(path), "."+filepath.Base(path)+".tmp"+ext)
	if err := write(tmp); err != nil {
		os.Remove(tmp)
		return err
	}
	if err := os.Rename(tmp, path); err != nil {
		os.Remove(tmp)
		return err
	}
	return nil
}

// errNoPath is err without the file path an *fs.PathError (or a rename's
// *os.LinkError) carries: the atomic writer's temporary file, which the
// user never sees; its callers name the file meant.
func errNoPath(err error) error {
	var pe *fs.PathError
	if errors.As(err, &pe) {
		return pe.Err
	}
	var le *os.LinkError
	if errors.As(err, &le) {
		return le.Err
	}
	return err
}

// clobbers is a usage error of command cmd when the file its option
// would write, out, is already one of the files it reads (inputs), by
// any name (os.SameFile: a link or another path to it too): writing it
// would replace the user's photo or readings. `measure --calibration-from
// hg.jpg --save-calibration hg.jpg` turned the photo into JSON. Nil when
// out is not given or not there yet.
func clobbers(cmd, option, out string, inputs ...string) error {
	for _, in := range inputs {
		if sameFile(out, in) {
			return usagef("%s: %s %s is a file this command reads (%s): give the output a name of its own", cmd, option, out, in)
		}
	}
	return nil
}

// sameFile reports whether a and b both exist and are one file (or
// folder), by whatever names or links (os.SameFile).
func sameFile(a, b string) bool {
	sa, err1 := os.Stat(a)
	sb, err2 := os.Stat(b)
	return err1 == nil && err2 == nil && os.SameFile(sa, sb)
}

func writeJSONAtomic(path string, v any) error {
	return writeFileAtomic(path, func(w io.Writer) error { return encodeJSON(w, v) })
}

func encodeJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(v)
}

// printResults writes the human-readable tables.
func printResults(w io.Writer, doc document) {
	for _, r := range doc.Calibrations {
		fmt.Fprintln(w, "== calibration photo")
		printImage(w, r)
	}
	for _, r := range doc.Images {
		if len(doc.Calibrations) > 0 {
			fmt.Fprintln(w, "== measured photo")
		}
		printImage(w, r)
	}
}

func printImage(w io.Writer, r imageResult) {
	if r.Error != "" && len(r.Lines) == 0 {
		return // said on stderr, once
	}
	lamp := r.Lamp
	if lamp == "" {
		lamp = "not recognised"
	}
	fmt.Fprintf(w, "%s: lamp %s (confidence %.2f)", r.File, lamp, r.LampScore)
	if q := r.Quality; q != nil {
		fmt.Fprintf(w, ", band at %.2f°, profile noise %.3g", q.AngleDeg, q.ProfileNoise)
	}
	fmt.Fprintln(w)
	fmt.Fprintf(w, "  %8s %8s %10s %6s %6s %7s %10s %7s  %-14s %10s %8s\n",
		"x", "y", "pos px", "±px", "FWHM", "SNR", "λ air nm", "±nm", "line", "ref nm", "Δ nm")
	for _, l := range r.Lines {
		id, ref, delta := "-", "", ""
		switch {
		case l.ID == "zero order":
			id = l.ID
		case l.ID != "":
			id, ref, delta = l.ID, fmt.Sprintf("%.4f", l.RefNM), fmt.Sprintf("%+.3f", l.DeltaNM)
			if l.Order != 0 {
				id += fmt.Sprintf(" (%+d)", l.Order)
			}
		}
		sat := ""
		if l.Saturated {
			sat = " saturated"
			if l.Channel != "" {
				sat += " (centre from " + l.Channel + ")"
			}
		}
		fmt.Fprintf(w, "  %8.2f %8.2f %10.3f %6.3f %6.2f %7.1f %10.3f %7.3f  %-14s %10s %8s%s\n",
			l.X, l.Y, l.PositionPX, l.PositionErrPX, l.FWHMPX, l.SNR, l.WavelengthNM, l.WavelengthErrNM, id, ref, delta, sat)
	}
	if c := r.Calibration; c != nil {
		d := c.Dispersion
		fmt.Fprintf(w, "  calibration from %s (%s): model %s, %d lines, rms %.4f nm, χ²/dof %.2f/%d\n",
			c.From, c.Lamp, d.Model, len(d.Residuals), d.RMSNM, d.ChiSq, d.DOF)
		if g := c.Grating; g != nil {
			fmt.Fprintf(w, "    grating: d/m %.2f nm (%.1f lines/mm in first order), camera at %.3f°, focal length %.0f px\n",
				g.DNM, g.LinesMM, g.AngleDeg, g.FocalPX)
		}
		var models []string
		for _, m := range d.Compared {
			models = append(models, fmt.Sprintf("%s AICc %.1f", m.Model, m.AICc))
		}
		if len(models) > 1 {
			fmt.Fprintf(w, "    models compared: %s\n", strings.Join(models, ", "))
		}
		fmt.Fprintf(w, "    %-14s %10s %10s %9s %8s\n", "line", "ref nm", "fit nm", "resid nm", "resid px")
		for _, res := range d.Residuals {
			name := res.Line
			if res.Order != 0 {
				name += fmt.Sprintf(" (%+d)", res.Order)
			}
			fmt.Fprintf(w, "    %-14s %10.4f %10.4f %+9.4f %+8.3f\n", name, res.RefNM, res.FitNM, res.ResidNM, res.ResidPX)
		}
		if d.Signed {
			fmt.Fprintln(w, "    (signed fit across the zero order: (+1) and (-1) are the two first orders)")
		}
	}
	if y := r.Rydberg; y != nil {
		fmt.Fprintf(w, "  Rydberg constant from %d Balmer lines (vacuum wavelengths, IAU/Morton 2000):\n", len(y.LinesUsed))
		fmt.Fprintf(w, "    R = %.0f ± %.0f m⁻¹   χ²/dof %.2f/%d\n", y.R, y.Sigma, y.ChiSq, y.DOF)
		if y.Scaled {
			fmt.Fprintf(w, "    (σ widened from %.0f by sqrt(χ²/dof): the lines scatter more than their errors say)\n", y.SigmaStat)
		}
		fmt.Fprintf(w, "    CODATA 2018 R_H = %.2f m⁻¹: deviation %+.2fσ (%+.4f %%); against R∞ %+.4f %%\n",
			y.RH, y.DevSigma, y.DevPercent, y.DevRInfPct)
		if y.RRef != 0 {
			fmt.Fprintf(w, "    the same fit to the NIST wavelengths of these lines gives %.0f m⁻¹ (the Bohr formula's own limit): deviation %+.2fσ\n",
				y.RRef, y.DevRefSigma)
		}
		fmt.Fprintf(w, "    ground-state energy h·c·R = %.5f ± %.5f eV (hydrogen ionisation energy 13.59843 eV, NIST Handbook)\n", y.EnergyEV, y.EnergySig)
		if y.InterceptSigma > 0 {
			fmt.Fprintf(w, "    check, free intercept: 1/λ = (%.0f ± %.0f) + (%.0f ± %.0f)·(1/4 − 1/n²) m⁻¹\n",
				y.Intercept, y.InterceptSigma, y.SlopeFree, y.SlopeFreeSigma)
		}
	}
	for _, wn := range r.Warnings {
		fmt.Fprintf(w, "  warning: %s\n", wn)
	}
	if r.Error != "" {
		fmt.Fprintf(w, "  failed: %s\n", r.Error)
	}
	fmt.Fprintln(w)
}

// runLines prints the built-in reference lines with their sources.
func runLines(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("lines", "Usage: lineshot lines [LAMP]\n\nLists the built-in reference lines (air wavelengths) and where each value comes from.\n", stderr)
	if err := parse(fs, args); err != nil {
		return err
	}
	lamps := calibrate.Lamps()
	if fs.NArg() > 0 {
		l, err := calibrate.LampByName(fs.Arg(0))
		if err != nil {
			return usagef("lines: %v", err)
		}
		lamps = []calibrate.Lamp{l}
	}
	for _, l := range lamps {
		fmt.Fprintf(stdout, "%s\n", l.Name)
		for _, ln := range l.Lines {
			fmt.Fprintf(stdout, "  %-10s %11.5f nm air %11.5f nm vacuum  strength %.2f  %s\n",
				ln.Name, ln.NM, calibrate.AirToVacuum(ln.NM), ln.Strength, ln.Source)
		}
	}
	return nil
}
