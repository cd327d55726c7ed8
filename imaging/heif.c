// HEIF/HEIC (and AVIF) photos through libheif: the primary image, turned as
// the file says (libheif applies its rotation and mirroring), as 8-bit BGR,
// or 16-bit BGR when the image has more than 8 bits a channel.

#include <string.h>
#include <stdio.h>
#include <libheif/heif.h>
#include "heif.h"
#include "threads.h" // the Mat calls (threads.cpp: OpenCV is C++)

static int fail(char *err, int errlen, const char *what, struct heif_error e) {
    snprintf(err, errlen, "%s: %s", what, e.message ? e.message : "unknown error");
    return -1;
}

// open_primary reads path and returns its primary image's handle.
static int open_primary(const char *path, struct heif_context **ctx, struct heif_image_handle **h, char *err, int errlen) {
    *ctx = heif_context_alloc();
    if (*ctx == NULL) {
        snprintf(err, errlen, "out of memory");
        return -1;
    }
    // (An error's message belongs to the context: written out before the
    // context is freed.)
    struct heif_error e = heif_context_read_from_file(*ctx, path, NULL);
    if (e.code != heif_error_Ok) {
        fail(err, errlen, "cannot read the HEIF file", e);
        heif_context_free(*ctx);
        return -1;
    }
    e = heif_context_get_primary_image_handle(*ctx, h);
    if (e.code != heif_error_Ok) {
        fail(err, errlen, "no primary image", e);
        heif_context_free(*ctx);
        return -1;
    }
    return 0;
}

int lineshot_heif_size(const char *path, int *w, int *h, int *depth, char *err, int errlen) {
    struct heif_context *ctx;
    struct heif_image_handle *hd;
    if (open_primary(path, &ctx, &hd, err, errlen) != 0) {
        return -1;
    }
    *w = heif_image_handle_get_width(hd);
    *h = heif_image_handle_get_height(hd);
    *depth = heif_image_handle_get_luma_bits_per_pixel(hd);
    heif_image_handle_release(hd);
    heif_context_free(ctx);
    return 0;
}

int lineshot_heif_decode(const char *path, void *mat, long long maxpx, char *err, int errlen) {
    struct heif_context *ctx;
    struct heif_image_handle *hd;
    if (open_primary(path, &ctx, &hd, err, errlen) != 0) {
        return -1;
    }
    int rc = -1;
    struct heif_image *img = NULL;
    int w = heif_image_handle_get_width(hd), h = heif_image_handle_get_height(hd);
    int bits = heif_image_handle_get_luma_bits_per_pixel(hd);
    if (w <= 0 || h <= 0 || (long long)w * h > maxpx) {
        snprintf(err, errlen, "%dx%d pixels exceeds the limit of %lld megapixels", w, h, maxpx / 1000000);
        goto out;
    }
    int deep = bits > 8;
    struct heif_error e = heif_decode_image(hd, &img, heif_colorspace_RGB,
                                            deep ? heif_chroma_interleaved_RRGGBB_LE : heif_chroma_interleaved_RGB, NULL);
    if (e.code != heif_error_Ok) {
        fail(err, errlen, "cannot decode the HEIF image", e);
        goto out;
    }
    int iw = heif_image_get_width(img, heif_channel_interleaved), ih = heif_image_get_height(img, heif_channel_interleaved);
    int stride = 0;
    const uint8_t *src = heif_image_get_plane_readonly(img, heif_channel_interleaved, &stride);
    if (src == NULL || iw <= 0 || ih <= 0 || (long long)iw * ih > maxpx) {
        snprintf(err, errlen, "the decoded image has no usable pixels");
        goto out;
    }
    // CV_8UC3 = 16, CV_16UC3 = 18.
    if (lineshot_mat_create(mat, ih, iw, deep ? 18 : 16, 1) != 0) {
        snprintf(err, errlen, "cannot allocate %dx%d pixels", iw, ih);
        goto out;
    }
    size_t step = 0;
    uint8_t *dst = lineshot_mat_data(mat, &step);
    if (!deep) {
        for (int y = 0; y < ih; y++) {
            const uint8_t *s = src + (size_t)y * stride;
            uint8_t *d = dst + (size_t)y * step;
            for (int x = 0; x < iw; x++) {
                d[3 * x] = s[3 * x + 2];
                d[3 * x + 1] = s[3 * x + 1];
                d[3 * x + 2] = s[3 * x];
            }
        }
    } else {
        // bits significant bits a sample, little-endian, scaled to 16 by
        // repeating the top bits below them (full scale stays full scale).
        int b = heif_image_get_bits_per_pixel_range(img, heif_channel_interleaved);
        if (b <= 8 || b > 16) {
            b = bits;
        }
        for (int y = 0; y < ih; y++) {
            const uint8_t *s = src + (size_t)y * stride;
            uint16_t *d = (uint16_t *)(dst + (size_t)y * step);
            for (int x = 0; x < iw; x++) {
                for (int c = 0; c < 3; c++) {
                    const uint8_t *p = s + 6 * x + 2 * (2 - c);
                    uint32_t v = (uint32_t)p[0] | ((uint32_t)p[1] << 8);
                    v &= (1u << b) - 1;
                    d[3 * x + c] = (uint16_t)((v << (16 - b)) | (v >> (2 * b - 16)));
                }
            }
        }
    }
    rc = 0;
out:
    if (img != NULL) {
        heif_image_release(img);
    }
    heif_image_handle_release(hd);
    heif_context_free(ctx);
    return rc;
}

// rgb is w×h RGB pixels: bytes when bits is 8, else 16-bit words holding
// bits (10 or 12) significant bits. orientation is the EXIF-style value
// (1-8) written as the container's rotation and mirroring: how a viewer
// turns the stored pixels.
int lineshot_heif_encode(const void *rgb, int w, int h, int bits, int quality, int orientation, const char *path, char *err, int errlen) {
    struct heif_context *ctx = heif_context_alloc();
    struct heif_encoder *enc = NULL;
    struct heif_image *img = NULL;
    struct heif_encoding_options *opts = heif_encoding_options_alloc();
    int rc = -1;
    if (opts != NULL && orientation >= 1 && orientation <= 8) {
        opts->image_orientation = (enum heif_orientation)orientation;
    }
    struct heif_error e = heif_context_get_encoder_for_format(ctx, heif_compression_HEVC, &enc);
    if (e.code != heif_error_Ok) {
        fail(err, errlen, "no HEVC encoder", e);
        goto out;
    }
    heif_encoder_set_lossy_quality(enc, quality);
    int deep = bits > 8;
    e = heif_image_create(w, h, heif_colorspace_RGB, deep ? heif_chroma_interleaved_RRGGBB_LE : heif_chroma_interleaved_RGB, &img);
    if (e.code != heif_error_Ok) {
        fail(err, errlen, "cannot make the image", e);
        goto out;
    }
    e = heif_image_add_plane(img, heif_channel_interleaved, w, h, bits);
    if (e.code != heif_error_Ok) {
        fail(err, errlen, "cannot make the image", e);
        goto out;
    }
    int stride = 0;
    uint8_t *dst = heif_image_get_plane(img, heif_channel_interleaved, &stride);
    size_t row = (size_t)3 * w * (deep ? 2 : 1);
    for (int y = 0; y < h; y++) {
        const uint8_t *src = (const uint8_t *)rgb + (size_t)y * row;
        if (!deep) {
            memcpy(dst + (size_t)y * stride, src, row);
            continue;
        }
        // Little-endian words, whatever the machine's order.
        const uint16_t *s16 = (const uint16_t *)src;
        uint8_t *d = dst + (size_t)y * stride;
        for (int i = 0; i < 3 * w; i++) {
            d[2 * i] = (uint8_t)(s16[i] & 0xff);
            d[2 * i + 1] = (uint8_t)(s16[i] >> 8);
        }
    }
    e = heif_context_encode_image(ctx, img, enc, opts, NULL);
    if (e.code != heif_error_Ok) {
        fail(err, errlen, "cannot encode", e);
        goto out;
    }
    e = heif_context_write_to_file(ctx, path);
    if (e.code != heif_error_Ok) {
        fail(err, errlen, "cannot write", e);
        goto out;
    }
    rc = 0;
out:
    if (img != NULL) {
        heif_image_release(img);
    }
    if (enc != NULL) {
        heif_encoder_release(enc);
    }
    if (opts != NULL) {
        heif_encoding_options_free(opts);
    }
    heif_context_free(ctx);
    return rc;
}
