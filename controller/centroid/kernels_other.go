//go:build !amd64

package centroid

// archKernels is empty off amd64: only the pure-Go kernel exists.
func archKernels() []kernel { return nil }

// windowsAVX2 is never picked off amd64.
func windowsAVX2(*Calibration, []uint16, int, []int32, []float32, *Flags) {
	panic("centroid: no AVX2 kernel in this build")
}
