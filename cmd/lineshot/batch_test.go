package main

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"runtime/debug"
	"slices"
	"sort"
	"strings"
	"syscall"
	"testing"

	"lineshot/calibrate"
	"lineshot/imaging"
)

// makeLab builds an invented lab folder: bench-a (600/mm, one mercury and
// two hydrogen photos), bench-b (300/mm, settings file, bad files), bench-c
// (hydrogen only, no calibration), an empty folder, a folder named like a
// photo, and a link that loops.
func makeLab(t *testing.T) string {
	t.Helper()
	root := filepath.Join(t.TempDir(), "lab")
	a, b, c := setups[1], setups[0], setups[1]
	for _, d := range []string{"bench-a", "bench-b", "bench-c", "empty", "bench-b/fake.jpg"} {
		os.MkdirAll(filepath.Join(root, d), 0o755)
	}
	mv := func(src, dst string) {
		if err := os.Rename(src, filepath.Join(root, dst)); err != nil {
			t.Fatal(err)
		}
	}
	tmp := t.TempDir()
	p, _ := a.render(t, tmp, "mercury", 61)
	mv(p, "bench-a/IMG_0001.jpg")
	p, _ = a.render(t, tmp, "hydrogen", 62)
	mv(p, "bench-a/IMG_0002.jpg")
	p, _ = a.render(t, tmp, "hydrogen", 63)
	mv(p, "bench-a/IMG_0003.jpg")
	p, _ = b.render(t, tmp, "mercury", 64)
	mv(p, "bench-b/cal.jpg")
	p, _ = b.render(t, tmp, "hydrogen", 65)
	mv(p, "bench-b/h.jpg")
	p, _ = c.render(t, tmp, "hydrogen", 66)
	mv(p, "bench-c/h-only.jpg")
	os.WriteFile(filepath.Join(root, "bench-b", "empty.jpg"), nil, 0o644)
	os.WriteFile(filepath.Join(root, "bench-b", "notes.jpg"), []byte("lamp 2 flickers, ask Ms Okafor"), 0o644)
	os.WriteFile(filepath.Join(root, "bench-b", "blurry.jpg"), []byte("excluded by the settings file"), 0o644)
	os.WriteFile(filepath.Join(root, "bench-b", settingsFile), []byte("# bench B, the old 300/mm grating\nlines-per-mm: 300\nexclude: blurry.jpg\n"), 0o644)
	if err := os.Symlink("loop.jpg", filepath.Join(root, "bench-b", "loop.jpg")); err != nil {
		t.Fatal(err)
	}
	return root
}

// treeDigest hashes every file under root (names and contents).
func treeDigest(t *testing.T, root string) [32]byte {
	h := sha256.New()
	filepath.WalkDir(root, func(p string, d fs.DirEntry, err error) error {
		h.Write([]byte(p))
		if err == nil && d.Type().IsRegular() {
			b, _ := os.ReadFile(p)
			h.Write(b)
		}
		return nil
	})
	var out [32]byte
	copy(out[:], h.Sum(nil))
	return out
}

func readBatch(t *testing.T, out string) batchDoc {
	t.Helper()
	raw, err := os.ReadFile(filepath.Join(out, "results.json"))
	if err != nil {
		t.Fatal(err)
	}
	var d batchDoc
	if err := json.Unmarshal(raw, &d); err != nil {
		t.Fatal(err)
	}
	return d
}

func TestBatchOverALab(t *testing.T) {
	root := makeLab(t)
	before := treeDigest(t, root)
	out := filepath.Join(t.TempDir(), "results")
	stdout, stderr, code := runCLI(t, "batch", "-j", "2", "--quiet", "--out", out, root)
	if code != exitFailed {
		t.Fatalf("exit %d, want %d (some files are bad)\n%s\n%s", code, exitFailed, stdout, stderr)
	}
	if treeDigest(t, root) != before {
		t.Error("the input folder changed")
	}
	for _, bad := range []string{"empty.jpg: empty file", "notes.jpg: not an image", "loop.jpg: broken or looping link"} {
		if !strings.Contains(stderr, bad) {
			t.Errorf("stderr lacks %q:\n%s", bad, stderr)
		}
	}
	if strings.Contains(stderr, "blurry.jpg") || strings.Contains(stderr, "panic") {
		t.Errorf("stderr: %s", stderr)
	}
	d := readBatch(t, out)
	byName := map[string]benchResult{}
	for _, b := range d.Benches {
		byName[b.Name] = b
	}
	for _, name := range []string{"bench-a", "bench-b"} {
		b, ok := byName[name]
		if !ok || b.Rydberg == nil {
			t.Errorf("%s: no bench R (%+v)", name, b.Warnings)
			continue
		}
		if rel := b.Rydberg.R/calibrate.RHydrogen() - 1; math.Abs(rel) > 0.0005 {
			t.Errorf("%s: R %.0f ± %.0f, %.4f %% from R_H", name, b.Rydberg.R, b.Rydberg.Sigma, 100*rel)
		}
		if len(b.CalPhotos) != 1 || b.CalPhotos[0].Lamp != "mercury" {
			t.Errorf("%s: calibration photos %d", name, len(b.CalPhotos))
		}
	}
	if n := len(byName["bench-a"].Rydberg.LinesUsed); n < 8 {
		t.Errorf("bench-a R uses %d lines; two hydrogen photos give at least 8", n)
	}
	if b := byName["bench-b"]; b.Calibration == nil || b.Settings.LinesPerMM != 300 {
		t.Errorf("bench-b settings not applied: %+v", b.Settings)
	}
	c := byName["bench-c"]
	if c.Calibration != nil || len(c.Photos) != 1 || !strings.Contains(strings.Join(c.Warnings, " "), "no calibration photo") {
		t.Errorf("bench-c: %+v", c.Warnings)
	}
	if _, ok := byName["empty"]; ok {
		t.Error("an empty folder became a bench")
	}
	// One CSV row per line measured, plus the header.
	f, _ := os.Open(filepath.Join(out, "results.csv"))
	rows, err := csv.NewReader(f).ReadAll()
	f.Close()
	var lines int
	for _, b := range d.Benches {
		for _, r := range append(append([]imageResult(nil), b.CalPhotos...), b.Photos...) {
			lines += len(r.Lines)
		}
	}
	if err != nil || len(rows) != lines+1 {
		t.Errorf("results.csv: %v, %d rows for %d lines", err, len(rows), lines)
	}
	for _, name := range []string{"bench-a.json", "bench-b.json"} {
		if _, err := readCalibration(filepath.Join(out, "calibrations", name)); err != nil {
			t.Errorf("calibration file: %v", err)
		}
	}
	// Running again takes every measured photo from the cache.
	stdout, _, _ = runCLI(t, "batch", "--quiet", "--out", out, root)
	if !strings.Contains(stdout, "(8 unchanged since the last run") { // 6 photos and 2 bad files; the looping link is never read
		t.Errorf("second run: %s", stdout)
	}
}

// The cache holds derived files, written without a flush to disk: a
// record cut to nothing or a band image lost or emptied (a power cut, a
// tidy-up by hand) sends that photo back to be measured, and the rerun's
// report has every band image again.
func TestBatchRemeasuresDamagedCache(t *testing.T) {
	root := makeLab(t)
	out := filepath.Join(t.TempDir(), "results")
	runCLI(t, "batch", "--quiet", "--out", out, root)
	recs, _ := filepath.Glob(filepath.Join(out, "cache", "*.json"))
	var withImage []photoRecord
	var paths []string
	for _, p := range recs {
		raw, _ := os.ReadFile(p)
		var r photoRecord
		if json.Unmarshal(raw, &r) == nil && r.Image != "" {
			withImage, paths = append(withImage, r), append(paths, p)
		}
	}
	if len(withImage) < 3 {
		t.Fatalf("%d cached photos with a band image, want 3 or more", len(withImage))
	}
	os.WriteFile(paths[0], nil, 0o644)                               // record cut to nothing
	os.Remove(filepath.Join(out, withImage[1].Image))                // image lost
	os.WriteFile(filepath.Join(out, withImage[2].Image), nil, 0o644) // image emptied
	stdout, _, _ := runCLI(t, "batch", "--quiet", "--out", out, root)
	if !strings.Contains(stdout, "(5 unchanged since the last run") { // 8 cached, 3 damaged
		t.Errorf("rerun after damage: %s", stdout)
	}
	d := readBatch(t, out)
	n := 0
	for _, b := range d.Benches {
		for name, img := range b.Images {
			st, err := os.Stat(filepath.Join(out, img))
			if err != nil || st.Size() == 0 {
				t.Errorf("%s: band image %s missing or empty after the rerun", name, img)
			}
			n++
		}
	}
	if n != len(withImage) {
		t.Errorf("%d band images in the rerun's results, %d before", n, len(withImage))
	}
}

// A photo whose working files cannot be written (a full disk; here its
// cache record's name is taken by a folder, and its band image's by
// another) keeps its result: measured as when alone, one line on stderr,
// exit 0; and the next run measures it again.
func TestBatchKeepsResultsWhenWorkingFilesFail(t *testing.T) {
	root := filepath.Join(t.TempDir(), "lab")
	bench := filepath.Join(root, "bench-z")
	os.MkdirAll(bench, 0o755)
	for _, f := range []struct {
		lamp, name string
		seed       uint64
	}{{"mercury", "hg.jpg", 81}, {"hydrogen", "h.jpg", 82}} {
		p, _ := setups[1].render(t, t.TempDir(), f.lamp, f.seed)
		if err := os.Rename(p, filepath.Join(bench, f.name)); err != nil {
			t.Fatal(err)
		}
	}
	clean := filepath.Join(t.TempDir(), "clean")
	if _, stderr, code := runCLI(t, "batch", "--quiet", "--out", clean, root); code != 0 {
		t.Fatalf("clean run: exit %d %s", code, stderr)
	}
	out := filepath.Join(t.TempDir(), "out")
	hgKey, hKey := cacheName(filepath.Join(bench, "hg.jpg")), cacheName(filepath.Join(bench, "h.jpg"))
	os.MkdirAll(filepath.Join(out, "cache", hgKey+".json", "x"), 0o755)
	os.MkdirAll(filepath.Join(out, "images", hKey+".jpg", "x"), 0o755)
	stdout, stderr, code := runCLI(t, "batch", "--quiet", "--out", out, root)
	if code != 0 || !strings.Contains(stderr, "2 photos' working files not kept") || strings.Count(stderr, "\n") != 1 {
		t.Fatalf("exit %d, stderr %q", code, stderr)
	}
	got, want := readBatch(t, out), readBatch(t, clean)
	if len(got.Benches) != 1 || got.Benches[0].Rydberg == nil || want.Benches[0].Rydberg == nil {
		t.Fatalf("no bench R: %s", stdout)
	}
	if g, w := got.Benches[0].Rydberg.R, want.Benches[0].Rydberg.R; g != w {
		t.Errorf("R %.1f, alone %.1f", g, w)
	}
	// The rerun measures both again; with one record's name still taken,
	// one photo's working files are not kept.
	os.RemoveAll(filepath.Join(out, "images", hKey+".jpg"))
	stdout, stderr, _ = runCLI(t, "batch", "--quiet", "--out", out, root)
	if !strings.Contains(stdout, "(0 unchanged since the last run") || !strings.Contains(stderr, "lineshot: 1 photo's working files not kept") {
		t.Errorf("rerun: %s\n%s", stdout, stderr)
	}
}

// Interrupted midway, a batch keeps what it finished and writes complete
// outputs; the next run measures only the rest.
func TestBatchInterruptedAndResumed(t *testing.T) {
	root := makeLab(t)
	out := filepath.Join(t.TempDir(), "results")
	ctx, cancel := context.WithCancel(context.Background())
	var so, se bytes.Buffer
	err := batchMain(ctx, []string{"-j", "1", "--quiet", "--out", out, root}, &so, &se, func(done int) {
		if done == 3 {
			cancel()
		}
	})
	if code := exitCode(err, &se); code != exitFailed || !strings.Contains(se.String(), "interrupted: 3 of") {
		t.Fatalf("exit %d: %s", code, se.String())
	}
	d := readBatch(t, out) // complete JSON, whatever was finished
	if len(d.Benches) != 1 || d.Benches[0].Name != "bench-a" {
		t.Errorf("after the interruption: %d benches", len(d.Benches))
	}
	entries, _ := os.ReadDir(out)
	for _, e := range entries {
		if strings.Contains(e.Name(), ".tmp-") {
			t.Errorf("half-written file left: %s", e.Name())
		}
	}
	stdout, _, _ := runCLI(t, "batch", "--quiet", "--out", out, root)
	if !strings.Contains(stdout, "(3 unchanged since the last run") {
		t.Errorf("resumed run: %s", stdout)
	}
	if d := readBatch(t, out); len(d.Benches) != 3 {
		t.Errorf("after resuming: %d benches", len(d.Benches))
	}
}

// Shards split the benches with no overlap and merge back into the whole.
func TestBatchShardsMerge(t *testing.T) {
	root := makeLab(t)
	dir := t.TempDir()
	var parts []string
	total := 0
	for _, s := range []string{"1/2", "2/2"} {
		p := filepath.Join(dir, "part"+s[:1])
		runCLI(t, "batch", "--quiet", "--shard", s, "--out", p, root)
		total += len(readBatch(t, p).Benches)
		parts = append(parts, p)
	}
	if total != 3 {
		t.Errorf("the shards hold %d benches, want 3", total)
	}
	all := filepath.Join(dir, "all")
	mergeOut, stderr, code := runCLI(t, append([]string{"merge", "--out", all}, parts...)...)
	if code != 0 {
		t.Fatalf("merge: exit %d: %s", code, stderr)
	}
	if d := readBatch(t, all); len(d.Benches) != 3 {
		t.Errorf("merged: %d benches", len(d.Benches))
	}
	// Each failure (bench-b's unreadable files) once, as in one batch
	// over the whole folder: every shard walks the whole tree, and each
	// had reported every bench's.
	whole := filepath.Join(dir, "whole")
	runCLI(t, "batch", "--quiet", "--out", whole, root)
	reasons := func(d batchDoc) []string {
		var out []string
		for _, f := range d.Failures {
			out = append(out, f.File+": "+f.Reason)
		}
		sort.Strings(out)
		return out
	}
	got, want := reasons(readBatch(t, all)), reasons(readBatch(t, whole))
	if !slices.Equal(got, want) || len(want) == 0 {
		t.Errorf("merged failures:\n%s\nwant, as in one batch:\n%s", strings.Join(got, "\n"), strings.Join(want, "\n"))
	}
	if n := fmt.Sprintf("; %d inputs not measured", len(want)); !strings.Contains(mergeOut, n) {
		t.Errorf("merge says %q, want it to count the failures (%q)", mergeOut, n)
	}
	if _, _, code := runCLI(t, "merge", "--out", filepath.Join(dir, "again"), parts[0], parts[0]); code == 0 {
		t.Error("merging a part with itself should be refused")
	}
	// Merged into one of its parts, the part's results would be replaced
	// by the whole: refused, the part as it was.
	before := digest(t, filepath.Join(parts[0], "results.json"))
	if _, stderr, code := runCLI(t, append([]string{"merge", "--out", parts[0] + "/."}, parts...)...); code != exitUsage || !strings.Contains(stderr, "one of the parts") {
		t.Errorf("merge into a part: exit %d, %s", code, stderr)
	}
	if digest(t, filepath.Join(parts[0], "results.json")) != before {
		t.Error("merging into a part changed its results.json")
	}
	// Refused parts leave no output folder behind.
	if _, err := os.Stat(filepath.Join(dir, "again")); !os.IsNotExist(err) {
		t.Errorf("a refused merge made its output folder (%v)", err)
	}
	// Every band image of the parts is in the merged folder.
	n := 0
	for _, b := range readBatch(t, all).Benches {
		for _, img := range b.Images {
			if st, err := os.Stat(filepath.Join(all, img)); err != nil || st.Size() == 0 {
				t.Errorf("%s: band image %s missing from the merge", b.Name, img)
			}
			n++
		}
	}
	if n == 0 {
		t.Error("no band images in the merged results")
	}
}

func TestBatchBadArguments(t *testing.T) {
	dir := t.TempDir()
	if _, _, code := runCLI(t, "batch", "--out", filepath.Join(dir, "o"), filepath.Join(dir, "missing")); code != exitFailed {
		t.Errorf("missing input: exit %d", code)
	}
	if _, stderr, code := runCLI(t, "batch", "--out", filepath.Join(dir, "o"), dir); code != exitFailed || !strings.Contains(stderr, "no photos") {
		t.Errorf("empty input: exit %d %s", code, stderr)
	}
	if _, _, code := runCLI(t, "batch", "--shard", "3/2", "--out", filepath.Join(dir, "o"), dir); code != exitUsage {
		t.Errorf("bad shard: exit %d", code)
	}
	// The photos' own folder as the output folder, by its path and by a
	// link to it: refused before anything is written into it.
	photos := filepath.Join(dir, "photos")
	os.MkdirAll(photos, 0o755)
	os.Symlink(photos, filepath.Join(dir, "link"))
	for _, o := range []string{photos, filepath.Join(dir, "link"), photos + "/."} {
		if _, stderr, code := runCLI(t, "batch", "--out", o, photos); code != exitUsage || !strings.Contains(stderr, "the photos' folder itself") {
			t.Errorf("--out %s: exit %d %s", o, code, stderr)
		}
	}
	if ents, _ := os.ReadDir(photos); len(ents) != 0 {
		t.Errorf("the refused run wrote %d entries into the photos' folder", len(ents))
	}
	ro := filepath.Join(dir, "ro")
	os.MkdirAll(ro, 0o555)
	if os.Getuid() != 0 { // root writes anywhere
		if _, stderr, code := runCLI(t, "batch", "--out", filepath.Join(ro, "x"), makeLab(t)); code != exitFailed || !strings.Contains(stderr, "cannot write") {
			t.Errorf("unwritable output: exit %d %s", code, stderr)
		}
	}
}

func TestParseSettings(t *testing.T) {
	st, err := parseSettings(strings.NewReader("lines-per-mm: 600 # the new grating\ncalibration: a.jpg b.jpg\nlamp: c.jpg helium\nexclude: d.jpg e.jpg\n"))
	if err != nil || st.LinesPerMM != 600 || len(st.Calibration) != 2 || st.Lamps["c.jpg"] != "helium" || !st.Exclude["e.jpg"] {
		t.Errorf("%+v %v", st, err)
	}
	for _, bad := range []string{"lines-per-mm: many\n", "lamp: x.jpg plasma\n", "colour: blue\n", "just words\n", "calibration:\n"} {
		if _, err := parseSettings(strings.NewReader(bad)); err == nil || !strings.Contains(err.Error(), "line 1") {
			t.Errorf("%q: %v", bad, err)
		}
	}
}

func FuzzParseSettings(f *testing.F) {
	f.Add("lines-per-mm: 600\ncalibration: a.jpg\nlamp: b.jpg hg\nexclude: c.jpg\n")
	f.Fuzz(func(t *testing.T, s string) {
		st, err := parseSettings(strings.NewReader(s))
		if err == nil && (st.LinesPerMM < 0 || math.IsNaN(st.LinesPerMM)) {
			t.Fatalf("accepted %v", st.LinesPerMM)
		}
	})
}

// A bench of a dim hydrogen lamp filmed as a video, with two dark frames
// named in the settings file: the video is one photo (its frames
// averaged), the dark frames are subtracted from it and are not photos
// themselves; R comes out within 0.05 % of CODATA 2018 R_H.
func TestBatchVideoAndDarkFrames(t *testing.T) {
	root := filepath.Join(t.TempDir(), "lab")
	dir := filepath.Join(root, "bench-v")
	os.MkdirAll(dir, 0o755)
	simulate(t, dir, "hg.jpg", "--lamp", "mercury", "--size", "1280x720", "--tilt", "1", "--seed", "5")
	simulate(t, dir, "h.avi", "--lamp", "hydrogen", "--size", "1280x720", "--tilt", "1", "--peak", "0.2", "--read-noise", "14", "--frames", "8", "--seed", "6")
	for k, name := range []string{"off1.jpg", "off2.jpg"} { // JPEG stills under an MJPEG video, as phones give
		simulate(t, dir, name, "--lamp", "hydrogen", "--size", "1280x720", "--tilt", "1", "--peak", "1e-9", "--read-noise", "14", "--seed", fmt.Sprint(40+k))
	}
	for _, f := range []string{"hg.truth.json", "h.truth.json", "off1.truth.json", "off2.truth.json"} {
		os.Remove(filepath.Join(dir, f))
	}
	os.WriteFile(filepath.Join(dir, settingsFile), []byte("dark: off1.jpg off2.jpg   # lamp off, same exposure\n"), 0o644)
	out := filepath.Join(t.TempDir(), "results")
	stdout, stderr, code := runCLI(t, "batch", "--quiet", "--out", out, root)
	if code != 0 {
		t.Fatalf("exit %d\n%s\n%s", code, stdout, stderr)
	}
	d := readBatch(t, out)
	if len(d.Benches) != 1 {
		t.Fatalf("%d benches", len(d.Benches))
	}
	b := d.Benches[0]
	if len(b.Photos) != 1 || !strings.HasSuffix(b.Photos[0].File, "h.avi") {
		t.Fatalf("measured photos: %+v", b.Photos)
	}
	q := b.Photos[0].Quality
	if q == nil || q.Frames != 8 || q.DarkFrames != 2 {
		t.Fatalf("video measured with %+v, want 8 frames and 2 dark frames", q)
	}
	// Dark-subtracted down to zero the background was once rectified and
	// a dim band turned 0.3°; chasing its noisy centre line turned another
	// 0.4° (false moved-camera and leaning-line warnings).
	if math.Abs(q.AngleDeg-1) > 0.05 {
		t.Errorf("dark-subtracted video: band at %.3f° (truth 1°), residual tilt %.3f ± %.3f°", q.AngleDeg, q.ResidualTiltDeg, q.ResidualTiltErr)
	}
	for _, w := range b.Photos[0].Warnings {
		if strings.Contains(w, "moved") || strings.Contains(w, "lean") {
			t.Errorf("same setup, yet: %s", w)
		}
	}
	if b.Rydberg == nil {
		t.Fatalf("no R: %v", b.Warnings)
	}
	if rel := b.Rydberg.R/calibrate.RHydrogen() - 1; math.Abs(rel) > 0.0005 {
		t.Errorf("R %.0f ± %.0f, %.4f %% from R_H", b.Rydberg.R, b.Rydberg.Sigma, 100*rel)
	}
}

// A photo's cached record gives back the strip's geometry in full: the
// line positions in the photo (ToImage, which follows a bowed band) come
// out the same from the cache as from the measurement, through JSON.
func TestStripRecordRoundTrip(t *testing.T) {
	s := imaging.Strip{AngleDeg: 2.5, Origin: [2]float64{12, 340}, BandHalfHeight: 40, Profile: make([]float64, 1000),
		Bow: imaging.Bow{C0: 0.4, C1: -0.002, C2: 3e-6, Mid: 499.5}, StrayLight: true, BackgroundRange: 0.02}
	raw, err := json.Marshal(toRecord(s))
	if err != nil {
		t.Fatal(err)
	}
	var r stripRecord
	if err := json.Unmarshal(raw, &r); err != nil {
		t.Fatal(err)
	}
	back := r.strip()
	for _, p := range []float64{0, 250, 499.5, 999} {
		x0, y0 := s.ToImage(p)
		x1, y1 := back.ToImage(p)
		if math.Hypot(x1-x0, y1-y0) > 1e-9 {
			t.Errorf("position %g: (%.3f, %.3f) measured, (%.3f, %.3f) from the cache", p, x0, y0, x1, y1)
		}
	}
	if back.StrayLight != s.StrayLight || back.BackgroundRange != s.BackgroundRange {
		t.Errorf("quality lost in the cache: %+v", back)
	}
}

// What systems put beside photos is passed over in silence: macOS's
// resource files and hidden folders, a NAS's thumbnail folders, a USB
// stick's recycle bin. A photos' folder given by a hidden name is still
// searched.
func TestDiscoverPassesOverSystemFiles(t *testing.T) {
	root := filepath.Join(t.TempDir(), ".class")
	for _, rel := range []string{"bench-1/hg.jpg", "bench-1/._hg.jpg", "bench-1/.thumbnails/hg.jpg", ".Trashes/501/old.jpg",
		"bench-1/@eaDir/hg.jpg/SYNOPHOTO_THUMB_XL.jpg", "$RECYCLE.BIN/S-1-5-21/$RABC123.jpg", "System Volume Information/x.jpg"} {
		p := filepath.Join(root, rel)
		if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(p, []byte("x"), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	benches, fails, passed := discover(root, filepath.Join(t.TempDir(), "out"))
	if len(benches) != 1 || benches[0].Name != "bench-1" || len(benches[0].Photos) != 1 || filepath.Base(benches[0].Photos[0]) != "hg.jpg" {
		t.Errorf("benches %+v", benches)
	}
	if len(fails) != 0 || len(passed) != 0 {
		t.Errorf("failures %+v, passed over %q", fails, passed)
	}
}

// Camera raw files are reported with what to do, not passed over as
// non-photos; a raw file beside the camera's JPEG of the same shot is
// passed over in silence (the JPEG is measured). HEIC photos are photos;
// one beside a JPEG of the same name (converted from it) is passed over.
func TestDiscoverReportsUnreadablePhotos(t *testing.T) {
	root := filepath.Join(t.TempDir(), "class")
	for _, rel := range []string{"bench-1/IMG_0001.HEIC", "bench-1/IMG_0002.JPG", "bench-1/IMG_0002.CR2", "bench-1/IMG_0003.nef", "bench-1/notes.txt", "bench-1/IMG_0002.heic"} {
		p := filepath.Join(root, rel)
		os.MkdirAll(filepath.Dir(p), 0o755)
		if err := os.WriteFile(p, []byte("x"), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	benches, fails, _ := discover(root, filepath.Join(t.TempDir(), "out"))
	var names []string
	if len(benches) == 1 {
		for _, p := range benches[0].Photos {
			names = append(names, filepath.Base(p))
		}
	}
	if !slices.Equal(names, []string{"IMG_0001.HEIC", "IMG_0002.JPG"}) {
		t.Errorf("benches %+v", benches)
	}
	got := map[string]string{}
	for _, f := range fails {
		got[filepath.Base(f.File)] = f.Reason
	}
	if len(got) != 1 || !strings.Contains(got["IMG_0003.nef"], "raw file") {
		t.Errorf("failures %+v", fails)
	}
}

// A bench settings file naming a file that is not in the folder (a
// misspelt calibration photo, lamp or dark frame) is reported, one line
// naming each; excluded names may be gone; a correct file is no failure.
func TestDiscoverChecksSettingsNames(t *testing.T) {
	root := filepath.Join(t.TempDir(), "class")
	write := func(rel, text string) {
		p := filepath.Join(root, rel)
		os.MkdirAll(filepath.Dir(p), 0o755)
		if err := os.WriteFile(p, []byte(text), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	for _, b := range []string{"bench-1", "bench-2"} {
		write(b+"/hg.jpg", "x")
		write(b+"/h.jpg", "x")
		write(b+"/off.jpg", "x")
	}
	write("bench-1/"+settingsFile, "calibration: hg-a.jpg\nlamp: h2.jpg hydrogen\ndark: off.jpg off2.jpg\nexclude: gone.jpg\n")
	write("bench-2/"+settingsFile, "calibration: hg.jpg\nlamp: h.jpg hydrogen\ndark: off.jpg\nexclude: gone.jpg\n")
	_, fails, _ := discover(root, filepath.Join(t.TempDir(), "out"))
	if len(fails) != 1 || !strings.Contains(fails[0].File, filepath.Join("bench-1", settingsFile)) {
		t.Fatalf("failures %+v", fails)
	}
	for _, want := range []string{"calibration: hg-a.jpg", "lamp: h2.jpg", "dark: off2.jpg"} {
		if !strings.Contains(fails[0].Reason, want) {
			t.Errorf("%q lacks %q", fails[0].Reason, want)
		}
	}
	if strings.Contains(fails[0].Reason, "gone.jpg") || strings.Contains(fails[0].Reason, "dark: off.jpg") {
		t.Errorf("%q names a file it should not", fails[0].Reason)
	}
}

// Last week's output folder inside the class's folder is passed over (its
// band images are not photos), whether it finished (results.json) or was
// stopped before writing one; a folder holding someone else's
// results.json is still searched.
func TestDiscoverPassesOverOutputFolders(t *testing.T) {
	root := filepath.Join(t.TempDir(), "class")
	write := func(rel, text string) {
		p := filepath.Join(root, rel)
		if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(p, []byte(text), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	write("bench-1/hg.jpg", "x")
	write("results-monday/results.json", "{\n  \"tool\": \"lineshot\",\n  \"schema\": 1\n}\n")
	write("results-monday/images/0a1b.jpg", "x")
	write("stopped/cache/0a1b.json", "{}")
	write("stopped/calibrations/.keep", "")
	write("stopped/images/0a1b.jpg", "x")
	write("bench-2/results.json", `{"tool": "another program"}`)
	write("bench-2/h.jpg", "x")
	write("bench-3/cache/h.jpg", "x") // a folder named cache alone is a bench
	// Named pipes where files are read are not opened (that would wait).
	write("bench-4/h.jpg", "x")
	if err := syscall.Mkfifo(filepath.Join(root, "bench-4", "results.json"), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := syscall.Mkfifo(filepath.Join(root, "bench-4", settingsFile), 0o644); err != nil {
		t.Fatal(err)
	}
	benches, fails, passed := discover(root, filepath.Join(root, "results-tuesday"))
	var names []string
	for _, b := range benches {
		names = append(names, b.Name)
	}
	if got, want := strings.Join(names, " "), "bench-1 bench-2 bench-3/cache bench-4"; got != want {
		t.Errorf("benches %q, want %q", got, want)
	}
	if len(fails) != 1 || !strings.Contains(fails[0].File, settingsFile) || fails[0].Reason != "not a regular file" {
		t.Errorf("failures: %+v", fails)
	}
	if len(passed) != 2 || filepath.Base(passed[0]) != "results-monday" || filepath.Base(passed[1]) != "stopped" {
		t.Errorf("passed over %q", passed)
	}
}

// spareProc adds a P only while every P measures a photo on one goroutine,
// and puts the number back; the batch's results do not depend on it (the
// workers are counted before it, TestBatchOverALab checks the results).
func TestSpareProc(t *testing.T) {
	n := runtime.GOMAXPROCS(0)
	for _, c := range []struct{ jobs, perPhoto int }{{n - 1, 1}, {1, n}, {n, 2}} {
		restore := spareProc(c.jobs, c.perPhoto)
		if got := runtime.GOMAXPROCS(0); got != n {
			t.Errorf("%d jobs of %d goroutines: GOMAXPROCS %d, want %d unchanged", c.jobs, c.perPhoto, got, n)
		}
		restore()
	}
	restore := spareProc(n, 1)
	if got := runtime.GOMAXPROCS(0); got != n+1 {
		t.Errorf("with every P measuring a photo: GOMAXPROCS %d, want %d", got, n+1)
	}
	restore()
	if got := runtime.GOMAXPROCS(0); got != n {
		t.Errorf("after the batch: GOMAXPROCS %d, want %d back", got, n)
	}
}

// A bench's summary line counts its photos in words that agree, as does
// the batch's first line.
func TestSummaryLinePlural(t *testing.T) {
	for want, got := range map[string]string{"1 photo": count(1, "photo"), "0 photos": count(0, "photo"), "1 bench": count(1, "bench"), "3 benches": count(3, "bench")} {
		if got != want {
			t.Errorf("got %q, want %q", got, want)
		}
	}
	for n, want := range map[int]string{0: "0 other photos", 1: "1 other photo;", 2: "2 other photos"} {
		b := benchResult{Name: "b", Photos: make([]imageResult, n), Warnings: []string{"w"}}
		if got := b.summaryLine(); !strings.Contains(got, want) {
			t.Errorf("%d photos: %q, want %q in it", n, got, want)
		}
	}
}

// The collector's percent lets the live heap grow by the headroom, never
// below Go's default nor above 400.
func TestGCPercentFor(t *testing.T) {
	const mb = 1 << 20
	for _, c := range []struct {
		live uint64
		want int
	}{{0, 400}, {2 * mb, 400}, {6 * mb, 400}, {8 * mb, 300}, {12 * mb, 200}, {24 * mb, 100}, {200 * mb, 100}} {
		if got := gcPercentFor(c.live, 24*mb); got != c.want {
			t.Errorf("live %d MB: percent %d, want %d", c.live/mb, got, c.want)
		}
	}
}

// A batch's collector setting is its own: given back afterwards, and a
// GOGC the user set is left alone.
func TestGCHeadroomRestoresAndKeepsUsersGOGC(t *testing.T) {
	current := func() int { p := debug.SetGCPercent(100); debug.SetGCPercent(p); return p }
	defer debug.SetGCPercent(debug.SetGCPercent(73))
	g := newGCHeadroom(1 << 40) // a headroom no live heap fills: 400
	if p := current(); p != 400 {
		t.Errorf("during the batch: percent %d, want 400", p)
	}
	g.restore()
	if p := current(); p != 73 {
		t.Errorf("after the batch: percent %d, want the 73 found", p)
	}
	t.Setenv("GOGC", "73")
	g = newGCHeadroom(1 << 40)
	g.adjust()
	if p := current(); p != 73 {
		t.Errorf("with GOGC set: percent %d, want the user's 73", p)
	}
	g.restore()
}
