package imaging

import (
	"bytes"
	"path/filepath"
	"strings"
)

// The kinds of photo lineshot does not read, each with what to do instead.
const (
	wideSampleReason = "which lineshot does not read: save the photo with 8 or 16 bits a channel (unsigned integers)"
	rawReason        = "a camera's raw file, which lineshot does not read: measure the JPEG the camera saves beside it, or convert it to a 16-bit TIFF or PNG"
)

// HEIFExts are the file endings of HEIF photos (HEIC, an iPhone's
// default, and AVIF), read through libheif (heif.go).
var HEIFExts = []string{".heic", ".heif", ".hif", ".avif"}

// rawExts are the file endings of cameras' raw files (the common makers'
// and DNG). A raw file is refused by its name alone: many are TIFF inside,
// and OpenCV would read their small preview image.
var rawExts = []string{".dng", ".cr2", ".cr3", ".nef", ".nrw", ".arw", ".orf", ".rw2", ".raf", ".pef", ".srw", ".rwl", ".3fr", ".iiq"}

// Unreadable says why a photo of this name is one lineshot does not read
// (a camera's raw file), and what to do instead; "" for any other name. The batch reports such files instead of passing them over.
func Unreadable(path string) string {
	ext := strings.ToLower(filepath.Ext(path))
	for _, e := range rawExts {
		if ext == e {
			return rawReason
		}
	}
	return ""
}

// isHEIF reports whether head, a file's first bytes, begins an ISO base
// media file of a HEIF brand (an 'ftyp' box naming one of the brands of
// ISO/IEC 23008-12 or of AVIF; the list is from memory): a HEIC photo
// whatever its name.
func isHEIF(head []byte) bool {
	if len(head) < 12 || !bytes.Equal(head[4:8], []byte("ftyp")) {
		return false
	}
	switch string(head[8:12]) {
	case "heic", "heix", "hevc", "hevx", "heim", "heis", "mif1", "msf1", "avif", "avis":
		return true
	}
	return false
}
