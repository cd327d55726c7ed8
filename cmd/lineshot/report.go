package main

import (
	"bufio"
	"bytes"
	"encoding/base64"
	"fmt"
	"html/template"
	"image/color"
	"io"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"sort"
	"strconv"
	"strings"

	"golang.org/x/sync/errgroup"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"lineshot/calibrate"
	"lineshot/imaging"
)

// The report's palette, our own: ink, slate, teal accent, amber warnings.
var (
	inkColor    = color.RGBA{0x1f, 0x29, 0x33, 0xff}
	tealColor   = color.RGBA{0x0f, 0x76, 0x6e, 0xff}
	amberColor  = color.RGBA{0xb4, 0x53, 0x09, 0xff}
	mutedColor  = color.RGBA{0x94, 0xa3, 0xb8, 0xff}
	markerColor = color.RGBA{0xf5, 0x9e, 0x0b, 0xff}
)

// stripImageWidth is the most pixels across a saved band image has.
const stripImageWidth = 1600

// writeStripImage saves (as JPEG, quality 85) the straightened band with
// an amber tick above and below every measured line; with derived set, as
// a file the batch can make again (writeDerivedAtomic). The band image
// comes from imaging already shrunk to at most stripImageWidth px across
// (Options.ImageMaxWidth); the ticks scale from profile positions to it.
func writeStripImage(path string, m measured, derived bool) error {
	src := m.strip.Image
	if src == nil {
		return nil
	}
	b := src.Bounds()
	w, h := b.Dx(), b.Dy()
	tickScale := float64(w) / float64(max(1, len(m.strip.Profile)))
	const tick = 10
	// The band between two rows of ticks, one at each line, drawn straight
	// into the encoder's buffer.
	mark := []uint8{markerColor.R, markerColor.G, markerColor.B, 255}
	draw := func(pix []uint8) {
		stride := 4 * w
		clear(pix[:tick*stride]) // black tick rows (the buffer is not cleared)
		clear(pix[(h+tick)*stride:])
		for y := 0; y < h; y++ {
			o := src.PixOffset(b.Min.X, b.Min.Y+y)
			copy(pix[(y+tick)*stride:(y+tick+1)*stride], src.Pix[o:o+stride])
		}
		// Ticks are 3 px wide: the encoder halves the colour resolution
		// (4:2:0), and a 1 px orange tick beside black came out grey-violet.
		for _, p := range m.found.Peaks {
			xc := int(p.Center*tickScale + 0.5)
			for x := max(0, xc-1); x <= min(w-1, xc+1); x++ {
				for y := 0; y < tick-2; y++ {
					for _, row := range []int{y, h + 2*tick - 1 - y} {
						copy(pix[row*stride+4*x:], mark)
					}
				}
			}
		}
	}
	if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
		return err
	}
	enc := func(wr io.Writer) error { return imaging.WriteJPEGDrawn(wr, w, h+2*tick, 85, draw) }
	if derived {
		return writeDerivedAtomic(path, enc)
	}
	return writeFileAtomic(path, enc)
}

// pngData renders a plot to an img element's src attribute holding a
// data: URI (srcAttr). SVG, not PNG: vector text renders several times
// faster than rasterising, and stays sharp when zoomed.
func pngData(p *plot.Plot, w, h vg.Length) (template.HTMLAttr, error) {
	wt, err := p.WriterTo(w, h, "svg")
	if err != nil {
		return "", err
	}
	var buf bytes.Buffer
	if _, err := wt.WriteTo(&buf); err != nil {
		return "", err
	}
	return srcAttr("image/svg+xml", buf.Bytes()), nil
}

// srcAttr is the attribute src="data:…" for an image of the given media
// type, as html/template writes a data: URL into an attribute (a + as
// &#43;, the only character of a media type or of base64 it escapes).
// Handed over as an attribute, html/template leaves it as it is instead
// of going over every byte of it twice (its URL normaliser and its
// attribute escaper: 60 ms a 100-photo report, on one core at the end of
// a batch).
func srcAttr(mediaType string, raw []byte) template.HTMLAttr {
	u := "data:" + mediaType + ";base64," + base64.StdEncoding.EncodeToString(raw)
	return template.HTMLAttr(`src="` + strings.ReplaceAll(u, "+", "&#43;") + `"`)
}

func styled(title, x, y string) *plot.Plot {
	p := plot.New()
	p.Title.Text = title
	p.X.Label.Text = x
	p.Y.Label.Text = y
	p.Title.TextStyle.Color = inkColor
	p.BackgroundColor = color.White
	return p
}

// edgeBoxedLine is a plotter.Line that gives the plot the glyph boxes of
// its outermost points alone. plotter.Line gives one box per point (half
// the line's width each way), and the plot reads them only to find the
// leftmost, rightmost, lowest and highest box inside the axes, to pad the
// drawing area by: the same boxes as every point's give the same padding
// and the same drawing (TestEdgeBoxedLineSameSVG), without a box for each
// of a profile's thousands of points (a quarter of the report's time in a
// 100-photo batch, and a third of what it allocated).
type edgeBoxedLine struct{ *plotter.Line }

// GlyphBoxes implements plot.GlyphBoxer.
func (l edgeBoxedLine) GlyphBoxes(p *plot.Plot) []plot.GlyphBox {
	r := 0.5 * l.LineStyle.Width
	rect := vg.Rectangle{Min: vg.Point{X: -r, Y: -r}, Max: vg.Point{X: r, Y: r}}
	// The extremes among the points the plot keeps (those inside the
	// axes' ranges, plot.(*Plot).GlyphBoxes): lowest and highest x, then y.
	ext := [4]int{-1, -1, -1, -1}
	var val [4]float64
	for i := range l.XYs.Len() {
		x, y := l.XY(i)
		nx, ny := p.X.Norm(x), p.Y.Norm(y)
		if nx < 0 || nx > 1 || ny < 0 || ny > 1 {
			continue
		}
		for k, v := range [4]float64{nx, -nx, ny, -ny} {
			if ext[k] < 0 || v < val[k] {
				ext[k], val[k] = i, v
			}
		}
	}
	var boxes []plot.GlyphBox
	for _, i := range ext {
		if i >= 0 {
			x, y := l.XY(i)
			boxes = append(boxes, plot.GlyphBox{X: p.X.Norm(x), Y: p.Y.Norm(y), Rectangle: rect})
		}
	}
	return boxes
}

// profileXY adapts a profile to plotter.XYer without copying.
type profileXY []float32

func (p profileXY) Len() int                    { return len(p) }
func (p profileXY) XY(i int) (float64, float64) { return float64(i), float64(p[i]) }

// profilePlot draws a photo's profile with each line labelled by its
// wavelength (or position when uncalibrated).
func profilePlot(r imageResult, prof []float32) (template.HTMLAttr, error) {
	p := styled(filepath.Base(r.File), "position along the band (px)", "intensity (linear)")
	l, err := plotter.NewLine(profileXY(prof))
	if err != nil {
		return "", err
	}
	l.Color = tealColor
	p.Add(edgeBoxedLine{l})
	var pts plotter.XYs
	var labels []string
	for _, ln := range r.Lines {
		i := int(math.Round(ln.PositionPX))
		if i < 0 || i >= len(prof) {
			continue
		}
		pts = append(pts, plotter.XY{X: ln.PositionPX, Y: float64(prof[i])})
		switch {
		case r.Calibration != nil && ln.ID != "":
			labels = append(labels, fmt.Sprintf("%.2f %s", ln.WavelengthNM, ln.ID))
		case r.Calibration != nil:
			labels = append(labels, fmt.Sprintf("%.2f", ln.WavelengthNM))
		default:
			labels = append(labels, fmt.Sprintf("%.1f px", ln.PositionPX))
		}
	}
	if len(pts) > 0 {
		s, err := plotter.NewScatter(pts)
		if err != nil {
			return "", err
		}
		s.GlyphStyle.Color = amberColor
		s.GlyphStyle.Shape = draw.TriangleGlyph{}
		p.Add(s)
		lb, err := plotter.NewLabels(plotter.XYLabels{XYs: pts, Labels: labels})
		if err != nil {
			return "", err
		}
		for i := range lb.TextStyle {
			lb.TextStyle[i].Color = inkColor
			lb.TextStyle[i].Rotation = math.Pi / 2
			lb.TextStyle[i].Font.Size = vg.Points(7)
		}
		lb.Offset = vg.Point{X: -3, Y: 4}
		p.Add(lb)
	}
	return pngData(p, 22*vg.Centimeter, 8*vg.Centimeter)
}

// residualPlot draws the calibration residuals per reference line.
func residualPlot(c *calibration) (template.HTMLAttr, error) {
	p := styled("calibration residuals ("+c.Dispersion.Model+")", "reference wavelength (nm, air)", "reference − fit (nm)")
	var pts plotter.XYs
	for _, r := range c.Dispersion.Residuals {
		if r.RefNM == 0 {
			continue // the zero order: no wavelength to plot it at
		}
		pts = append(pts, plotter.XY{X: r.RefNM, Y: r.ResidNM})
	}
	if len(pts) == 0 {
		return "", nil
	}
	s, err := plotter.NewScatter(pts)
	if err != nil {
		return "", err
	}
	s.GlyphStyle.Color = tealColor
	s.GlyphStyle.Radius = vg.Points(3)
	zero := plotter.NewFunction(func(float64) float64 { return 0 })
	zero.Color = mutedColor
	p.Add(zero, s)
	return pngData(p, 11*vg.Centimeter, 7*vg.Centimeter)
}

// rydbergPlot draws 1/λ_vac against 1/4 − 1/n² with the fitted line,
// and the residuals (which is where the uncertainty can be seen).
func rydbergPlot(r *calibrate.Rydberg) (template.HTMLAttr, error) {
	p := styled("residuals about the fit, ±1σ dashed", "1/4 − 1/n²", "1/λ − R(1/4 − 1/n²)  (1/m)")
	var xy plotter.XYs
	for i := range r.X {
		xy = append(xy, plotter.XY{X: r.X[i], Y: r.Residuals[i]})
	}
	type xyye struct {
		plotter.XYs
		plotter.YErrors
	}
	ye := make(plotter.YErrors, len(xy))
	for i := range ye {
		ye[i].Low, ye[i].High = r.YSigma[i], r.YSigma[i]
	}
	eb, err := plotter.NewYErrorBars(xyye{xy, ye})
	if err != nil {
		return "", err
	}
	eb.Color = tealColor
	s, err := plotter.NewScatter(xy)
	if err != nil {
		return "", err
	}
	s.GlyphStyle.Color = tealColor
	s.GlyphStyle.Radius = vg.Points(3)
	// The fit's own 1σ band: ±σ_R·x.
	up := plotter.NewFunction(func(x float64) float64 { return r.Sigma * x })
	dn := plotter.NewFunction(func(x float64) float64 { return -r.Sigma * x })
	up.Color, dn.Color = mutedColor, mutedColor
	up.Dashes = []vg.Length{vg.Points(3), vg.Points(3)}
	dn.Dashes = up.Dashes
	zero := plotter.NewFunction(func(float64) float64 { return 0 })
	zero.Color = inkColor
	p.Add(zero, up, dn, eb, s)
	p.X.Min, p.X.Max = 0.1, 0.25
	return pngData(p, 11*vg.Centimeter, 7*vg.Centimeter)
}

// balmerPlot draws 1/λ_vac against 1/4 − 1/n² with the fitted line
// through the origin and its 1σ band (too narrow to see at this scale:
// the residual plot beside it shows it).
func balmerPlot(r *calibrate.Rydberg) (template.HTMLAttr, error) {
	p := styled("1/λ against 1/4 − 1/n²", "1/4 − 1/n²", "1/λ (vacuum, 1/m)")
	var xy plotter.XYs
	for i := range r.X {
		xy = append(xy, plotter.XY{X: r.X[i], Y: r.Y[i]})
	}
	s, err := plotter.NewScatter(xy)
	if err != nil {
		return "", err
	}
	s.GlyphStyle.Color = tealColor
	s.GlyphStyle.Radius = vg.Points(3)
	fit := plotter.NewFunction(func(x float64) float64 { return r.R * x })
	fit.Color = inkColor
	up := plotter.NewFunction(func(x float64) float64 { return (r.R + r.Sigma) * x })
	dn := plotter.NewFunction(func(x float64) float64 { return (r.R - r.Sigma) * x })
	up.Color, dn.Color = mutedColor, mutedColor
	p.Add(up, dn, fit, s)
	p.X.Min, p.X.Max = 0, 0.25
	p.Y.Min = 0
	return pngData(p, 11*vg.Centimeter, 7*vg.Centimeter)
}

// summaryPlot draws R per bench with its error bar against CODATA R_H.
func summaryPlot(doc batchDoc) (template.HTMLAttr, error) {
	p := styled("R per bench; dashed: NIST-line value", "bench", "R − CODATA R_H (1/m)")
	var xy plotter.XYs
	var ye plotter.YErrors
	var names []string
	for _, b := range doc.Benches {
		if b.Rydberg == nil {
			continue
		}
		xy = append(xy, plotter.XY{X: float64(len(names)), Y: b.Rydberg.R - b.Rydberg.RH})
		ye = append(ye, struct{ Low, High float64 }{b.Rydberg.Sigma, b.Rydberg.Sigma})
		names = append(names, b.Name)
	}
	if len(xy) == 0 {
		return "", nil
	}
	type xyye struct {
		plotter.XYs
		plotter.YErrors
	}
	eb, err := plotter.NewYErrorBars(xyye{xy, ye})
	if err != nil {
		return "", err
	}
	eb.Color = tealColor
	s, _ := plotter.NewScatter(xy)
	s.GlyphStyle.Color = tealColor
	s.GlyphStyle.Radius = vg.Points(3)
	zero := plotter.NewFunction(func(float64) float64 { return 0 })
	zero.Color = amberColor
	p.Add(zero, eb, s)
	for _, b := range doc.Benches {
		if b.Rydberg != nil && b.Rydberg.RRef != 0 {
			off := b.Rydberg.RRef - b.Rydberg.RH
			ref := plotter.NewFunction(func(float64) float64 { return off })
			ref.Color = mutedColor
			ref.Dashes = []vg.Length{vg.Points(4), vg.Points(3)}
			p.Add(ref)
			break
		}
	}
	p.NominalX(names...)
	p.X.Min, p.X.Max = -0.5, float64(len(names))-0.5
	// Keep R_H (zero) in view.
	lo, hi := 0.0, 0.0
	for i := range xy {
		lo, hi = math.Min(lo, xy[i].Y-ye[i].Low), math.Max(hi, xy[i].Y+ye[i].High)
	}
	p.Y.Min, p.Y.Max = lo-0.05*(hi-lo), hi+0.05*(hi-lo)
	return pngData(p, 16*vg.Centimeter, 7*vg.Centimeter)
}

type reportPhoto struct {
	R       imageResult
	Band    template.HTMLAttr
	Profile template.HTMLAttr
}

type reportBench struct {
	B         benchResult
	Status    string
	Attention bool
	Residuals template.HTMLAttr
	Balmer    template.HTMLAttr
	Rydberg   template.HTMLAttr
	Photos    []reportPhoto
}

// reportData is what the report's templates read.
type reportData struct {
	Doc      batchDoc
	Benches  []reportBench // sorted by name
	Summary  template.HTMLAttr
	RH       float64
	Failures []failure
}

// reportWindow is about how many photos' plots are held at once while the
// report is written: the plots of a 1000-photo batch were 75 MB of text,
// and the process's peak rose from 171 to 452 MB when they were all made
// before the page was written.
const reportWindow = 48

// writeReport writes the HTML report of doc (band images read from out):
// the summary, then the benches a window of photos at a time, each window's
// plots rendered on every core, written and let go.
func writeReport(w io.Writer, out string, doc batchDoc) error {
	return writeReportWindowed(w, out, doc, reportWindow)
}

// writeReportWindowed is writeReport holding about window photos' plots
// at a time.
func writeReportWindowed(w io.Writer, out string, doc batchDoc, window int) error {
	data, err := reportHead(doc)
	if err != nil {
		return err
	}
	bw := bufio.NewWriterSize(w, 1<<16)
	if err := reportTmpl.ExecuteTemplate(bw, "head", data); err != nil {
		return err
	}
	for lo := 0; lo < len(data.Benches); {
		hi, n := lo, 0
		for hi < len(data.Benches) && (hi == lo || n+len(data.Benches[hi].Photos) <= window) {
			n += len(data.Benches[hi].Photos)
			hi++
		}
		if err := renderPlots(out, data.Benches[lo:hi]); err != nil {
			return err
		}
		for i := lo; i < hi; i++ {
			if err := reportTmpl.ExecuteTemplate(bw, "bench", data.Benches[i]); err != nil {
				return err
			}
			data.Benches[i] = reportBench{}
		}
		lo = hi
	}
	if err := reportTmpl.ExecuteTemplate(bw, "tail", data); err != nil {
		return err
	}
	return bw.Flush()
}

// reportHead is the report's data without the plots of the benches: the
// summary plot, and each bench's status.
func reportHead(doc batchDoc) (reportData, error) {
	data := reportData{Doc: doc, RH: calibrate.RHydrogen(), Failures: doc.Failures}
	var err error
	if data.Summary, err = summaryPlot(doc); err != nil {
		return reportData{}, err
	}
	for _, b := range doc.Benches {
		rb := reportBench{B: b, Status: "ok"}
		var why []string
		if b.Calibration == nil {
			why = append(why, "no calibration")
		}
		if len(b.Failures) > 0 {
			why = append(why, fmt.Sprintf("%d photo(s) failed", len(b.Failures)))
		}
		if b.Rydberg != nil && math.Abs(b.Rydberg.DevRefSigma) > 3 {
			why = append(why, fmt.Sprintf("R %.1fσ from the reference-line value", b.Rydberg.DevRefSigma))
		}
		if len(b.Warnings) > 0 {
			why = append(why, fmt.Sprintf("%d warning(s)", len(b.Warnings)))
		}
		if len(why) > 0 {
			rb.Status, rb.Attention = joinWords(why), true
		}
		for _, set := range [][]imageResult{b.CalPhotos, b.Photos} {
			for _, r := range set {
				rb.Photos = append(rb.Photos, reportPhoto{R: r})
			}
		}
		data.Benches = append(data.Benches, rb)
	}
	sort.SliceStable(data.Benches, func(i, j int) bool { return data.Benches[i].B.Name < data.Benches[j].B.Name })
	return data, nil
}

// renderPlots fills in the plots and band images of the benches (out
// holds the band images), on every core: the slow part of the report.
func renderPlots(out string, benches []reportBench) error {
	var g errgroup.Group
	g.SetLimit(runtime.GOMAXPROCS(0))
	for bi := range benches {
		rb := &benches[bi]
		b := rb.B
		g.Go(func() error {
			var err error
			if b.Calibration != nil {
				if rb.Residuals, err = residualPlot(b.Calibration); err != nil {
					return err
				}
			}
			if b.Rydberg != nil {
				if rb.Rydberg, err = rydbergPlot(b.Rydberg); err != nil {
					return err
				}
				if rb.Balmer, err = balmerPlot(b.Rydberg); err != nil {
					return err
				}
			}
			return nil
		})
		for pi := range rb.Photos {
			ph := &rb.Photos[pi]
			g.Go(func() error {
				if img, ok := b.Images[ph.R.File]; ok {
					if raw, err := os.ReadFile(filepath.Join(out, img)); err == nil {
						ph.Band = srcAttr("image/jpeg", raw)
					}
				}
				if prof, ok := b.Profiles[ph.R.File]; ok && len(prof) > 0 {
					u, err := profilePlot(ph.R, prof)
					if err != nil {
						return err
					}
					ph.Profile = u
				}
				return nil
			})
		}
	}
	return g.Wait()
}

func joinWords(s []string) string {
	out := ""
	for i, x := range s {
		if i > 0 {
			out += "; "
		}
		out += x
	}
	return out
}

// reportTmpl is the report page: "head" (the summary), "bench" (one
// bench's section) and "tail" (the vernier check, the safety notes), in
// the order the page has them; "report" is the whole page at once, as
// writeReport's parts together must give it (TestReportStreamedAsWhole).
var reportTmpl = template.Must(template.New("report").Funcs(template.FuncMap{
	"f0": func(v float64) string { return fmt.Sprintf("%.0f", v) },
	"f2": func(v float64) string { return fmt.Sprintf("%.2f", v) },
	"f3": func(v float64) string { return fmt.Sprintf("%.3f", v) },
	"f4": func(v float64) string { return fmt.Sprintf("%.4f", v) },
	"g":  func(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }, // exact: tests compare it with results.json
}).Parse(`{{template "head" .}}{{range .Benches}}{{template "bench" .}}{{end}}{{template "tail" .}}{{define "head"}}<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<title>lineshot report: {{.Doc.Root}}</title>
<style>
body{font-family:system-ui,-apple-system,"Segoe UI",sans-serif;color:#1f2933;margin:0;background:#f8fafc}
header{background:#1f2933;color:#f8fafc;padding:1.2rem 2rem}
header h1{margin:0;font-size:1.4rem;font-weight:600}
header p{margin:.3rem 0 0;color:#cbd5e1}
main{padding:1rem 2rem;max-width:1200px}
section{background:#fff;border:1px solid #e2e8f0;border-radius:6px;margin:1rem 0;padding:1rem 1.2rem}
h2{font-size:1.15rem;margin:.2rem 0 .8rem;color:#0f766e}
h3{font-size:1rem;margin:1rem 0 .4rem}
table{border-collapse:collapse;font-size:.9rem}
th,td{padding:.25rem .6rem;border-bottom:1px solid #e2e8f0;text-align:right}
th{color:#475569;font-weight:600}
td.l,th.l{text-align:left}
.attn{color:#b45309;font-weight:600}
.ok{color:#0f766e}
ul.warn li{color:#b45309}
img{max-width:100%;display:block;margin:.3rem 0}
.band{border:1px solid #e2e8f0;background:#000}
.grid{display:flex;flex-wrap:wrap;gap:1rem}
footer{font-size:.85rem;color:#475569;padding:1rem 2rem 2rem;max-width:1200px}
</style></head><body>
<header><h1>lineshot report</h1><p>input: {{.Doc.Root}} · {{len .Benches}} bench(es) · CODATA 2018 R<sub>H</sub> = {{f2 .RH}} m⁻¹</p></header>
<main>
<section id="summary"><h2>Summary</h2>
<table><tr><th class="l">bench</th><th>photos</th><th>calibration</th><th>R (m⁻¹)</th><th>± σ</th><th>R − R<sub>H</sub></th><th>vs NIST-line value</th><th class="l">status</th></tr>
{{range .Benches}}{{$b := .}}<tr><td class="l">{{.B.Name}}</td><td>{{len .B.CalPhotos}} + {{len .B.Photos}}</td>
<td>{{with .B.Calibration}}{{.Dispersion.Model}}, rms {{f4 .Dispersion.RMSNM}} nm{{else}}none{{end}}</td>
{{with .B.Rydberg}}<td class="r-value" data-bench="{{$b.B.Name}}" data-r="{{g .R}}" data-sigma="{{g .Sigma}}">{{f0 .R}}</td><td>{{f0 .Sigma}}</td><td>{{f4 .DevPercent}} %</td><td>{{f2 .DevRefSigma}}σ</td>{{else}}<td colspan="4">no Rydberg fit</td>{{end}}
<td class="l {{if .Attention}}attn{{else}}ok{{end}}">{{.Status}}</td></tr>
{{end}}</table>
{{if .Summary}}<img alt="R per bench against CODATA R_H" {{.Summary}}>{{end}}
{{if .Failures}}<h3>Photos that could not be measured</h3><ul class="warn">{{range .Failures}}<li>{{.File}}: {{.Reason}}</li>{{end}}</ul>{{end}}
</section>
{{end}}{{define "bench"}}<section class="bench" id="bench-{{.B.Name}}"><h2>{{.B.Name}}</h2>
{{if .B.Warnings}}<ul class="warn">{{range .B.Warnings}}<li>{{.}}</li>{{end}}</ul>{{end}}
{{with .B.Rydberg}}<p>R = <b>{{f0 .R}} ± {{f0 .Sigma}} m⁻¹</b> from {{len .LinesUsed}} Balmer lines, χ²/dof {{f2 .ChiSq}}/{{.DOF}};
{{f4 .DevPercent}} % ({{f2 .DevSigma}}σ) from R<sub>H</sub>; ground-state energy {{f4 .EnergyEV}} eV.</p>{{end}}
<div class="grid">{{if .Residuals}}<img alt="calibration residuals" {{.Residuals}}>{{end}}{{if .Balmer}}<img alt="Rydberg plot: 1/λ against 1/4 − 1/n² with the fit" {{.Balmer}}>{{end}}{{if .Rydberg}}<img alt="Rydberg fit residuals" {{.Rydberg}}>{{end}}</div>
{{range .Photos}}<h3>{{.R.File}} — {{if .R.Lamp}}{{.R.Lamp}}{{else}}lamp not recognised{{end}}</h3>
{{if .Band}}<img class="band" alt="straightened band with the measured lines marked" {{.Band}}>{{end}}
{{if .Profile}}<img alt="profile with lines labelled" {{.Profile}}>{{end}}
{{if .R.Warnings}}<ul class="warn">{{range .R.Warnings}}<li>{{.}}</li>{{end}}</ul>{{end}}
{{end}}</section>
{{end}}{{define "tail"}}
{{if .Doc.Vernier}}<section id="vernier"><h2>Vernier readings checked</h2>
<ul>{{range .Doc.VernierSummary}}<li>{{.}}</li>{{end}}</ul>
{{range .Doc.Vernier}}{{if .Error}}<h3>{{.Bench}} / {{.Name}}: not checked</h3>
<p class="attn">{{.Error}}</p>
{{else}}<h3>{{.Bench}} / {{.Name}}: d = {{f2 .DNM}} ± {{f2 .DSigma}} nm{{with .Rydberg}}, R = {{f0 .R}} ± {{f0 .Sigma}} m⁻¹{{end}}</h3>
<table><tr><th class="l">line</th><th>λ (nm)</th><th>±</th><th>reference</th><th>photo</th><th>z</th><th class="l">check</th></tr>
{{range .Lines}}<tr><td class="l">{{.Asked}}</td><td>{{f3 .NM}}</td><td>{{f3 .SigmaNM}}</td><td>{{f4 .RefNM}}</td><td>{{if .PhotoNM}}{{f3 .PhotoNM}}{{else}}–{{end}}</td><td>{{f2 .Z}}</td>
<td class="l{{if .Flag}} attn{{end}}">{{if .Flag}}{{.Flag.Explain}}{{else if .Calibration}}calibrates d{{else}}ok{{end}}</td></tr>{{end}}</table>
{{end}}{{end}}</section>{{end}}
</main>
<footer><p><b>Lamp safety.</b> Discharge lamps run from supplies of several kilovolts: switch off and unplug before touching a lamp or its holder. Tubes get hot enough to burn. Mercury lamps emit ultraviolet light: keep the shield in place and do not look into the lamp. A broken mercury lamp releases mercury: follow your institution's spill procedure. Follow your local lab safety rules; these notes do not replace them.</p>
<p>Made by lineshot. Wavelengths are air wavelengths unless marked vacuum; references: NIST ASD and Handbook; constants: CODATA 2018.</p></footer>
</body></html>
{{end}}`))
