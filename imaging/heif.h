#ifndef LINESHOT_HEIF_H
#define LINESHOT_HEIF_H

#include <stddef.h>
#include <stdint.h>

// Each returns 0 on success, or -1 with a message in err (errlen bytes).
int lineshot_heif_size(const char *path, int *w, int *h, int *depth, char *err, int errlen);
int lineshot_heif_decode(const char *path, void *mat, long long maxpx, char *err, int errlen);
int lineshot_heif_encode(const void *rgb, int w, int h, int bits, int quality, int orientation, const char *path, char *err, int errlen);

#endif
