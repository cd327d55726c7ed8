package main

import (
	"bytes"
	"encoding/binary"
	"hash/crc32"
	"image"
	"image/color"
	"image/jpeg"
	"image/png"
	"math/rand/v2"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"syscall"
	"testing"
)

// hostileFiles writes the files a phone, a shared drive and a student
// produce besides good photos, and returns name → the word its one-line
// reason must contain.
func hostileFiles(t *testing.T, dir string) map[string]string {
	t.Helper()
	w := func(name string, b []byte) {
		if err := os.WriteFile(filepath.Join(dir, name), b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	enc := func(img image.Image, kind string) []byte {
		var buf bytes.Buffer
		if kind == "png" {
			png.Encode(&buf, img)
		} else {
			jpeg.Encode(&buf, img, &jpeg.Options{Quality: 90})
		}
		return buf.Bytes()
	}
	good, _ := setups[1].render(t, t.TempDir(), "mercury", 71)
	goodBytes, _ := os.ReadFile(good)
	w("zero-bytes.jpg", nil)
	w("truncated.jpg", goodBytes[:len(goodBytes)/3])
	pngGood := enc(image.NewRGBA(image.Rect(0, 0, 64, 64)), "png")
	w("truncated.png", pngGood[:len(pngGood)/2])
	rnd := make([]byte, 5000)
	r := rand.New(rand.NewPCG(1, 2))
	for i := range rnd {
		rnd[i] = byte(r.UintN(256))
	}
	w("random.jpg", rnd)
	w("bomb.png", pngBomb(t, 100000, 100000))
	w("one-pixel.png", enc(image.NewRGBA(image.Rect(0, 0, 1, 1)), "png"))
	w("sliver.png", enc(image.NewGray(image.Rect(0, 0, 5, 50000)), "png"))
	black := image.NewRGBA(image.Rect(0, 0, 640, 480))
	for i := 3; i < len(black.Pix); i += 4 {
		black.Pix[i] = 255
	}
	w("all-black.jpg", enc(black, "jpeg"))
	white := image.NewRGBA(image.Rect(0, 0, 640, 480))
	for i := range white.Pix {
		white.Pix[i] = 255
	}
	w("all-white.png", enc(white, "png"))
	noise := image.NewGray(image.Rect(0, 0, 640, 480))
	for i := range noise.Pix {
		noise.Pix[i] = uint8(40 + r.IntN(8))
	}
	w("no-spectrum.png", enc(noise, "png"))
	// HEIC: cut short, and one whose image header (its 'ispe' box)
	// declares 20000x20000 pixels. (Named unlike the JPEGs and PNGs here:
	// a HEIC beside a photo of the same name is passed over as its twin.)
	heic, _ := simulate(t, t.TempDir(), "h.heic", "--lamp", "hydrogen", "--size", "640x360", "--quality", "40")
	heicBytes, _ := os.ReadFile(heic)
	w("cut-short.heic", heicBytes[:len(heicBytes)/2])
	bomb := append([]byte(nil), heicBytes...)
	if at := bytes.Index(bomb, []byte("ispe")); at < 0 {
		t.Fatal("no ispe box in the simulated HEIC")
	} else {
		binary.BigEndian.PutUint32(bomb[at+8:], 20000) // after the version and flags
		binary.BigEndian.PutUint32(bomb[at+12:], 20000)
	}
	w("huge.heic", bomb)
	w("name-\xff\xfe.jpg", rnd[:100])
	w("new\nline.jpg", rnd[:200]) // its reason must stay one line
	os.Mkdir(filepath.Join(dir, "folder.jpg"), 0o755)
	if err := syscall.Mkfifo(filepath.Join(dir, "pipe.jpg"), 0o644); err != nil {
		t.Fatal(err)
	}
	return map[string]string{
		"pipe.jpg":       "not a regular file",
		"zero-bytes.jpg": "empty file", "truncated.jpg": "", "truncated.png": "", "random.jpg": "not an image",
		"bomb.png": "exceeds the limit", "one-pixel.png": "", "sliver.png": "", "all-black.jpg": "no spectrum band",
		"all-white.png": "", "no-spectrum.png": "no spectrum band", `name-\xff\xfe.jpg`: "not an image",
		`new\nline.jpg`:  "not an image",
		"cut-short.heic": "HEIF", "huge.heic": "exceeds the limit",
	}
}

// pngBomb is a PNG whose header declares w×h pixels (and holds almost no
// data): a decompression bomb by its header.
func pngBomb(t *testing.T, w, h uint32) []byte {
	var buf bytes.Buffer
	png.Encode(&buf, image.NewGray(image.Rect(0, 0, 1, 1)))
	b := buf.Bytes()
	// IHDR data starts at byte 16: width, height; its CRC follows the 13 data bytes.
	binary.BigEndian.PutUint32(b[16:], w)
	binary.BigEndian.PutUint32(b[20:], h)
	binary.BigEndian.PutUint32(b[29:], crc32.ChecksumIEEE(b[12:29]))
	return b
}

// A batch over good photos mixed with hostile files never aborts, gives
// each bad file one line with its reason, and measures every good photo
// exactly as when it is alone.
func TestBatchSurvivesHostileFiles(t *testing.T) {
	root := filepath.Join(t.TempDir(), "drive")
	bench := filepath.Join(root, "bench-x")
	os.MkdirAll(bench, 0o755)
	hg, _ := setups[1].render(t, t.TempDir(), "mercury", 72)
	h, _ := setups[1].render(t, t.TempDir(), "hydrogen", 73)
	os.Rename(hg, filepath.Join(bench, "good-hg.jpg"))
	os.Rename(h, filepath.Join(bench, "good-h.jpg"))
	bad := hostileFiles(t, bench)

	alone := filepath.Join(t.TempDir(), "alone")
	aloneRoot := filepath.Join(t.TempDir(), "clean", "bench-x")
	os.MkdirAll(aloneRoot, 0o755)
	for _, n := range []string{"good-hg.jpg", "good-h.jpg"} {
		b, _ := os.ReadFile(filepath.Join(bench, n))
		os.WriteFile(filepath.Join(aloneRoot, n), b, 0o644)
	}
	if _, stderr, code := runCLI(t, "batch", "--quiet", "--out", alone, filepath.Dir(aloneRoot)); code != 0 {
		t.Fatalf("clean batch: exit %d: %s", code, stderr)
	}

	out := filepath.Join(t.TempDir(), "out")
	_, stderr, code := runCLI(t, "batch", "-j", "2", "--quiet", "--out", out, root)
	if code != exitFailed {
		t.Errorf("exit %d, want %d", code, exitFailed)
	}
	if strings.Contains(stderr, "panic") || strings.Contains(stderr, "goroutine") {
		t.Fatalf("crash output:\n%s", stderr)
	}
	lines := strings.Split(strings.TrimSpace(stderr), "\n")
	for name, reason := range bad {
		n := 0
		for _, l := range lines {
			if strings.Contains(l, name) || strings.Contains(l, strings.Trim(displayName(filepath.Join(bench, name)), `"`)) {
				n++
				if reason != "" && !strings.Contains(l, reason) {
					t.Errorf("%s: %q lacks %q", name, l, reason)
				}
			}
		}
		if n != 1 {
			t.Errorf("%s: %d lines on stderr, want 1\n%s", name, n, stderr)
		}
	}
	got, want := readBatch(t, out), readBatch(t, alone)
	if len(got.Benches) != 1 || len(want.Benches) != 1 {
		t.Fatalf("%d and %d benches", len(got.Benches), len(want.Benches))
	}
	g, a := got.Benches[0], want.Benches[0]
	if g.Rydberg == nil || a.Rydberg == nil || g.Rydberg.R != a.Rydberg.R || g.Rydberg.Sigma != a.Rydberg.Sigma {
		t.Errorf("R with hostile neighbours %+v, alone %+v", g.Rydberg, a.Rydberg)
	}
	for i := range a.Photos {
		if !reflect.DeepEqual(g.Photos[i].Lines, a.Photos[i].Lines) {
			t.Errorf("%s measured differently beside hostile files", a.Photos[i].File)
		}
	}
}

// Formats a camera or a converter may produce: grayscale, palette and
// 16-bit PNG. Each is measured; the lines land where they do in the
// 8-bit colour original within 0.1 px.
func TestMeasureOtherFormats(t *testing.T) {
	dir := t.TempDir()
	src, _ := setups[1].render(t, dir, "mercury", 74)
	f, _ := os.Open(src)
	img, err := jpeg.Decode(f)
	f.Close()
	if err != nil {
		t.Fatal(err)
	}
	b := img.Bounds()
	gray := image.NewGray(b)
	pal := image.NewPaletted(b, grayPalette())
	deep := image.NewRGBA64(b)
	for y := b.Min.Y; y < b.Max.Y; y++ {
		for x := b.Min.X; x < b.Max.X; x++ {
			c := img.At(x, y)
			gray.Set(x, y, c)
			pal.Set(x, y, c)
			r, g, bb, _ := c.RGBA()
			deep.SetRGBA64(x, y, color.RGBA64{uint16(r), uint16(g), uint16(bb), 0xffff})
		}
	}
	ref := measureOne(src, nil, defaultCfg)
	if ref.Error != "" {
		t.Fatal(ref.Error)
	}
	for name, im := range map[string]image.Image{"gray.png": gray, "palette.png": pal, "deep16.png": deep} {
		p := filepath.Join(dir, name)
		fh, _ := os.Create(p)
		png.Encode(fh, im)
		fh.Close()
		r := measureOne(p, nil, defaultCfg)
		if r.Error != "" || r.Lamp != "mercury" {
			t.Errorf("%s: lamp %q, error %q", name, r.Lamp, r.Error)
			continue
		}
		for _, l := range ref.Lines {
			if l.SNR < 20 {
				continue
			}
			best := 1e9
			for _, m := range r.Lines {
				if d := m.PositionPX - l.PositionPX; d*d < best*best {
					best = d
				}
			}
			if best > 0.1 || best < -0.1 {
				t.Errorf("%s: line at %.2f moved by %.3f px", name, l.PositionPX, best)
			}
		}
	}
}

func grayPalette() color.Palette {
	p := make(color.Palette, 256)
	for i := range p {
		p[i] = color.Gray{uint8(i)}
	}
	return p
}
