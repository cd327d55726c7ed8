#include <opencv2/core.hpp>
#include "threads.h"

void lineshot_set_opencv_threads(int n) {
    cv::setNumThreads(n);
}
