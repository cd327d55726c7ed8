package imaging

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"gocv.io/x/gocv"

	"lineshot/imaging/synth"
)

// HEIC photos (by name, or by content under a JPEG's name) and camera raw
// files get a reason that says what to do, not a decoder's complaint; a
// raw file is refused by name even though OpenCV would read a TIFF-shaped
// one's preview.
func TestUnreadablePhotos(t *testing.T) {
	dir := t.TempDir()
	heif := []byte("\x00\x00\x00\x18ftypheic\x00\x00\x00\x00mif1heic\x00\x00\x00\x00")
	good, _ := writeJPEG(t, synth.Params{Width: 640, Height: 360, LinesPerMM: 600, Seed: 3, Emissions: mercury}, 90)
	jpeg, err := os.ReadFile(good)
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name string
		data []byte
		want string
	}{
		{"IMG_0001.HEIC", heif, "HEIF/HEIC photo"},
		{"IMG_0002.jpg", heif, "HEIF/HEIC photo"},
		{"IMG_0003.avif", []byte("\x00\x00\x00\x1cftypavif\x00\x00\x00\x00"), "HEIF/HEIC photo"},
		{"IMG_0004.CR2", jpeg, "camera's raw file"}, // by name, whatever is inside
		{"IMG_0005.dng", []byte("II*\x00\x08\x00\x00\x00"), "camera's raw file"},
	} {
		p := filepath.Join(dir, c.name)
		if err := os.WriteFile(p, c.data, 0o644); err != nil {
			t.Fatal(err)
		}
		_, err := Extract(p, Options{})
		if err == nil || !strings.Contains(err.Error(), c.want) || !strings.HasPrefix(err.Error(), p+": ") {
			t.Errorf("%s: %v", c.name, err)
		}
	}
	// A video's container (the same box structure, another brand) is not
	// taken for a HEIF photo.
	if isHEIF([]byte("\x00\x00\x00\x18ftypisom\x00\x00\x02\x00")) || isHEIF([]byte("\x00\x00\x00\x14ftypqt  ")) {
		t.Error("an MP4 or QuickTime header taken for HEIF")
	}
	if Unreadable("a.jpg") != "" || Unreadable("a.JPEG") != "" || Unreadable("a.Heic") == "" || Unreadable("a.NEF") == "" {
		t.Error("Unreadable misjudges a name")
	}
}

// A floating-point TIFF, which OpenCV reads, is refused with what to do:
// its values have no transfer curve lineshot knows.
func TestFloatTIFFRefused(t *testing.T) {
	p := filepath.Join(t.TempDir(), "float.tiff")
	m := gocv.NewMatWithSize(300, 400, gocv.MatTypeCV32FC3)
	defer m.Close()
	m.SetTo(gocv.NewScalar(0.5, 0.2, 0.1, 0))
	if !gocv.IMWrite(p, m) {
		t.Skip("this OpenCV writes no floating-point TIFF")
	}
	_, err := Extract(p, Options{})
	if err == nil || !strings.Contains(err.Error(), "8 or 16 bits a channel") || !strings.HasPrefix(err.Error(), p+": ") {
		t.Errorf("float TIFF: %v", err)
	}
}
