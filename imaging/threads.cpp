#include <malloc.h>
#include <stdint.h>
#include <sys/mman.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <opencv2/core.hpp>
#include "threads.h"

void lineshot_set_opencv_threads(int n) {
    cv::setNumThreads(n);
}

// One malloc arena for the whole process, set before any thread allocates
// (a constructor of the program runs after the libraries' and before main).
// glibc otherwise gives each thread that allocates under contention its own
// arena, and what one thread frees stays in its arena: a two-worker batch of
// 12 MP photos peaked about 17 MB higher, at the same throughput. Called
// from main instead, after threads had allocated, the setting did nothing.
//
//
// The same constructor fixes when malloc maps a block of its own and when it
// hands the top of its heap back. By default the first threshold starts at
// 128 KiB and rises to the size of each mapped block freed, and the second
// follows it at twice that. In a batch with two workers, whose 1080p frames
// (6 MB each) and working buffers are freed in alternation, the heap kept
// being shrunk and grown again and the frames' pages faulted in afresh:
// 66 000-84 000 page faults a 100-photo batch against 20 000 with one
// worker, and about 8% more CPU time for the measuring. With the first
// fixed at the largest value the default reaches (32 MiB: a 12 MP frame is
// still mapped alone and unmapped when closed, as frame.keepRows expects)
// and 16 MiB kept free at the top, the two-worker batch faults about as
// often as the one-worker one (26 000 against 22 000) and ran 4% faster
// (medians of six alternating runs), at the same peak memory; a single
// 12 MP measurement peaks about 4 MB higher.
__attribute__((constructor)) static void lineshot_one_arena(void) {
    mallopt(M_ARENA_MAX, 1);
    mallopt(M_MMAP_THRESHOLD, 32 << 20);
    mallopt(M_TRIM_THRESHOLD, 16 << 20);
}

int lineshot_malloc_arenas(void) {
    char *buf = NULL;
    size_t len = 0;
    FILE *f = open_memstream(&buf, &len);
    if (f == NULL) {
        return -1;
    }
    malloc_info(0, f);
    fclose(f);
    int n = 0;
    for (const char *p = buf; (p = strstr(p, "<heap nr=")) != NULL; p++) {
        n++;
    }
    free(buf);
    return n;
}

// advise_inside gives advice to the whole pages of size page (a power of
// two) that lie inside [p, p+n); none when no whole page does.
static void advise_inside(void *p, size_t n, uintptr_t page, int advice) {
    uintptr_t a = ((uintptr_t)p + page - 1) & ~(page - 1);
    uintptr_t e = ((uintptr_t)p + n) & ~(page - 1);
    if (e > a) {
        madvise((void *)a, e - a, advice);
    }
}

// Allocates m's data for rows x cols of type without setting it (gocv's
// NewMatWithSize writes zeros over it first); 0 on success, -1 if OpenCV
// could not allocate. With huge set, the whole 2 MiB pages inside the
// data are asked for as transparent huge pages (when the kernel's setting
// is "madvise"; otherwise nothing changes): a 12 MP frame is then 18 page
// faults instead of about 9000, and the faults had been about a third of
// the frame's decode (39 -> 27 ms). Giving rows back later (drop_pages)
// still works: a huge page only partly given back is split by the kernel.
int lineshot_mat_create(void *m, int rows, int cols, int type, int huge) {
    try {
        cv::Mat *mat = static_cast<cv::Mat *>(m);
        mat->create(rows, cols, type);
        if (huge) {
            advise_inside(mat->data, mat->total() * mat->elemSize(), (uintptr_t)2 << 20, MADV_HUGEPAGE);
        }
        return 0;
    } catch (...) {
        return -1;
    }
}

// The data of Mat m and the bytes from one row to the next (for C code that
// fills a Mat lineshot_mat_create made).
void *lineshot_mat_data(void *m, size_t *step) {
    cv::Mat *mat = static_cast<cv::Mat *>(m);
    *step = mat->step[0];
    return mat->data;
}

// Gives the whole pages inside [p, p+n) back to the system (their contents
// read as zero afterwards): the rows of a decoded frame no step will read.
void lineshot_drop_pages(void *p, size_t n) {
    advise_inside(p, n, 4096, MADV_DONTNEED);
}
