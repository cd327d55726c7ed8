package imaging

/*
#cgo pkg-config: opencv4
#cgo CXXFLAGS: --std=c++11
#include "threads.h"
*/
import "C"

import (
	"fmt"
	"unsafe"

	"gocv.io/x/gocv"
)

// SetOpenCVThreads sets how many threads OpenCV's own functions (warps,
// resizing) may use, for the whole process; n < 1 restores OpenCV's
// default (one per CPU). A batch that already measures a photo per CPU
// sets what it gives each photo: OpenCV's threads would otherwise compete
// with the other photos' work. gocv v0.32 has no call for it.
func SetOpenCVThreads(n int) {
	if n < 1 {
		n = -1
	}
	C.lineshot_set_opencv_threads(C.int(n))
}

// mallocArenas is how many malloc arenas glibc has made (from
// malloc_info), or -1 if it cannot tell: 1 while the process-wide setting
// in threads.cpp holds.
func mallocArenas() int {
	return int(C.lineshot_malloc_arenas())
}

// dropPages gives the whole memory pages inside b back to the system; b
// reads as zeros afterwards. b must be memory from C (a Mat's data).
func dropPages(b []uint8) {
	if len(b) > 0 {
		C.lineshot_drop_pages(unsafe.Pointer(&b[0]), C.size_t(len(b)))
	}
}

// newMatUnset is gocv.NewMatWithSize without the zeros it writes first
// (a pass over 36 MB for a 12 MP frame, before any row is decoded), its
// contents arbitrary: for buffers whose every element is written before
// it is read. huge asks for transparent huge pages (see threads.cpp).
func newMatUnset(rows, cols int, t gocv.MatType, huge bool) (gocv.Mat, error) {
	m := gocv.NewMat()
	h := 0
	if huge {
		h = 1
	}
	if C.lineshot_mat_create(unsafe.Pointer(m.Ptr()), C.int(rows), C.int(cols), C.int(t), C.int(h)) != 0 {
		m.Close()
		return gocv.Mat{}, fmt.Errorf("cannot allocate %d×%d pixels", cols, rows)
	}
	return m, nil
}
