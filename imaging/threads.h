// The OpenCV and C-library settings lineshot makes that gocv does not expose.
#ifdef __cplusplus
extern "C" {
#endif

void lineshot_set_opencv_threads(int n);
int lineshot_malloc_arenas(void);

#ifdef __cplusplus
}
#endif
