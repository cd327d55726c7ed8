package imaging

import (
	"fmt"
	"os"
	"path/filepath"
	"runtime"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"gocv.io/x/gocv"

	"lineshot/imaging/synth"
)

// benchPhoto renders (once per machine, into the temp folder) a JPEG of the
// mercury lamp at the given size, quality 90.
func benchPhoto(b *testing.B, w, h int) string {
	p := filepath.Join(os.TempDir(), fmt.Sprintf("lineshot-bench-%dx%d.jpg", w, h))
	if _, err := os.Stat(p); err == nil {
		return p
	}
	b.StopTimer()
	defer b.StartTimer()
	src, _ := writeJPEG(b, synth.Params{Width: w, Height: h, TiltDeg: 3, Seed: 5, Emissions: mercury}, 90)
	raw, err := os.ReadFile(src)
	if err != nil {
		b.Fatal(err)
	}
	if err := os.WriteFile(p, raw, 0o644); err != nil {
		b.Fatal(err)
	}
	return p
}

var benchSizes = []struct {
	name string
	w, h int
}{{"phone12MP", 4032, 3024}, {"webcam1080p", 1920, 1080}}

// BenchmarkDecode is the floor: the decode alone, as Extract decodes (the
// row decoder for these JPEGs); and OpenCV's imread of the same photo,
// which decoded every photo before the row decoder.
func BenchmarkDecode(b *testing.B) {
	for _, s := range benchSizes {
		b.Run(s.name, func(b *testing.B) {
			p := benchPhoto(b, s.w, s.h)
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				if _, _, err := Decode(p); err != nil {
					b.Fatal(err)
				}
			}
		})
		b.Run(s.name+"/imread", func(b *testing.B) {
			p := benchPhoto(b, s.w, s.h)
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				m := imread(p)
				if m.Empty() {
					b.Fatal("imread failed")
				}
				m.Close()
			}
		})
	}
}

// BenchmarkExtract is decode + locate + straighten + profile, with the
// stages reported as metrics (ms).
func BenchmarkExtract(b *testing.B) {
	for _, s := range benchSizes {
		b.Run(s.name, func(b *testing.B) {
			p := benchPhoto(b, s.w, s.h)
			b.ResetTimer()
			var t Timing
			for i := 0; i < b.N; i++ {
				st, err := Extract(p, Options{})
				if err != nil {
					b.Fatal(err)
				}
				t.Decode += st.Timing.Decode
				t.Locate += st.Timing.Locate
				t.Straighten += st.Timing.Straighten
			}
			n := float64(b.N) * 1e6
			b.ReportMetric(float64(t.Decode)/n, "decode-ms")
			b.ReportMetric(float64(t.Locate)/n, "locate-ms")
			b.ReportMetric(float64(t.Straighten)/n, "straighten-ms")
		})
	}
}

// BenchmarkReduceBesideDecode is what reducing the frame for the band
// search costs after the decode: the decode alone, the decode with the
// reduction beside it (two goroutines), between its stripes (one) and
// after it (what one worker does), interleaved in each iteration so that a noisy machine's
// stretches weigh on all alike; reported as the fastest of each (ms).
func BenchmarkReduceBesideDecode(b *testing.B) {
	p := benchPhoto(b, 4032, 3024)
	best := map[string]time.Duration{}
	keep := func(name string, d time.Duration) {
		if old, ok := best[name]; !ok || d < old {
			best[name] = d
		}
	}
	for b.Loop() {
		t0 := time.Now()
		m, _ := decodeFrame(p, "jpeg")
		keep("decode-ms", time.Since(t0))
		m.Close()
		t0 = time.Now()
		m, small, _, _, err := decodeAndReduce(p, "jpeg", 2, nil)
		keep("beside-ms", time.Since(t0))
		if err != nil || small == nil {
			b.Fatal("no reduction beside the decode", err)
		}
		small.Close()
		m.Close()
		// Between the stripes, on the decoding core (a stripe just
		// decoded is still in the cache): what decodeAndReduce did with
		// one worker until this showed it saved nothing.
		t0 = time.Now()
		m, ok, err := decodeRows(p, func(m gocv.Mat) (func(y0, y1 int), func()) {
			k, sw, sh := searchReduction(m.Cols(), m.Rows())
			out := gocv.NewMatWithSize(sh, sw, m.Type())
			return func(y0, y1 int) { reduceStripe(m, out, k, y0, y1) }, func() { out.Close() }
		}, nil)
		keep("between-ms", time.Since(t0))
		if err != nil || !ok {
			b.Fatal("the row decoder did not take the photo", err)
		}
		m.Close()
		t0 = time.Now()
		m, _ = decodeFrame(p, "jpeg")
		k, sw, sh := searchReduction(m.Cols(), m.Rows())
		s, _ := reduceArea(m, k, sw, sh)
		keep("after-ms", time.Since(t0))
		s.Close()
		m.Close()
	}
	for name, d := range best {
		b.ReportMetric(float64(d.Microseconds())/1000, name)
	}
}

// BenchmarkTwoGoroutines is the machine's own scaling, against which the
// batch's two-worker figure can be read: the same work on one goroutine
// and on two (each doing half), for plain arithmetic, streaming through
// 6 MB buffers (a 1080p frame's size), libjpeg's decode of the 1080p photo
// and its whole band extraction with one worker (as each photo of a
// two-worker batch gets, with the batch's spare P). Reported as the time
// on one goroutine over the time on two, fastest of each, interleaved.
func BenchmarkTwoGoroutines(b *testing.B) {
	p := benchPhoto(b, 1920, 1080)
	var sink atomic.Uint64
	bufs := make(chan [2][]byte, 2)
	for range 2 {
		bufs <- [2][]byte{make([]byte, 6<<20), make([]byte, 6<<20)}
	}
	work := []struct {
		name string
		n    int
		fn   func()
	}{
		{"arithmetic", 24, func() {
			s := uint64(0)
			for i := uint64(0); i < 3_000_000; i++ {
				s += i * i >> 3
			}
			sink.Add(s)
		}},
		{"memory", 24, func() {
			// Each goroutine its own buffers, made before the timing.
			buf := <-bufs
			defer func() { bufs <- buf }()
			for r := 0; r < 10; r++ {
				copy(buf[1], buf[0])
				buf[0][r] = buf[1][len(buf[1])-1-r]
			}
			sink.Add(uint64(buf[0][0]))
		}},
		{"decode", 40, func() {
			if _, _, err := Decode(p); err != nil {
				b.Fatal(err)
			}
		}},
		{"extract", 40, func() {
			if _, err := Extract(p, Options{Workers: 1}); err != nil {
				b.Fatal(err)
			}
		}},
	}
	SetOpenCVThreads(1)
	defer SetOpenCVThreads(0)
	procs := runtime.GOMAXPROCS(0)
	defer runtime.GOMAXPROCS(procs)
	run := func(g, n int, fn func()) time.Duration {
		t0 := time.Now()
		var wg sync.WaitGroup
		for range g {
			wg.Go(func() {
				for range n / g {
					fn()
				}
			})
		}
		wg.Wait()
		return time.Since(t0)
	}
	one, two := make([]time.Duration, len(work)), make([]time.Duration, len(work))
	for b.Loop() {
		for i, w := range work {
			runtime.GOMAXPROCS(procs)
			d1 := run(1, w.n, w.fn)
			runtime.GOMAXPROCS(procs + 1) // the batch's spare P (spareProc)
			d2 := run(2, w.n, w.fn)
			if one[i] == 0 || d1 < one[i] {
				one[i] = d1
			}
			if two[i] == 0 || d2 < two[i] {
				two[i] = d2
			}
		}
	}
	for i, w := range work {
		b.ReportMetric(float64(one[i])/float64(two[i]), w.name+"-1/2")
	}
}
