// The one OpenCV setting lineshot makes that gocv does not expose.
#ifdef __cplusplus
extern "C" {
#endif

void lineshot_set_opencv_threads(int n);

#ifdef __cplusplus
}
#endif
