// A JPEG decoder that hands over a frame's rows a stripe at a time
// (jpegrows.c).
#include <stddef.h>
#ifdef __cplusplus
extern "C" {
#endif

struct lineshot_jpeg;

// Opens the JPEG at path and reads its header. On failure it returns NULL
// with the reason in msg. *rows_ok says whether the photo decodes here as
// imread would (YCbCr or grey, 8 bits, upright); when not, the caller
// closes the decoder and uses imread.
// The rows come at eighths/8 of the full size (8: full size; 1, 2 or 4:
// libjpeg's DCT scaling), each side rounded up; w and h stay the full size.
// With sequential_only, a progressive JPEG (every scan read and held
// before the first row) is not taken either.
struct lineshot_jpeg *lineshot_jpeg_open(const char *path, int eighths, int sequential_only, int *w, int *h, int *rows_ok, char *msg, size_t msglen);

// Decodes the next n rows (fewer at the end of the frame) into dst, B, G, R
// a pixel, rows stride bytes apart; returns the rows decoded, or -1 with
// the reason in msg.
int lineshot_jpeg_rows(struct lineshot_jpeg *j, unsigned char *dst, size_t stride, int n, char *msg, size_t msglen);

// Passes over the next n rows without making their pixels (libjpeg still
// reads their data); returns the rows passed, or -1 with the reason in msg.
int lineshot_jpeg_skip(struct lineshot_jpeg *j, int n, char *msg, size_t msglen);

// Returns how many warnings libjpeg gave so far that mean damaged pixels
// (corrupt data it decoded past), with the first in msg.
long lineshot_jpeg_warnings(struct lineshot_jpeg *j, char *msg, size_t msglen);

void lineshot_jpeg_close(struct lineshot_jpeg *j);

#ifdef __cplusplus
}
#endif
