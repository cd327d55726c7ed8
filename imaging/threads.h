// The OpenCV and C-library calls lineshot makes that gocv does not expose.
#include <stddef.h>
#ifdef __cplusplus
extern "C" {
#endif

void lineshot_set_opencv_threads(int n);
int lineshot_malloc_arenas(void);
void lineshot_drop_pages(void *p, size_t n);
int lineshot_mat_create(void *m, int rows, int cols, int type, int huge);
void *lineshot_mat_data(void *m, size_t *step);

#ifdef __cplusplus
}
#endif
