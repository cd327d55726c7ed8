package imaging

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"gocv.io/x/gocv"

	"lineshot/imaging/synth"
)

// Camera raw files get a reason that says what to do, not a decoder's
// complaint, by name even though OpenCV would read a TIFF-shaped one's
// preview; a HEIF file (by name, or by content under a JPEG's name) that
// is a header and nothing more gets libheif's reason.
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
		{"IMG_0001.HEIC", heif, "a HEIF/HEIC file libheif cannot read"},
		{"IMG_0002.jpg", heif, "a HEIF/HEIC file libheif cannot read"},
		{"IMG_0003.avif", []byte("\x00\x00\x00\x1cftypavif\x00\x00\x00\x00"), "a HEIF/HEIC file libheif cannot read"},
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
	if Unreadable("a.jpg") != "" || Unreadable("a.JPEG") != "" || Unreadable("a.Heic") != "" || Unreadable("a.NEF") == "" {
		t.Error("Unreadable misjudges a name")
	}
}

// Floating-point, signed and 64-bit TIFFs (OpenCV reads the first two) are
// refused from their header, before OpenCV decodes them, with what to do:
// their values have no transfer curve lineshot knows. A frame of such
// pixels from elsewhere is refused too (newFrame).
func TestWideSampleTIFFRefused(t *testing.T) {
	for _, typ := range []gocv.MatType{gocv.MatTypeCV32FC3, gocv.MatTypeCV64FC1, gocv.MatTypeCV16SC3} {
		p := filepath.Join(t.TempDir(), "odd.tiff")
		m := gocv.NewMatWithSize(300, 400, typ)
		ok := gocv.IMWrite(p, m)
		m.Close()
		if !ok {
			t.Logf("%v: this OpenCV writes no such TIFF", typ)
			continue
		}
		_, err := Extract(p, Options{})
		if err == nil || !strings.Contains(err.Error(), "a TIFF of floating-point") || !strings.HasPrefix(err.Error(), p+": ") {
			t.Errorf("%v: %v", typ, err)
		}
	}
	m := gocv.NewMatWithSize(300, 400, gocv.MatTypeCV32FC3)
	defer m.Close()
	if _, err := newFrame(m); err == nil || !strings.Contains(err.Error(), "8 or 16 bits a channel") {
		t.Errorf("a float frame: %v", err)
	}
}
