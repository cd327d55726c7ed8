// Command lineshot measures emission-line wavelengths in photographs of
// spectra and fits the Rydberg constant to hydrogen's Balmer lines.
//
// Run "lineshot help" for the commands.
package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"os/signal"
	"strconv"
	"strings"
	"syscall"
	"unicode"

	"github.com/spf13/pflag"
)

// Exit statuses, documented in README.md.
const (
	exitOK     = 0
	exitFailed = 1 // some input could not be measured
	exitUsage  = 2 // the command line was wrong
)

// usageError marks errors in the command line itself.
type usageError struct{ msg string }

func (e usageError) Error() string { return e.msg }

func usagef(format string, a ...any) error { return usageError{fmt.Sprintf(format, a...)} }

func main() {
	ctx, stop := interruptible(os.Stderr)
	out := &checkedWriter{w: os.Stdout}
	err := run(ctx, os.Args[1:], out, os.Stderr)
	stop()
	if err == nil && out.err != nil {
		// A table sent to a file on a full disk: not a silent success.
		err = fmt.Errorf("the output could not be written: %v", errNoPath(out.err))
	}
	os.Exit(exitCode(err, os.Stderr))
}

// checkedWriter passes writes on to w until one fails, and keeps that
// error: the commands print their tables without checking every write.
type checkedWriter struct {
	w   io.Writer
	err error
}

func (c *checkedWriter) Write(p []byte) (int, error) {
	if c.err != nil {
		return 0, c.err
	}
	n, err := c.w.Write(p)
	c.err = err
	return n, err
}

// interruptible returns a context that the first Ctrl-C (SIGINT) cancels:
// the work stops after what is in hand, and a batch still writes its
// outputs. It says so on stderr, and a second Ctrl-C then ends the
// process at once, as Ctrl-C usually does (every file is written
// atomically: a file being written is left as it was, or not made).
// SIGTERM (kill, timeout, a machine shutting down) and SIGHUP (the
// terminal or the SSH session gone) are taken the same way: by default they
// ended the process at once, leaving the photos in hand unmeasured, this
// run's outputs unwritten and any file being written as a hidden
// temporary beside it.
func interruptible(stderr io.Writer) (context.Context, context.CancelFunc) {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM, syscall.SIGHUP)
	go func() {
		<-ctx.Done()
		cause := context.Cause(ctx)
		switch {
		case cause == context.Canceled: // stop(), not a signal
		case strings.HasPrefix(cause.Error(), "interrupt"):
			fmt.Fprintln(stderr, "lineshot: stopping after the work in hand (Ctrl-C again to stop at once)")
		default:
			fmt.Fprintf(stderr, "lineshot: %v: stopping after the work in hand (a second signal stops at once)\n", cause)
		}
		stop()
	}()
	return ctx, stop
}

// exitCode prints err in the tool's voice and returns the exit status.
func exitCode(err error, stderr io.Writer) int {
	var ue usageError
	switch {
	case err == nil, errors.Is(err, pflag.ErrHelp):
		return exitOK
	case errors.As(err, &ue):
		say(stderr, "lineshot: %v", err)
		fmt.Fprintln(stderr, "lineshot: hint: run 'lineshot help' for the commands and their options")
		return exitUsage
	case errors.Is(err, errReported):
		return exitFailed
	default:
		say(stderr, "lineshot: %s", userText(err))
		return exitFailed
	}
}

// userText is err as the user reads it: a bare file-system error from
// the os package ("open /x/results.json: no such file or directory",
// "stat : no such file or directory") is given as the file and the reason,
// an empty name shown as "".
func userText(err error) string {
	var pe *fs.PathError
	if errors.As(err, &pe) && error(pe) == err {
		name := pe.Path
		if name == "" {
			name = `""`
		}
		return fmt.Sprintf("%s: %v", name, pe.Err)
	}
	return err.Error()
}

// minLeastCount is the smallest vernier least count the vernier and batch
// commands take, in arc-minutes (0.6″: the finest verniers of teaching
// spectrometers read to about 0.1′, from memory); 30′ is their largest.
const minLeastCount = 0.01

// outside is a usage error of command cmd for its option --name when v
// lies outside [lo, hi] (unit names its unit), else nil: a threshold below
// 1σ flooded a 2-million-sample profile with noise peaks for minutes, and
// a negative one made a mercury photo "cfl".
func outside(cmd, name string, v, lo, hi float64, unit string) error {
	if v >= lo && v <= hi {
		return nil
	}
	return usagef("%s: --%s %g outside %g-%g%s", cmd, name, v, lo, hi, unit)
}

// say writes one line to w, as fmt.Fprintf formats it, with any control
// character in it (a newline in a file's name, say) written as an escape:
// a reason on stderr stays one line however its file is named.
func say(w io.Writer, format string, a ...any) {
	line := fmt.Sprintf(format, a...)
	var b strings.Builder
	for _, r := range line {
		if unicode.IsControl(r) {
			q := strconv.QuoteRune(r)
			b.WriteString(q[1 : len(q)-1])
			continue
		}
		b.WriteRune(r)
	}
	b.WriteByte('\n')
	io.WriteString(w, b.String())
}

// errReported means the failures were already printed, one line each.
var errReported = errors.New("some inputs failed")

const topUsage = `lineshot measures emission lines in photographs of spectra.

Commands:
  measure    find, identify and calibrate the lines in one or more photos;
             fit the Rydberg constant when the lamp is hydrogen
  batch      measure a folder of benches' photos: calibration per bench, R per
             bench, CSV/JSON results and an HTML report; resumable
  merge      join the outputs of sharded batch runs
  peaks      find and measure the lines of a 1-D profile given as CSV
  vernier    check a class's spectrometer readings: wavelengths, R per observer,
             misreadings diagnosed
  simulate   render a synthetic photo of a lamp through a grating, with its truth
  lines      list the built-in reference lines and their sources
  help       show this text, or 'lineshot help COMMAND'

Examples:
  lineshot measure mercury.jpg
  lineshot measure --calibration-from mercury.jpg hydrogen.jpg
  lineshot measure --json --calibration-from bench2-cal.json h1.jpg h2.jpg > results.json
  lineshot peaks --profile scan.csv --json
  lineshot vernier --lines-per-mm 600 class.csv
  lineshot batch --out results/ photos/
  lineshot simulate --lamp hydrogen --lines-per-mm 600 -o h.jpg

Exit status: 0 all measured, 1 some input failed, 2 usage error.
`

func run(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	if len(args) == 0 {
		fmt.Fprint(stderr, topUsage)
		return usagef("no command given")
	}
	cmd, rest := args[0], args[1:]
	switch cmd {
	case "measure":
		return runMeasure(ctx, rest, stdout, stderr)
	case "simulate":
		return runSimulate(rest, stdout, stderr)
	case "peaks":
		return runPeaks(rest, stdout, stderr)
	case "vernier":
		return runVernier(rest, stdout, stderr)
	case "batch":
		return runBatch(ctx, rest, stdout, stderr)
	case "merge":
		return runMerge(rest, stdout, stderr)
	case "lines":
		return runLines(rest, stdout, stderr)
	case "help", "-h", "--help":
		if len(rest) > 0 {
			return run(ctx, []string{rest[0], "--help"}, stdout, stderr)
		}
		fmt.Fprint(stdout, topUsage)
		return nil
	default:
		return usagef("unknown command %q", cmd)
	}
}

// newFlags returns a flag set that reports errors instead of exiting and
// prints its usage with the given header.
func newFlags(name, header string, stderr io.Writer) *pflag.FlagSet {
	fs := pflag.NewFlagSet(name, pflag.ContinueOnError)
	fs.SetOutput(stderr)
	fs.SortFlags = false
	fs.Usage = func() {
		fmt.Fprint(stderr, header)
		fmt.Fprintln(stderr, "\nOptions:")
		fs.PrintDefaults()
	}
	return fs
}

// parse parses args and turns flag errors into usage errors.
func parse(fs *pflag.FlagSet, args []string) error {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, pflag.ErrHelp) {
			return err
		}
		return usagef("%s: %v", fs.Name(), err)
	}
	// pflag takes "NaN" and "Inf" for numbers; no option here means either,
	// and the range checks after this, comparisons all, would let NaN by.
	var bad error
	fs.Visit(func(f *pflag.Flag) {
		if f.Value.Type() != "float64" || bad != nil {
			return
		}
		if v, err := strconv.ParseFloat(f.Value.String(), 64); err != nil || !finite(v) {
			bad = usagef("%s: --%s %s: want a finite number", fs.Name(), f.Name, f.Value.String())
		}
	})
	return bad
}
