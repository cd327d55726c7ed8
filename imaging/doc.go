// Package imaging turns a photograph of a spectrum into 1-D intensity
// profiles along the dispersion, keeping the geometry that maps every
// profile position back to the original image.
//
// It is the only package that uses OpenCV (gocv): OpenCV decodes the file
// (applying its EXIF orientation), reduces it for the band search and
// straightens the band with an affine warp. The band search itself is plain
// Go on float32 slices: the sRGB transfer curve is undone with a lookup
// table, the dispersion direction starts as the principal axis of the
// bright pixels, the band's centre and height come from the half-maximum
// edges of its cross-profile, and after each straightening the centre line
// measured across the strongest lines corrects direction and offset until
// the band lies flat. Only the band region is linearised and warped, so a 12 MP
// frame costs little more than its decoding.
//
// No gocv.Mat leaves the package; every Mat made here is closed here.
package imaging
