// A JPEG decoder that hands over the frame a stripe of rows at a time, so
// that the band search can reduce the rows already decoded on another core
// while libjpeg decodes the rest. It decodes as OpenCV's imread does for
// the photos it takes (libjpeg's defaults, BGR output); everything else
// (other colour spaces, rotated photos) is left to imread.
#include <setjmp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <jpeglib.h>
#include <jerror.h>
#include "jpegrows.h"

struct lineshot_jpeg {
    struct jpeg_decompress_struct cinfo;
    struct jpeg_error_mgr jerr;
    jmp_buf jump;
    FILE *file;
    char msg[JMSG_LENGTH_MAX];
    long damage;                   // warnings that mean damaged pixels
    char warning[JMSG_LENGTH_MAX]; // the first of them
};

static void on_error(j_common_ptr c) {
    struct lineshot_jpeg *j = (struct lineshot_jpeg *)c->client_data;
    (*c->err->format_message)(c, j->msg);
    longjmp(j->jump, 1);
}

// Warnings (corrupt data libjpeg decodes past, as imread does) are counted,
// not printed, and the first kept for lineshot_jpeg_warnings; except
// extraneous bytes before a marker, which some cameras write (padding
// between segments) and which leave every pixel as it was (libjpeg finds
// them only when a segment's data is complete). A file cut short
// never gets here (the caller checks for the end marker first).
static void on_message(j_common_ptr c, int level) {
    if (level < 0) {
        c->err->num_warnings++;
        struct lineshot_jpeg *j = (struct lineshot_jpeg *)c->client_data;
        if (c->err->msg_code != JWRN_EXTRANEOUS_DATA && j->damage++ == 0) {
            (*c->err->format_message)(c, j->warning);
        }
    }
}

static unsigned get16(const unsigned char *p, int big) {
    return big ? (unsigned)p[0] << 8 | p[1] : (unsigned)p[1] << 8 | p[0];
}

static unsigned long get32(const unsigned char *p, int big) {
    return big ? (unsigned long)get16(p, 1) << 16 | get16(p + 2, 1)
               : (unsigned long)get16(p + 2, 0) << 16 | get16(p, 0);
}

// exif_upright reads a TIFF block t of n bytes (an Exif block after its
// "Exif\0\0"): 1 when its first directory has no orientation tag or
// orientation 1, 0 when another orientation or anything it cannot read.
static int exif_upright(const unsigned char *t, unsigned long n) {
    if (n < 8 || !(memcmp(t, "II*\0", 4) == 0 || memcmp(t, "MM\0*", 4) == 0)) {
        return 0;
    }
    int big = t[0] == 'M';
    unsigned long ifd = get32(t + 4, big);
    if (ifd > n - 2) {
        return 0;
    }
    unsigned count = get16(t + ifd, big);
    if (count > (n - ifd - 2) / 12) {
        return 0;
    }
    for (unsigned k = 0; k < count; k++) {
        const unsigned char *e = t + ifd + 2 + 12 * k;
        if (get16(e, big) == 0x0112) {
            return get16(e + 2, big) == 3 && get32(e + 4, big) == 1 && get16(e + 8, big) == 1;
        }
    }
    return 1;
}

// upright reports whether the saved APP1 markers say the photo needs no
// turning: no Exif block, or one exif_upright finds upright. Anything it
// cannot read in full counts as not upright, and the photo goes to imread,
// which applies the orientation. Each block is read from a copy of its own
// size: libjpeg keeps markers inside larger pools, where a read past the
// block would go unseen by AddressSanitizer (test.sh runs it).
static int upright(struct jpeg_decompress_struct *c) {
    for (jpeg_saved_marker_ptr m = c->marker_list; m != NULL; m = m->next) {
        if (m->marker != JPEG_APP0 + 1 || m->data_length < 6 || memcmp(m->data, "Exif\0\0", 6) != 0) {
            continue; // XMP and other APP1 blocks
        }
        unsigned long n = m->data_length - 6;
        unsigned char *t = malloc(n > 0 ? n : 1);
        if (t == NULL) {
            return 0;
        }
        memcpy(t, m->data + 6, n);
        int ok = exif_upright(t, n);
        free(t);
        return ok;
    }
    return 1;
}

struct lineshot_jpeg *lineshot_jpeg_open(const char *path, int eighths, int sequential_only, int *w, int *h, int *rows_ok, char *msg, size_t msglen) {
    *rows_ok = 0;
    struct lineshot_jpeg *j = calloc(1, sizeof *j);
    if (j == NULL) {
        snprintf(msg, msglen, "out of memory");
        return NULL;
    }
    j->file = fopen(path, "rb");
    if (j->file == NULL) {
        snprintf(msg, msglen, "cannot open the file");
        free(j);
        return NULL;
    }
    j->cinfo.err = jpeg_std_error(&j->jerr);
    j->jerr.error_exit = on_error;
    j->jerr.emit_message = on_message;
    j->cinfo.client_data = j;
    if (setjmp(j->jump)) {
        snprintf(msg, msglen, "%s", j->msg);
        lineshot_jpeg_close(j);
        return NULL;
    }
    jpeg_create_decompress(&j->cinfo);
    jpeg_stdio_src(&j->cinfo, j->file);
    jpeg_save_markers(&j->cinfo, JPEG_APP0 + 1, 0xffff);
    jpeg_read_header(&j->cinfo, TRUE);
    *w = (int)j->cinfo.image_width;
    *h = (int)j->cinfo.image_height;
    int colour = (j->cinfo.jpeg_color_space == JCS_YCbCr && j->cinfo.num_components == 3) ||
                 (j->cinfo.jpeg_color_space == JCS_GRAYSCALE && j->cinfo.num_components == 1);
    if (!colour || j->cinfo.data_precision != 8 || !upright(&j->cinfo)) {
        return j; // rows_ok stays 0: the caller closes it and uses imread
    }
    if (sequential_only && jpeg_has_multiple_scans(&j->cinfo)) {
        return j; // (before jpeg_start_decompress reads every scan)
    }
    j->cinfo.out_color_space = JCS_EXT_BGR;
    // libjpeg's DCT scaling: each 8x8 block becomes eighths x eighths
    // pixels, the size the band search reduces to at a fraction of the
    // full decode's work (no full-size inverse DCT, upsampling or colour
    // conversion).
    j->cinfo.scale_num = (unsigned)eighths;
    j->cinfo.scale_denom = 8;
    jpeg_start_decompress(&j->cinfo);
    long ow = ((long)*w * eighths + 7) / 8, oh = ((long)*h * eighths + 7) / 8;
    if (j->cinfo.output_components != 3 || (long)j->cinfo.output_width != ow || (long)j->cinfo.output_height != oh) {
        return j;
    }
    *rows_ok = 1;
    return j;
}

int lineshot_jpeg_rows(struct lineshot_jpeg *j, unsigned char *dst, size_t stride, int n, char *msg, size_t msglen) {
    if (setjmp(j->jump)) {
        snprintf(msg, msglen, "%s", j->msg);
        return -1;
    }
    int got = 0;
    while (got < n && j->cinfo.output_scanline < j->cinfo.output_height) {
        JSAMPROW row = dst + (size_t)got * stride;
        JDIMENSION k = jpeg_read_scanlines(&j->cinfo, &row, 1);
        if (k == 0) {
            snprintf(msg, msglen, "the decoder stopped at row %u", j->cinfo.output_scanline);
            return -1;
        }
        got += (int)k;
    }
    return got;
}

int lineshot_jpeg_skip(struct lineshot_jpeg *j, int n, char *msg, size_t msglen) {
    if (setjmp(j->jump)) {
        snprintf(msg, msglen, "%s", j->msg);
        return -1;
    }
    return (int)jpeg_skip_scanlines(&j->cinfo, (JDIMENSION)n);
}

long lineshot_jpeg_warnings(struct lineshot_jpeg *j, char *msg, size_t msglen) {
    snprintf(msg, msglen, "%s", j->damage > 0 ? j->warning : "");
    return j->damage;
}

void lineshot_jpeg_close(struct lineshot_jpeg *j) {
    if (j == NULL) {
        return;
    }
    // jpeg_destroy_decompress also ends a decode stopped midway; it raises
    // no errors of its own.
    jpeg_destroy_decompress(&j->cinfo);
    if (j->file != NULL) {
        fclose(j->file);
    }
    free(j);
}
