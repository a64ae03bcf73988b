//go:build openblas

package openblasbench

// #cgo LDFLAGS: -lopenblas
// #include <cblas.h>
import "C"

import "fmt"

// SetThreads sets the number of threads OpenBLAS uses for later calls.
func SetThreads(n int) { C.openblas_set_num_threads(C.int(n)) }

// Sgemv stores y = A·x for the row-major rows×cols matrix a (leading
// dimension cols) through cblas_sgemv with alpha 1 and beta 0.
func Sgemv(y []float32, a []float32, rows, cols int, x []float32) {
	if len(a) < rows*cols || len(x) != cols || len(y) != rows {
		panic(fmt.Sprintf("openblasbench: shape mismatch: A %d×%d in %d elements, len(x)=%d, len(y)=%d", rows, cols, len(a), len(x), len(y)))
	}
	C.cblas_sgemv(C.CblasRowMajor, C.CblasNoTrans, C.blasint(rows), C.blasint(cols), 1,
		(*C.float)(&a[0]), C.blasint(cols), (*C.float)(&x[0]), 1, 0, (*C.float)(&y[0]), 1)
}
