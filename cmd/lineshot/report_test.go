package main

import (
	"context"
	"encoding/base64"
	"fmt"
	"html/template"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"
)

// chromium returns Debian's headless browser, or "" (scripts/test.sh
// installs the chromium package).
func chromium() string {
	for _, p := range []string{os.Getenv("LINESHOT_CHROMIUM"), "/usr/bin/chromium", "chromium"} {
		if p == "" {
			continue
		}
		if q, err := exec.LookPath(p); err == nil {
			return q
		}
	}
	return ""
}

// The report, opened from disk in a real browser: every image loads and
// the summary's R per bench equals results.json. A screenshot is kept as a
// test artifact (LINESHOT_ARTIFACTS, default the system temp folder).
func TestReportInBrowser(t *testing.T) {
	bin := chromium()
	if bin == "" {
		t.Skip("no chromium (scripts/test.sh installs Debian's chromium)")
	}
	root := makeLab(t)
	out := filepath.Join(t.TempDir(), "results")
	runCLI(t, "batch", "--quiet", "--out", out, root)
	doc := readBatch(t, out)
	opts := append(chromedp.DefaultExecAllocatorOptions[:], chromedp.ExecPath(bin), chromedp.NoSandbox, chromedp.DisableGPU,
		chromedp.Flag("disable-quic", true), chromedp.Flag("disable-background-networking", true),
		chromedp.Flag("disable-component-update", true), chromedp.Flag("disable-sync", true),
		chromedp.UserDataDir(t.TempDir()), chromedp.WindowSize(1280, 1800))
	actx, cancel := chromedp.NewExecAllocator(context.Background(), opts...)
	defer cancel()
	ctx, cancel := chromedp.NewContext(actx)
	defer cancel()
	ctx, cancel = context.WithTimeout(ctx, 90*time.Second)
	defer cancel()
	abs, _ := filepath.Abs(filepath.Join(out, "report.html"))
	fail := func(what string, err error) {
		if err != nil {
			t.Fatalf("browser, %s: %v", what, err)
		}
	}
	fail("open", chromedp.Do(ctx, chromedp.Navigate("file://"+abs), chromedp.WaitReady("footer")))
	_, err := chromedp.Run(ctx, chromedp.Poll[bool](`Array.from(document.images).every(i => i.complete)`, chromedp.WithPollingTimeout(30*time.Second)))
	fail("images", err)
	nImages, err := chromedp.Run(ctx, chromedp.Evaluate[int](`document.images.length`))
	fail("count", err)
	allLoaded, err := chromedp.Run(ctx, chromedp.Evaluate[bool](`Array.from(document.images).every(i => i.complete && i.naturalWidth > 0)`))
	fail("loaded", err)
	cells, err := chromedp.Run(ctx, chromedp.Evaluate[[]map[string]string](`Array.from(document.querySelectorAll('td.r-value')).map(td => ({bench: td.dataset.bench, r: td.dataset.r, sigma: td.dataset.sigma, text: td.textContent}))`))
	fail("summary", err)
	shot, err := chromedp.Run(ctx, chromedp.FullScreenshot(80))
	fail("screenshot", err)
	if !allLoaded {
		t.Error("some images of the report do not load")
	}
	// Summary plot + per bench residual and Rydberg plots + band image and
	// profile per photo: at least 2 per measured photo.
	if nImages < 12 {
		t.Errorf("%d images in the report", nImages)
	}
	want := map[string]float64{}
	for _, b := range doc.Benches {
		if b.Rydberg != nil {
			want[b.Name] = b.Rydberg.R
		}
	}
	if len(cells) != len(want) {
		t.Errorf("%d R values on the page, %d in results.json", len(cells), len(want))
	}
	for _, c := range cells {
		r, err := strconv.ParseFloat(c["r"], 64)
		if err != nil || math.Abs(r-want[c["bench"]]) > 1e-3 || c["text"] != fmt.Sprintf("%.0f", want[c["bench"]]) {
			t.Errorf("bench %s: page says %s (%s), results.json %.3f", c["bench"], c["r"], c["text"], want[c["bench"]])
		}
	}
	dir := os.Getenv("LINESHOT_ARTIFACTS")
	if dir == "" {
		dir = filepath.Join(os.TempDir(), "lineshot-artifacts")
	}
	os.MkdirAll(dir, 0o755)
	p := filepath.Join(dir, "report.jpg")
	if err := os.WriteFile(p, shot, 0o644); err == nil {
		t.Logf("screenshot: %s", p)
	}
}

// srcAttr writes what html/template writes for a data: URL in an img's src
// attribute, byte for byte (the report was the same file before and after
// it): the template package itself is the reference, over bytes whose
// base64 holds every character of its alphabet, + and / among them.
func TestSrcAttrAsTemplate(t *testing.T) {
	raw := make([]byte, 3*256)
	for i := range raw {
		raw[i] = byte(i * 7)
	}
	for _, mt := range []string{"image/jpeg", "image/svg+xml"} {
		want, got := new(strings.Builder), new(strings.Builder)
		u := template.URL("data:" + mt + ";base64," + base64.StdEncoding.EncodeToString(raw))
		if err := template.Must(template.New("").Parse(`<img alt="a" src="{{.}}">`)).Execute(want, u); err != nil {
			t.Fatal(err)
		}
		if err := template.Must(template.New("").Parse(`<img alt="a" {{.}}>`)).Execute(got, srcAttr(mt, raw)); err != nil {
			t.Fatal(err)
		}
		if got.String() != want.String() || !strings.Contains(want.String(), "&#43;") {
			t.Errorf("%s: srcAttr gives\n%.120s…\nhtml/template\n%.120s…", mt, got, want)
		}
	}
}
