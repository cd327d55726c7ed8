package main

import (
	"bufio"
	"bytes"
	"cmp"
	"context"
	"crypto/sha256"
	"encoding/csv"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"hash/fnv"
	"io"
	"io/fs"
	"maps"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"runtime/debug"
	"runtime/metrics"
	"slices"
	"sort"
	"strconv"
	"strings"
	"sync"
	"unicode/utf8"

	"github.com/schollz/progressbar/v3"
	"golang.org/x/sync/errgroup"
	"golang.org/x/term"

	"lineshot/calibrate"
	"lineshot/calibrate/vernier"
	"lineshot/imaging"
	"lineshot/peaks"
)

const batchUsage = `Usage: lineshot batch [options] --out OUTDIR DIR

Measures a whole lab's photos. Every folder under DIR that holds images is one
fixed setup (a bench). lineshot sorts each bench's photos by lamp on its own,
calibrates the bench from its calibration-lamp photos (all of them in one fit),
measures the hydrogen photos and fits R per photo and per bench. Results go to
OUTDIR: results.csv (a row per line), results.json (everything), one
calibration file per bench, and report.html (one page, opens offline).
Nothing is written into DIR. Running again skips photos already measured and
unchanged; Ctrl-C stops cleanly and keeps what was finished.

A bench folder may hold a settings file named lineshot-bench.txt:
  # comments start with #
  lines-per-mm: 600               # nominal grating (the grating model uses it)
  calibration: hg1.jpg hg2.jpg    # these files calibrate, whatever they look like
  lamp: odd.jpg helium            # this file shows this lamp
  exclude: blurred.jpg            # leave this file out
  dark: off1.jpg off2.jpg         # lamp off: averaged and subtracted from every other photo

A video file in a bench folder is measured as one photo, its frames averaged.

Examples:
  lineshot batch --out results/ photos/
  lineshot batch -j 2 --quiet --out results/ photos/
  lineshot batch --shard 2/4 --out part2/ photos/ && lineshot merge --out all/ part1/ part2/ part3/ part4/
`

// settingsFile is the per-bench settings file's name.
const settingsFile = "lineshot-bench.txt"

// imageExts are the file endings taken as photos.
var imageExts = func() map[string]bool {
	m := map[string]bool{".jpg": true, ".jpeg": true, ".png": true, ".tif": true, ".tiff": true, ".bmp": true, ".webp": true}
	for _, e := range imaging.HEIFExts {
		m[e] = true
	}
	return m
}()

func runBatch(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	return batchMain(ctx, args, stdout, stderr, nil)
}

// batchMain is runBatch with a hook called after each photo (with the
// number finished so far), which tests use to interrupt a run midway.
func batchMain(ctx context.Context, args []string, stdout, stderr io.Writer, onPhoto func(done int)) error {
	fsf := newFlags("batch", batchUsage, stderr)
	out := fsf.StringP("out", "o", "", "output folder (created if missing)")
	jobs := fsf.IntP("jobs", "j", runtime.GOMAXPROCS(0), "photos measured at once")
	photoThreads := fsf.Int("photo-threads", 0, "goroutines sharing the work on one photo (default: the CPUs left over by --jobs, at least 1)")
	quiet := fsf.BoolP("quiet", "q", false, "no progress bar")
	shard := fsf.String("shard", "", "measure only part i of n of the benches (i/n, 1-based), for spreading a large archive over machines")
	minSNR := fsf.Float64("min-snr", 5, "least line height and prominence, in units of the profile noise (1-1000)")
	readings := fsf.String("readings", "", "a class's vernier readings (CSV, see 'lineshot help vernier'), checked against the photos of the same benches and added to the report")
	lc := fsf.Float64("least-count", 1, "with --readings: the vernier least count, arc-minutes")
	if err := parse(fsf, args); err != nil {
		return err
	}
	if *out != "" {
		for _, name := range []string{"results.json", "results.csv", "report.html"} {
			if err := clobbers("batch", "--out", filepath.Join(*out, name), *readings); err != nil {
				return err
			}
		}
	}
	var class []vernier.Reading
	if *readings != "" {
		f, err := os.Open(*readings)
		if err != nil {
			return err
		}
		class, err = vernier.ReadCSV(f)
		f.Close()
		if err != nil {
			return fmt.Errorf("%s: %v", *readings, err)
		}
	}
	if fsf.NArg() != 1 || *out == "" {
		fsf.Usage()
		return usagef("batch: give --out OUTDIR and one input folder")
	}
	if err := outside("batch", "min-snr", *minSNR, 1, 1000, " (noise σ)"); err != nil {
		return err
	}
	if err := outside("batch", "least-count", *lc, minLeastCount, 30, " arc-minutes"); err != nil {
		return err
	}
	if *jobs < 1 || *jobs > 256 {
		return usagef("batch: --jobs %d outside 1-256", *jobs)
	}
	if *photoThreads < 0 || *photoThreads > 256 {
		return usagef("batch: --photo-threads %d outside 1-256", *photoThreads)
	}
	si, sn, err := parseShard(*shard)
	if err != nil {
		return usagef("batch: --shard %q: %v", *shard, err)
	}
	root := fsf.Arg(0)
	if st, err := os.Stat(root); err != nil {
		return err
	} else if !st.IsDir() {
		return fmt.Errorf("%s: not a folder", root)
	}
	if sameFolder(root, *out) {
		return usagef("batch: --out %s is the photos' folder itself: give the outputs a folder of their own (one inside it will do)", *out)
	}
	if err := os.MkdirAll(filepath.Join(*out, "cache"), 0o755); err != nil {
		return fmt.Errorf("%s: cannot write the output folder: %w", *out, err)
	}
	if err := os.MkdirAll(filepath.Join(*out, "calibrations"), 0o755); err != nil {
		return fmt.Errorf("%s: cannot write the output folder: %w", *out, err)
	}
	// The cores are shared out between photos first: each photo gets
	// what is left over (one each with the default --jobs).
	workers := cmp.Or(*photoThreads, max(1, runtime.GOMAXPROCS(0) / *jobs))
	// OpenCV's own threads get the same share (they would compete with
	// the other photos' work), for this run.
	imaging.SetOpenCVThreads(workers)
	defer imaging.SetOpenCVThreads(0)
	cfg := measureConfig{minSNR: *minSNR, tolNM: 1, imageOpts: imaging.Options{KeepImage: true, ImageMaxWidth: stripImageWidth, Workers: workers}}
	benches, failures, passed := discover(root, *out)
	for _, p := range passed {
		say(stderr, "lineshot: %s: passed over, the output folder of an earlier batch", displayName(p))
	}
	if sn > 1 {
		var mine []bench
		ours, theirs := map[string]bool{}, map[string]bool{}
		for _, b := range benches {
			if shardOf(b.Name, sn) == si {
				mine = append(mine, b)
				ours[displayName(b.Dir)] = true
			} else {
				theirs[displayName(b.Dir)] = true
			}
		}
		benches = mine
		// Every shard walks the whole tree: each keeps the failures found
		// in its own benches' folders, and the first those in no bench's,
		// so that merged they are each reported once.
		var kept []failure
		for _, f := range failures {
			if d := filepath.Dir(f.File); ours[d] || (si == 1 && !theirs[d]) {
				kept = append(kept, f)
			}
		}
		failures = kept
	}
	var jobsList []photoJob
	for bi, b := range benches {
		for _, p := range b.Photos {
			jobsList = append(jobsList, photoJob{bench: bi, path: p})
		}
	}
	if len(jobsList) == 0 && len(failures) == 0 {
		return fmt.Errorf("%s: no photos found (looked for %s)", root, strings.Join(sortedKeys(imageExts), " "))
	}
	run := batchRun{out: *out, cfg: cfg}
	var bar *progressbar.ProgressBar
	if f, ok := stderr.(*os.File); ok && !*quiet && term.IsTerminal(int(f.Fd())) {
		bar = progressbar.NewOptions(len(jobsList), progressbar.OptionSetWriter(stderr), progressbar.OptionSetDescription("measuring"),
			progressbar.OptionShowCount(), progressbar.OptionClearOnFinish(), progressbar.OptionThrottle(100e6))
	}
	recs := make([]photoRecord, len(jobsList))
	done := make([]bool, len(jobsList))
	var finished, fromCache, notKept int
	var firstNotKept error
	var mu sync.Mutex
	var g errgroup.Group
	g.SetLimit(*jobs)
	restoreProcs := spareProc(*jobs, workers)
	gc := newGCHeadroom(gcHeadroomBytes)
	defer gc.restore()
	for i, j := range jobsList {
		if ctx.Err() != nil {
			break
		}
		g.Go(func() error {
			if ctx.Err() != nil {
				return nil
			}
			rec, cached, keepErr := run.process(j.path, benches[j.bench])
			mu.Lock()
			recs[i], done[i] = rec, true
			finished++
			if cached {
				fromCache++
			}
			if keepErr != nil {
				if notKept == 0 {
					firstNotKept = keepErr
				}
				notKept++
			}
			n := finished
			gc.adjust()
			mu.Unlock()
			if bar != nil {
				bar.Add(1)
			}
			if onPhoto != nil {
				onPhoto(n)
			}
			return nil
		})
	}
	g.Wait()
	restoreProcs()
	if bar != nil {
		bar.Finish()
	}
	if notKept > 0 {
		who := fmt.Sprintf("%d photos'", notKept)
		if notKept == 1 {
			who = "1 photo's"
		}
		say(stderr, "lineshot: %s working files not kept (the first: %v): their results stand; the next run measures them again", who, firstNotKept)
	}
	interrupted := ctx.Err() != nil
	doc := batchDoc{Tool: "lineshot", Schema: 1, Root: displayName(root), Failures: failures}
	for bi, b := range benches {
		var br []photoRecord
		complete := true
		for i, j := range jobsList {
			if j.bench != bi {
				continue
			}
			if !done[i] {
				complete = false
				continue
			}
			br = append(br, recs[i])
		}
		if !complete {
			continue // resumed next run; its photos are cached
		}
		doc.Benches = append(doc.Benches, assembleBench(b, br, cfg))
	}
	for _, b := range doc.Benches {
		for _, f := range b.Failures {
			doc.Failures = append(doc.Failures, f)
		}
	}
	if class != nil {
		obs, err := vernier.Analyze(class, vernier.Options{LeastCountArcmin: *lc, Photo: photoWavelengths(doc)})
		if err != nil {
			doc.Failures = append(doc.Failures, failure{File: *readings, Reason: err.Error()})
		} else {
			doc.Vernier, doc.VernierSummary = obs, classSummary(obs)
			for _, o := range obs {
				if o.Error != "" {
					doc.Failures = append(doc.Failures, failure{File: *readings, Reason: notCheckedReason(o)})
				}
			}
		}
	}
	gc.adjust() // for the outputs' garbage (plots, encodings), from the results' size
	if err := writeBatchOutputs(*out, doc); err != nil {
		return err
	}
	for _, f := range doc.Failures {
		say(stderr, "lineshot: %s: %s", f.File, f.Reason)
	}
	nPhotos := 0
	for _, d := range done {
		if d {
			nPhotos++
		}
	}
	if interrupted {
		fmt.Fprintf(stderr, "lineshot: interrupted: %d of %d photos measured and kept; run the same command again to finish\n", nPhotos, len(jobsList))
		return errReported
	}
	fmt.Fprintf(stdout, "measured %s (%d unchanged since the last run, taken from the cache) on %s into %s (report: %s)\n",
		count(nPhotos, "photo"), fromCache, count(len(doc.Benches), "bench"), *out, filepath.Join(*out, "report.html"))
	for _, b := range doc.Benches {
		fmt.Fprintf(stdout, "  %s\n", b.summaryLine())
	}
	if len(doc.Failures) > 0 {
		return errReported
	}
	return nil
}

func parseShard(s string) (int, int, error) {
	if s == "" {
		return 1, 1, nil
	}
	a, b, ok := strings.Cut(s, "/")
	i, err1 := strconv.Atoi(a)
	n, err2 := strconv.Atoi(b)
	if !ok || err1 != nil || err2 != nil || n < 1 || i < 1 || i > n {
		return 0, 0, errors.New("want i/n with 1 ≤ i ≤ n")
	}
	return i, n, nil
}

// shardOf assigns a bench to one of n shards (1-based) by a hash of its
// name, so that every machine agrees without talking to the others and a
// bench's photos stay together.
func shardOf(name string, n int) int {
	h := fnv.New32a()
	h.Write([]byte(name))
	return int(h.Sum32()%uint32(n)) + 1
}

func sortedKeys(m map[string]bool) []string {
	var k []string
	for s := range m {
		k = append(k, s)
	}
	sort.Strings(k)
	return k
}

// displayName makes a file name printable and JSON-safe: names that are
// not UTF-8 are shown quoted with escapes.
func displayName(p string) string {
	if utf8.ValidString(p) {
		return p
	}
	return strconv.QuoteToASCII(p)
}

type bench struct {
	Name     string
	Dir      string
	Photos   []string
	Settings benchSettings
}

// darkPaths are the paths of the bench's dark frames (settings "dark:").
func (b bench) darkPaths() []string {
	var out []string
	for _, d := range b.Settings.Dark {
		out = append(out, filepath.Join(b.Dir, d))
	}
	return out
}

type failure struct {
	File   string `json:"file"`
	Reason string `json:"reason"`
}

type photoJob struct {
	bench int
	path  string
}

// discover finds the benches under root: every folder with image files.
// It does not follow links to folders (so link loops cannot trap it),
// skips the output folder, and reports what it cannot read.
func discover(root, out string) (benches []bench, fails []failure, passed []string) {
	absOut, _ := filepath.Abs(out)
	byDir := map[string]*bench{}
	readable := map[string][]string{} // folder → its photos' names without ending, read once (readableBases)
	// twinned: a photo of p's name, another ending, lies beside it.
	twinned := func(p string) bool {
		dir := filepath.Dir(p)
		if _, ok := readable[dir]; !ok {
			readable[dir] = readableBases(dir)
		}
		return hasTwin(readable[dir], p)
	}
	var order []string
	filepath.WalkDir(root, func(p string, d fs.DirEntry, err error) error {
		if p != root && d != nil && notUsers(d.Name()) {
			if d.IsDir() {
				return fs.SkipDir
			}
			return nil
		}
		if err != nil {
			fails = append(fails, failure{File: displayName(p), Reason: "cannot read: " + errText(err)})
			if d != nil && d.IsDir() {
				return fs.SkipDir
			}
			return nil
		}
		if d.IsDir() {
			if a, _ := filepath.Abs(p); a == absOut {
				return fs.SkipDir
			}
			if p != root && isOutputFolder(p) {
				passed = append(passed, p)
				return fs.SkipDir
			}
			return nil
		}
		if why := imaging.Unreadable(p); why != "" {
			// A raw photo: said so, unless the camera saved a
			// JPEG (or other photo lineshot reads) of it beside it.
			if !twinned(p) {
				fails = append(fails, failure{File: displayName(p), Reason: why})
			}
			return nil
		}
		if !imageExts[strings.ToLower(filepath.Ext(p))] && !imaging.IsVideo(p) {
			return nil
		}
		if isHEIFName(p) && twinned(p) {
			// A HEIC photo beside a JPEG of the same shot (one converted
			// from the other): the JPEG is measured, not both.
			return nil
		}
		if d.Type()&fs.ModeSymlink != 0 {
			st, err := os.Stat(p)
			if err != nil {
				fails = append(fails, failure{File: displayName(p), Reason: "broken or looping link: " + errText(err)})
				return nil
			}
			if st.IsDir() {
				return nil
			}
		}
		dir := filepath.Dir(p)
		b, ok := byDir[dir]
		if !ok {
			name, _ := filepath.Rel(root, dir)
			if name == "." {
				name = filepath.Base(filepath.Clean(root))
			}
			b = &bench{Name: displayName(filepath.ToSlash(name)), Dir: dir}
			st, err := readSettings(filepath.Join(dir, settingsFile))
			if err == nil {
				err = st.missing(dir)
			}
			if err != nil {
				fails = append(fails, failure{File: displayName(filepath.Join(dir, settingsFile)), Reason: err.Error()})
			}
			b.Settings = st
			byDir[dir] = b
			order = append(order, dir)
		}
		if !b.Settings.Exclude[filepath.Base(p)] && !b.Settings.isDark(filepath.Base(p)) {
			b.Photos = append(b.Photos, p)
		}
		return nil
	})
	sort.Strings(order)
	for _, d := range order {
		b := byDir[d]
		sort.Strings(b.Photos)
		benches = append(benches, *b)
	}
	return benches, fails, passed
}

// isHEIFName reports whether path ends as a HEIF photo does.
func isHEIFName(path string) bool {
	return slices.Contains(imaging.HEIFExts, strings.ToLower(filepath.Ext(path)))
}

// readableBases lists the names, without their endings, of the photos
// lineshot reads in folder dir, HEIF photos aside (none when the folder
// cannot be read).
func readableBases(dir string) []string {
	bases := []string{} // (not nil: a folder read and empty is known too)
	ents, err := os.ReadDir(dir)
	if err != nil {
		return bases
	}
	for _, e := range ents {
		n := e.Name()
		if imageExts[strings.ToLower(filepath.Ext(n))] && !isHEIFName(n) {
			bases = append(bases, strings.TrimSuffix(n, filepath.Ext(n)))
		}
	}
	return bases
}

// hasTwin reports whether bases (readableBases of path's folder) holds
// path's name up to its ending, in any case: IMG_0001.CR2 beside
// IMG_0001.JPG, as a camera saving both writes them (or IMG_0001.HEIC
// beside the JPEG converted from it).
func hasTwin(bases []string, path string) bool {
	base := strings.TrimSuffix(filepath.Base(path), filepath.Ext(path))
	for _, b := range bases {
		if strings.EqualFold(b, base) {
			return true
		}
	}
	return false
}

// notUsers reports whether a file or folder of this name is one that
// systems, not people, put beside photos, to be passed over in silence:
// hidden names (macOS's "._IMG_0001.jpg" resource files beside every photo
// copied from a Mac, thumbnail folders such as ".thumbnails", ".Trashes"),
// a Synology NAS's thumbnail folders ("@eaDir") and Windows's recycle bin
// and volume folders on a USB stick ("$RECYCLE.BIN", whose deleted photos
// keep their extension; "System Volume Information"). Common practice for
// tools that walk folders, from memory; not from any one source.
func notUsers(name string) bool {
	switch name {
	case "@eaDir", "$RECYCLE.BIN", "System Volume Information":
		return true
	}
	return strings.HasPrefix(name, ".")
}

// sameFolder reports whether a and b name one folder (by path, or, both
// existing, as the same folder reached two ways).
func sameFolder(a, b string) bool {
	if x, err1 := filepath.Abs(a); err1 == nil {
		if y, err2 := filepath.Abs(b); err2 == nil && x == y {
			return true
		}
	}
	return sameFile(a, b)
}

// isOutputFolder reports whether dir is where an earlier batch wrote its
// outputs (its band images are not photos of a bench; a class's folder
// often holds last week's results): it holds a results.json that names
// this program first, or, from a run stopped before writing one, both
// folders a batch makes before it measures.
func isOutputFolder(dir string) bool {
	if namesLineshot(filepath.Join(dir, "results.json")) {
		return true
	}
	for _, sub := range []string{"cache", "calibrations"} {
		if st, err := os.Stat(filepath.Join(dir, sub)); err != nil || !st.IsDir() {
			return false
		}
	}
	return true
}

// namesLineshot reports whether path is a regular file (a named pipe
// would wait for a writer) of JSON whose first field says "tool":
// "lineshot", as a batch's results.json begins.
func namesLineshot(path string) bool {
	f, err := openRegular(path)
	if err != nil {
		return false
	}
	defer f.Close()
	dec := json.NewDecoder(io.LimitReader(f, 4096))
	var tok [3]json.Token
	for i := range tok {
		if tok[i], err = dec.Token(); err != nil {
			return false
		}
	}
	return tok[0] == json.Delim('{') && tok[1] == "tool" && tok[2] == "lineshot"
}

// errNotRegular is openRegular's refusal.
var errNotRegular = errors.New("not a regular file")

// openRegular opens path for reading when it is a regular file, and
// refuses with errNotRegular a named pipe (opening one waits for a
// writer), socket or device; a file not found is os.Stat's error.
func openRegular(path string) (*os.File, error) {
	fi, err := os.Stat(path)
	if err != nil {
		return nil, err
	}
	if !fi.Mode().IsRegular() {
		return nil, errNotRegular
	}
	return os.Open(path)
}

// errText is an error's text without the path the caller prints anyway.
func errText(err error) string {
	return errNoPath(err).Error()
}

// benchSettings is what a bench's settings file can say.
type benchSettings struct {
	LinesPerMM  float64           `json:"lines_per_mm,omitempty"`
	Calibration []string          `json:"calibration,omitempty"`
	Lamps       map[string]string `json:"lamps,omitempty"`
	Exclude     map[string]bool   `json:"exclude,omitempty"`
	Dark        []string          `json:"dark,omitempty"` // dark frames, subtracted from the bench's other photos
}

// missing says which of the files the settings name for a role (a
// calibration photo, a lamp, a dark frame) are not in the bench's folder
// dir: a misspelt name would otherwise leave the bench uncalibrated, its
// real calibration photo unused, without a word. nil when all are there.
// (Excluded names may be gone: nothing to do with them.)
func (s benchSettings) missing(dir string) error {
	var gone []string
	check := func(role, name string) {
		if st, err := os.Stat(filepath.Join(dir, name)); err != nil || st.IsDir() {
			gone = append(gone, role+" "+name)
		}
	}
	for _, n := range s.Calibration {
		check("calibration:", n)
	}
	for _, n := range slices.Sorted(maps.Keys(s.Lamps)) {
		check("lamp:", n)
	}
	for _, n := range s.Dark {
		check("dark:", n)
	}
	if len(gone) == 0 {
		return nil
	}
	return fmt.Errorf("names files not in the folder: %s", strings.Join(gone, "; "))
}

func (s benchSettings) isDark(name string) bool {
	for _, d := range s.Dark {
		if d == name {
			return true
		}
	}
	return false
}

// readSettings reads a bench settings file; a missing file is no error.
func readSettings(path string) (benchSettings, error) {
	st := benchSettings{Lamps: map[string]string{}, Exclude: map[string]bool{}}
	f, err := openRegular(path)
	if errors.Is(err, fs.ErrNotExist) {
		return st, nil
	}
	if errors.Is(err, errNotRegular) {
		return st, err
	}
	if err != nil {
		return st, errors.New("cannot read: " + errText(err))
	}
	defer f.Close()
	st, err = parseSettings(f)
	return st, err
}

func parseSettings(r io.Reader) (benchSettings, error) {
	st := benchSettings{Lamps: map[string]string{}, Exclude: map[string]bool{}}
	sc := bufio.NewScanner(r)
	n := 0
	for sc.Scan() {
		n++
		line := sc.Text()
		if i := strings.IndexByte(line, '#'); i >= 0 {
			line = line[:i]
		}
		line = strings.TrimSpace(line)
		if line == "" {
			continue
		}
		key, val, ok := strings.Cut(line, ":")
		if !ok {
			return st, fmt.Errorf("line %d: want 'key: value', got %q", n, line)
		}
		key, fields := strings.ToLower(strings.TrimSpace(key)), strings.Fields(val)
		switch key {
		case "lines-per-mm":
			v, err := strconv.ParseFloat(strings.TrimSpace(val), 64)
			if err != nil || v <= 0 || v > 10000 {
				return st, fmt.Errorf("line %d: lines-per-mm %q is not a number in (0, 10000]", n, strings.TrimSpace(val))
			}
			st.LinesPerMM = v
		case "calibration":
			if len(fields) == 0 {
				return st, fmt.Errorf("line %d: calibration names no file", n)
			}
			st.Calibration = append(st.Calibration, fields...)
		case "lamp":
			if len(fields) != 2 {
				return st, fmt.Errorf("line %d: want 'lamp: FILE LAMP'", n)
			}
			if _, err := calibrate.LampByName(fields[1]); err != nil {
				return st, fmt.Errorf("line %d: %v", n, err)
			}
			st.Lamps[fields[0]] = fields[1]
		case "exclude":
			for _, f := range fields {
				st.Exclude[f] = true
			}
		case "dark":
			if len(fields) == 0 {
				return st, fmt.Errorf("line %d: dark names no file", n)
			}
			st.Dark = append(st.Dark, fields...)
		default:
			return st, fmt.Errorf("line %d: unknown setting %q (lines-per-mm, calibration, lamp, exclude, dark)", n, key)
		}
	}
	if err := sc.Err(); err != nil {
		return st, err
	}
	return st, nil
}

// photoRecord is one photo measured and its lamp recognised: what the
// bench-level steps need, cached in OUTDIR/cache so a rerun skips it.
type photoRecord struct {
	File    string                     `json:"file"`
	Size    int64                      `json:"size"`
	ModTime int64                      `json:"mtime_ns"`
	Options string                     `json:"options"`
	Error   string                     `json:"error,omitempty"`
	Strip   stripRecord                `json:"strip"`
	Peaks   []peaks.Peak               `json:"peaks"`
	Noise   float64                    `json:"profile_noise"`
	IDs     []calibrate.Identification `json:"identifications"`
	Image   string                     `json:"image,omitempty"` // straightened band JPEG, relative to OUTDIR
}

// stripRecord is the part of an imaging.Strip worth keeping.
type stripRecord struct {
	AngleDeg, BandHalfHeight, OpticalCenter float64
	Origin                                  [2]float64
	Band                                    [4][2]float64
	FrameW, FrameH                          int
	Background, Noise, Saturated            float64
	ResidualTiltDeg                         float64
	BackgroundRange, ResidualTiltErrDeg     float64
	Frames, DarkFrames                      int
	Warnings                                []string
	Profile                                 []float32
	Bow                                     imaging.Bow // ToImage follows it: positions in the photo need it
	StrayLight                              bool
}

func toRecord(s imaging.Strip) stripRecord {
	r := stripRecord{AngleDeg: s.AngleDeg, BandHalfHeight: s.BandHalfHeight, OpticalCenter: s.OpticalCenter, Origin: s.Origin, Band: s.Band,
		FrameW: s.FrameW, FrameH: s.FrameH, Background: s.Background, Noise: s.Noise, Saturated: s.Saturated, ResidualTiltDeg: s.ResidualTiltDeg, Warnings: s.Warnings,
		BackgroundRange: s.BackgroundRange, Frames: s.Frames, DarkFrames: s.DarkFrames, Bow: s.Bow, StrayLight: s.StrayLight}
	if !math.IsInf(s.ResidualTiltErrDeg, 0) && !math.IsNaN(s.ResidualTiltErrDeg) {
		r.ResidualTiltErrDeg = s.ResidualTiltErrDeg
	}
	r.Profile = make([]float32, len(s.Profile))
	for i, v := range s.Profile {
		r.Profile[i] = float32(v)
	}
	return r
}

func (r stripRecord) strip() imaging.Strip {
	s := imaging.Strip{AngleDeg: r.AngleDeg, BandHalfHeight: r.BandHalfHeight, OpticalCenter: r.OpticalCenter, Origin: r.Origin, Band: r.Band,
		FrameW: r.FrameW, FrameH: r.FrameH, Background: r.Background, Noise: r.Noise, Saturated: r.Saturated, ResidualTiltDeg: r.ResidualTiltDeg, Warnings: r.Warnings,
		BackgroundRange: r.BackgroundRange, Frames: r.Frames, DarkFrames: r.DarkFrames, ResidualTiltErrDeg: r.ResidualTiltErrDeg,
		Bow: r.Bow, StrayLight: r.StrayLight}
	s.Profile = make([]float64, len(r.Profile))
	for i, v := range r.Profile {
		s.Profile[i] = float64(v)
	}
	return s
}

func (p photoRecord) measured() measured {
	return measured{strip: p.Strip.strip(), found: peaks.Result{Peaks: p.Peaks, Noise: p.Noise}}
}

type batchRun struct {
	out string
	cfg measureConfig
}

// optionsKey changes whenever an option that changes a photo's result
// changes, so that cached results are not reused across them.
func (b *batchRun) optionsKey() string {
	return fmt.Sprintf("v6 snr=%g", b.cfg.minSNR)
}

func cacheName(path string) string {
	abs, err := filepath.Abs(path)
	if err != nil {
		abs = path
	}
	h := sha256.Sum256([]byte(abs))
	return hex.EncodeToString(h[:12])
}

// process measures one photo, or takes it from the cache when the file
// is unchanged (and then reports true). keepErr says that the photo's
// working files (its cached record, its band image) could not be written,
// a full disk say: the record returned stands all the same.
func (b *batchRun) process(path string, bn bench) (rec photoRecord, cached bool, keepErr error) {
	rec = photoRecord{File: path, Options: b.optionsKey()}
	cfg := b.cfg
	cfg.dark = bn.darkPaths()
	for k, dp := range cfg.dark {
		// The bench's dark frames; a changed dark frame invalidates the
		// cached measurements of the bench.
		d := bn.Settings.Dark[k]
		if st, err := os.Stat(dp); err == nil {
			rec.Options += fmt.Sprintf(" dark=%s:%d:%d", d, st.Size(), st.ModTime().UnixNano())
		} else {
			rec.Options += " dark=" + d + ":missing"
		}
	}
	st, err := os.Stat(path)
	if err != nil {
		rec.Error = fmt.Sprintf("%s: cannot read: %s", displayName(path), errText(err))
		return rec, false, nil
	}
	rec.Size, rec.ModTime = st.Size(), st.ModTime().UnixNano()
	key := cacheName(path)
	cachePath := filepath.Join(b.out, "cache", key+".json")
	if old, err := os.ReadFile(cachePath); err == nil {
		var c photoRecord
		if json.Unmarshal(old, &c) == nil && c.File == path && c.Size == rec.Size && c.ModTime == rec.ModTime && c.Options == rec.Options && b.imageKept(c) {
			return c, true, nil
		}
	}
	m, err := extractAndFind(path, cfg)
	if err != nil {
		rec.Error = displayErr(err.Error())
	} else {
		rec.Strip, rec.Peaks, rec.Noise = toRecord(m.strip), m.found.Peaks, m.found.Noise
		lamps := b.cfg.lamps()
		if l, ok := bn.Settings.Lamps[filepath.Base(path)]; ok {
			ll, _ := calibrate.LampByName(l)
			lamps = []calibrate.Lamp{ll}
		}
		rec.IDs = calibrate.Classify(m.calPeaks(), lamps, calibrate.IdentifyOptions{Workers: b.cfg.imageOpts.Workers})
		if m.strip.Image != nil {
			name := filepath.Join("images", key+".jpg")
			err := writeStripImage(filepath.Join(b.out, name), m, true)
			m.strip.ReleaseImage() // (m goes no further)
			if err == nil {
				rec.Image = name
			} else {
				// No record either: the photo is measured again next
				// time, and then its band image made.
				return rec, false, err
			}
		}
	}
	// Compact: a working file, read back by the program only (indented, a
	// 1080p photo's record was 47 kB against 30, its profile a number a
	// line, and the indenting pass made a tenth of the measuring's garbage).
	if err := writeDerivedAtomic(cachePath, func(w io.Writer) error { return json.NewEncoder(w).Encode(rec) }); err != nil {
		return rec, false, err
	}
	return rec, false, nil
}

// imageKept reports whether a cached record's band image is still there
// (a record without one needs none): a missing or empty image (removed by
// hand, or cut short by a power cut, see writeDerivedAtomic) sends the
// photo back to be measured.
func (b *batchRun) imageKept(c photoRecord) bool {
	if c.Image == "" {
		return true
	}
	st, err := os.Stat(filepath.Join(b.out, c.Image))
	return err == nil && st.Size() > 0
}

func displayErr(s string) string {
	if utf8.ValidString(s) {
		return s
	}
	return strings.ToValidUTF8(s, "�")
}

// benchResult is one bench's results.
type benchResult struct {
	Name        string               `json:"bench"`
	Dir         string               `json:"folder"`
	Settings    benchSettings        `json:"settings"`
	Calibration *calibration         `json:"calibration,omitempty"`
	CalPhotos   []imageResult        `json:"calibration_photos"`
	Photos      []imageResult        `json:"photos"`
	Rydberg     *calibrate.Rydberg   `json:"rydberg,omitempty"` // all hydrogen photos of the bench together
	Failures    []failure            `json:"failures,omitempty"`
	Warnings    []string             `json:"warnings,omitempty"`
	Images      map[string]string    `json:"band_images,omitempty"` // file → JPEG under OUTDIR
	Profiles    map[string][]float32 `json:"profiles,omitempty"`    // file → profile, for the report's plots
}

// plural is noun for one of it, else its plural (an s, or es after ch).
func plural(n int, noun string) string {
	switch {
	case n == 1:
		return noun
	case strings.HasSuffix(noun, "ch"):
		return noun + "es"
	default:
		return noun + "s"
	}
}

// count is n and its noun, "1 photo", "3 benches".
func count(n int, noun string) string {
	return fmt.Sprintf("%d %s", n, plural(n, noun))
}

func (b benchResult) summaryLine() string {
	s := fmt.Sprintf("%s: %d calibration, %d other %s", b.Name, len(b.CalPhotos), len(b.Photos), plural(len(b.Photos), "photo"))
	if b.Rydberg != nil {
		s += fmt.Sprintf("; R = %.0f ± %.0f m⁻¹ (%+.4f %% from R_H)", b.Rydberg.R, b.Rydberg.Sigma, b.Rydberg.DevPercent)
	}
	if len(b.Warnings) > 0 {
		s += "; " + b.Warnings[0]
	}
	return s
}

// minCheckedLines is the fewest lines a photo's own identification needs
// for its reading to be checked: one beyond the three any smooth
// dispersion passes through.
const minCheckedLines = 4

// assembleBench calibrates a bench from its calibration photos and
// measures the rest with that calibration.
func assembleBench(b bench, recs []photoRecord, cfg measureConfig) benchResult {
	out := benchResult{Name: b.Name, Dir: displayName(b.Dir), Settings: b.Settings, Images: map[string]string{}, Profiles: map[string][]float32{}}
	bcfg := cfg
	bcfg.linesPerMM = b.Settings.LinesPerMM
	bcfg.dark = b.darkPaths()
	pinnedCal := map[string]bool{}
	for _, c := range b.Settings.Calibration {
		pinnedCal[c] = true
	}
	var calIDs []selfID
	var calRes []imageResult
	var calNames []string
	var others []photoRecord
	// A photo chosen to calibrate by its own lines only (no "calibration:"
	// line in the settings, no lamp named for it) is left out of the
	// calibration when nothing checks its reading and another photo of the
	// bench can be checked: a dim hydrogen photo whose three Balmer lines
	// fit mercury's had joined the mercury photo's calibration, spoilt it
	// (χ²/dof 10), and every hydrogen photo of the bench was then read as
	// mercury lines. Left out, it is measured with the bench's calibration
	// like the other photos, and its lines tell its lamp.
	unchecked := map[string]string{} // file → why its own reading is unchecked
	autoCal := func(r photoRecord) bool {
		return r.Error == "" && len(pinnedCal) == 0 && len(r.IDs) > 0 && r.IDs[0].Lamp != "hydrogen"
	}
	anyChecked := false
	for _, r := range recs {
		if !autoCal(r) {
			continue
		}
		if _, named := b.Settings.Lamps[filepath.Base(r.File)]; named {
			anyChecked = true // the user's word for it
			continue
		}
		if n := len(r.IDs[0].Matches); n < minCheckedLines {
			unchecked[r.File] = fmt.Sprintf("%d lines, which any smooth dispersion fits", n)
		} else if other, _, doubt := doubtedBy(r.IDs); doubt {
			unchecked[r.File] = fmt.Sprintf("%s fits its lines nearly as well", other.Lamp)
		} else {
			anyChecked = true
		}
	}
	if !anyChecked {
		clear(unchecked) // nothing better to calibrate with
	}
	for _, r := range recs {
		name := displayName(r.File)
		if r.Error != "" {
			out.Failures = append(out.Failures, failure{File: name, Reason: strings.TrimPrefix(r.Error, name+": ")})
			continue
		}
		if r.Image != "" {
			out.Images[name] = r.Image
		}
		out.Profiles[name] = r.Strip.Profile
		m := r.measured()
		base := filepath.Base(r.File)
		isCal := pinnedCal[base]
		if autoCal(r) && unchecked[r.File] == "" {
			isCal = true
		}
		if !isCal {
			others = append(others, r)
			continue
		}
		if len(r.IDs) == 0 {
			out.Failures = append(out.Failures, failure{File: name, Reason: fmt.Sprintf("named as a calibration photo, but its %d lines match no lamp", len(r.Peaks))})
			continue
		}
		lamp, _ := bcfg.lampByName(r.IDs[0].Lamp)
		res := m.baseResult(name)
		res.Lamp, res.LampScore = r.IDs[0].Lamp, confidence(r.IDs)
		if w := lampDoubt(r.IDs); w != "" { // (a lamp named in the settings is the only one tried)
			res.Warnings = append(res.Warnings, w)
		}
		calIDs = append(calIDs, selfID{m: m, id: r.IDs[0], lamp: lamp})
		calRes = append(calRes, res)
		calNames = append(calNames, name)
	}
	var cal *calibration
	if len(calIDs) > 0 {
		c, res, err := combineCalibration(calIDs, calRes, calNames, bcfg)
		out.CalPhotos = res
		if err != nil {
			out.Warnings = append(out.Warnings, "calibration failed: "+err.Error())
		} else {
			cal = &c
			out.Calibration = &c
		}
	} else {
		out.Warnings = append(out.Warnings, "no calibration photo: lines are given in pixels only; add a mercury (or helium, neon) photo of the same setup")
	}
	var ps, sps []float64
	var across float64
	var balmer []calibrate.Balmer
	for _, r := range others {
		name := displayName(r.File)
		m := r.measured()
		if cal == nil {
			res := m.baseResult(name)
			if len(r.IDs) > 0 {
				res.Lamp, res.LampScore = r.IDs[0].Lamp, confidence(r.IDs)
			}
			res.Warnings = append(res.Warnings, "uncalibrated: positions in pixels only")
			out.Photos = append(out.Photos, res)
			continue
		}
		res := measureWith(alongCalibration(m, r.File, *cal, bcfg), name, *cal, bcfg)
		if why := unchecked[r.File]; why != "" {
			res.Warnings = append(res.Warnings, fmt.Sprintf("on its own lines this photo read as %s, but nothing checks that (%s): it was measured with the bench's calibration from its other photos instead of joining it",
				r.IDs[0].Lamp, why))
		}
		out.Photos = append(out.Photos, res)
		if res.Lamp == "hydrogen" {
			for _, l := range res.Lines {
				if l.N >= 3 {
					balmer = append(balmer, calibrate.Balmer{N: l.N, AirNM: l.WavelengthNM, SigmaNM: l.WavelengthErrNM})
					ps = append(ps, cal.position(l.X, l.Y))
					across += cal.across(l.X, l.Y)
					sps = append(sps, l.PositionErrPX)
				}
			}
		}
	}
	if cal != nil && len(balmer) >= 2 {
		if r, err := calibrate.FitRydberg(balmer, cal.Dispersion.Across(across/float64(len(ps))).Covariance(ps, sps)); err == nil {
			out.Rydberg = &r
		}
	}
	for _, p := range append(append([]imageResult(nil), out.CalPhotos...), out.Photos...) {
		for _, w := range p.Warnings {
			if strings.Contains(w, "moved") || strings.Contains(w, "smooth dispersion") || strings.Contains(w, "poorly") || strings.Contains(w, "systematic") {
				out.Warnings = append(out.Warnings, p.File+": "+w)
			}
		}
	}
	return out
}

// batchDoc is results.json.
type batchDoc struct {
	Tool     string        `json:"tool"`
	Schema   int           `json:"schema"`
	Root     string        `json:"input"`
	Benches  []benchResult `json:"benches"`
	Failures []failure     `json:"failures,omitempty"`
	// Vernier holds the class's readings checked against the photos, when
	// batch was given --readings.
	Vernier        []vernier.Observer `json:"vernier,omitempty"`
	VernierSummary []string           `json:"vernier_summary,omitempty"`
}

// encodeBatchDoc writes doc as encodeJSON does, byte for byte
// (TestEncodeBatchDocAsWhole), one bench at a time: a whole 1000-photo
// batch's JSON, 61 MB indented, was built in memory twice over (compact,
// then indented) before it was written.
func encodeBatchDoc(w io.Writer, doc batchDoc) error {
	if len(doc.Benches) == 0 {
		return encodeJSON(w, doc)
	}
	// The document without its benches, split where they go.
	skel := doc
	skel.Benches = []benchResult{}
	var sb bytes.Buffer
	if err := encodeJSON(&sb, skel); err != nil {
		return err
	}
	mark := []byte("\n  \"benches\": []")
	at := bytes.Index(sb.Bytes(), mark)
	if at < 0 {
		return errors.New("results.json: no place for the benches") // (a field renamed)
	}
	bw := bufio.NewWriterSize(w, 1<<16)
	bw.Write(sb.Bytes()[:at+len(mark)-2])
	bw.WriteString("[\n")
	for i, b := range doc.Benches {
		raw, err := json.MarshalIndent(b, "    ", "  ")
		if err != nil {
			return err
		}
		bw.WriteString("    ")
		bw.Write(raw)
		if i < len(doc.Benches)-1 {
			bw.WriteString(",")
		}
		bw.WriteString("\n")
	}
	bw.WriteString("  ]")
	bw.Write(sb.Bytes()[at+len(mark):])
	return bw.Flush()
}

func writeBatchOutputs(out string, doc batchDoc) error {
	// The files are independent: written side by side (the report's
	// plots take longest), each atomically.
	var g errgroup.Group
	g.Go(func() error {
		return writeFileAtomic(filepath.Join(out, "results.json"), func(w io.Writer) error { return encodeBatchDoc(w, doc) })
	})
	g.Go(func() error {
		return writeFileAtomic(filepath.Join(out, "results.csv"), func(w io.Writer) error { return resultsCSV(w, doc) })
	})
	g.Go(func() error {
		for _, b := range doc.Benches {
			if b.Calibration != nil {
				name := strings.NewReplacer("/", "_", "\\", "_", " ", "_").Replace(b.Name) + ".json"
				if err := writeJSONAtomic(filepath.Join(out, "calibrations", name), b.Calibration); err != nil {
					return err
				}
			}
		}
		return nil
	})
	g.Go(func() error {
		return writeFileAtomic(filepath.Join(out, "report.html"), func(w io.Writer) error { return writeReport(w, out, doc) })
	})
	return g.Wait()
}

func resultsCSV(w io.Writer, doc batchDoc) error {
	cw := csv.NewWriter(w)
	cw.Write([]string{"bench", "file", "role", "lamp", "x", "y", "position_px", "position_err_px", "wavelength_nm", "wavelength_err_nm",
		"vacuum_nm", "fwhm_px", "snr", "saturated", "id", "ref_nm", "delta_nm", "order"})
	f := func(v float64, p int) string {
		if !finite(v) {
			return ""
		}
		return strconv.FormatFloat(v, 'f', p, 64)
	}
	for _, b := range doc.Benches {
		for _, set := range []struct {
			role string
			rs   []imageResult
		}{{"calibration", b.CalPhotos}, {"measured", b.Photos}} {
			for _, r := range set.rs {
				for _, l := range r.Lines {
					wl, we, vac := f(l.WavelengthNM, 4), f(l.WavelengthErrNM, 4), f(l.VacuumNM, 4)
					if r.Calibration == nil {
						wl, we, vac = "", "", ""
					}
					order := ""
					if l.Order != 0 || l.ID == "zero order" {
						order = strconv.Itoa(l.Order)
					}
					cw.Write([]string{b.Name, r.File, set.role, r.Lamp, f(l.X, 3), f(l.Y, 3), f(l.PositionPX, 3), f(l.PositionErrPX, 4),
						wl, we, vac, f(l.FWHMPX, 3), f(l.SNR, 1), strconv.FormatBool(l.Saturated), l.ID, f(l.RefNM, 4), f(l.DeltaNM, 4), order})
				}
			}
		}
	}
	cw.Flush()
	return cw.Error()
}

const mergeUsage = `Usage: lineshot merge --out OUTDIR PART...

Joins the output folders of several 'lineshot batch --shard i/n' runs into one
results.csv, results.json, calibration set and report.

Example:
  lineshot merge --out all/ part1/ part2/ part3/
`

func runMerge(args []string, stdout, stderr io.Writer) error {
	fsf := newFlags("merge", mergeUsage, stderr)
	out := fsf.StringP("out", "o", "", "output folder")
	if err := parse(fsf, args); err != nil {
		return err
	}
	if *out == "" || fsf.NArg() == 0 {
		fsf.Usage()
		return usagef("merge: give --out OUTDIR and the batch output folders to join")
	}
	for _, part := range fsf.Args() {
		// Merged into a part, the part's own results would be replaced
		// by the whole, and it could not be merged again.
		if sameFolder(part, *out) {
			return usagef("merge: --out %s is one of the parts: give the merged results a folder of their own", *out)
		}
	}
	// Every part is read and checked before anything is written.
	merged := batchDoc{Tool: "lineshot", Schema: 1}
	from := map[string]string{} // bench → its part folder
	var roots []string
	for _, part := range fsf.Args() {
		path := filepath.Join(part, "results.json")
		raw, err := os.ReadFile(path)
		if err != nil {
			return err
		}
		var d batchDoc
		if err := json.Unmarshal(raw, &d); err != nil || d.Tool != "lineshot" || d.Schema != 1 {
			return fmt.Errorf("%s: not a lineshot batch result", path)
		}
		roots = append(roots, d.Root)
		for _, b := range d.Benches {
			if prev, dup := from[b.Name]; dup {
				return fmt.Errorf("%s: bench %q is also in %s: the parts overlap", path, b.Name, prev)
			}
			from[b.Name] = part
			merged.Benches = append(merged.Benches, b)
		}
		merged.Failures = append(merged.Failures, d.Failures...)
	}
	for _, d := range []string{"images", "calibrations"} {
		if err := os.MkdirAll(filepath.Join(*out, d), 0o755); err != nil {
			return fmt.Errorf("%s: cannot write the output folder: %w", *out, err)
		}
	}
	for _, b := range merged.Benches {
		for _, img := range b.Images {
			src, err := os.ReadFile(filepath.Join(from[b.Name], img))
			if err != nil {
				continue // the report then shows no band for that photo
			}
			// (Band images are derived files, as in the batch: no flush.)
			if err := writeDerivedAtomic(filepath.Join(*out, img), func(w io.Writer) error { _, err := w.Write(src); return err }); err != nil {
				return err
			}
		}
	}
	merged.Root = strings.Join(dedupe(roots), ", ")
	sort.SliceStable(merged.Benches, func(i, j int) bool { return merged.Benches[i].Name < merged.Benches[j].Name })
	if err := writeBatchOutputs(*out, merged); err != nil {
		return err
	}
	fmt.Fprintf(stdout, "merged %d benches from %d parts into %s", len(merged.Benches), fsf.NArg(), *out)
	if n := len(merged.Failures); n > 0 {
		// The parts' runs named each one on stderr; the merge counts them.
		fmt.Fprintf(stdout, "; %s not measured, listed in results.json and the report", count(n, "input"))
	}
	fmt.Fprintln(stdout)
	return nil
}

func dedupe(s []string) []string {
	var out []string
	seen := map[string]bool{}
	for _, x := range s {
		if !seen[x] {
			seen[x] = true
			out = append(out, x)
		}
	}
	return out
}

// spareProc gives Go's scheduler one P (a slot for running Go code) more
// than it has while jobs photos, as many as the Ps or more, are measured
// at once on one goroutine each (perPhoto 1), and returns what puts the
// number back. A goroutine in a long C call (decoding stripes of rows,
// OpenCV's warps and reductions) holds its P; when no P is idle the
// runtime's monitor thread takes it away after 20 µs, hands it on and
// wakes every 20 µs while it does so. With every P
// measuring a photo that happened several times a photo: a two-worker
// batch of 100 1080p photos made 26 500-28 500 context switches against
// 13 700-14 600 with the spare P, and took 2.2 s against 2.0 (five
// alternating runs, GOMAXPROCS 2 and 3 on two CPUs). The spare P is idle
// but for the collector and the moments a worker waits: the work is still
// shared out over the CPUs (the workers and --photo-threads are counted
// from the CPUs before it is added). Not when a photo's work is split over
// goroutines: with --jobs 1 on two CPUs the spare P let three of them run
// on two CPUs, and the batch took 2.86 s against 2.62 (medians of six
// alternating runs).
func spareProc(jobs, perPhoto int) (restore func()) {
	n := runtime.GOMAXPROCS(0)
	if jobs < n || perPhoto > 1 {
		return func() {} // a P is idle already, or the photo's helpers would share it
	}
	runtime.GOMAXPROCS(n + 1)
	return func() { runtime.GOMAXPROCS(n) }
}

// gcHeadroomBytes is how far a batch lets Go's heap grow beyond its live
// data before collecting.
const gcHeadroomBytes = 24 << 20

// gcHeadroom lets Go's collector wait, during a batch, until the heap has
// grown by a fixed headroom beyond the live data, instead of by the live
// data's own size (GOGC=100): a batch's live heap is small (6-8 MB for
// 100 photos, most of the memory is OpenCV's frames, outside Go's heap),
// so the default collected every few MB of garbage, 51 times in a
// 100-photo 1080p batch (12 with the headroom), each cycle taking CPU
// from the photo workers: 2 workers / 1 went from 1.69-1.71 to 1.76, for
// 24 MB more at the peak (scripts/bench.sh, DEVELOPERS.md). The
// collector still runs at least as often as with GOGC=400, and no less
// often than the default once the live data passes the headroom, so a
// large batch's memory grows as it did. A GOGC set by the user is kept.
type gcHeadroom struct {
	headroom uint64
	percent  int // the percent set, 0 when left alone
	old      int
	sample   []metrics.Sample
}

// newGCHeadroom sets the percent for the live heap now; give it back
// with restore.
func newGCHeadroom(headroom uint64) *gcHeadroom {
	g := &gcHeadroom{headroom: headroom, sample: []metrics.Sample{{Name: "/gc/heap/live:bytes"}}}
	if os.Getenv("GOGC") != "" {
		return g
	}
	g.old = debug.SetGCPercent(100)
	g.percent = 100
	g.adjust()
	return g
}

// adjust sets the collector's percent from the live heap now.
func (g *gcHeadroom) adjust() {
	if g.percent == 0 {
		return
	}
	metrics.Read(g.sample)
	var live uint64
	if v := g.sample[0].Value; v.Kind() == metrics.KindUint64 {
		live = v.Uint64()
	}
	if p := gcPercentFor(live, g.headroom); p != g.percent {
		debug.SetGCPercent(p)
		g.percent = p
	}
}

// gcPercentFor is the GOGC percent that lets a heap of live bytes grow by
// headroom: between Go's default 100 and 400 (none known: 400).
func gcPercentFor(live, headroom uint64) int {
	if live == 0 {
		return 400
	}
	return int(min(400, max(100, 100*headroom/live)))
}

// restore puts back the percent found.
func (g *gcHeadroom) restore() {
	if g.percent != 0 {
		debug.SetGCPercent(g.old)
	}
}
