//go:build amd64

package atmosphere

import "golang.org/x/sys/cpu"

var haveAVX2FMA = cpu.X86.HasAVX2 && cpu.X86.HasFMA

//go:noescape
func blend4AVX2(dst, f0, f1, t0, t1 *float32, n int, a0, a1, b0, b1 float32)

//go:noescape
func lerpAddAVX2(out *float64, src *float32, n int, wl, wr float64)

//go:noescape
func waves6AVX2(row *float64, n int, add bool, base float64, x *[6]*float64, c *[6]float64)

// blend4Fast does the first multiple of 8 elements and returns how many.
func blend4Fast(dst, f0, f1, t0, t1 []float32, a0, a1, b0, b1 float32) int {
	n := len(dst) &^ 7
	if !haveAVX2FMA || n == 0 {
		return 0
	}
	_, _, _, _ = f0[n-1], f1[n-1], t0[n-1], t1[n-1]
	blend4AVX2(&dst[0], &f0[0], &f1[0], &t0[0], &t1[0], n, a0, a1, b0, b1)
	return n
}

// lerpAddFast does the first multiple of 4 elements and returns how many.
func lerpAddFast(out []float64, src []float32, wl, wr float64) int {
	n := len(out) &^ 3
	if !haveAVX2FMA || n == 0 {
		return 0
	}
	_ = src[n] // the kernel reads src[0:n+1]
	lerpAddAVX2(&out[0], &src[0], n, wl, wr)
	return n
}

// waves6Fast does the first multiple of 4 elements and returns how many.
func waves6Fast(row []float64, add bool, base float64, x *[6][]float64, c *[6]float64) int {
	n := len(row) &^ 3
	if !haveAVX2FMA || n == 0 {
		return 0
	}
	var p [6]*float64
	for j, v := range x {
		_ = v[n-1]
		p[j] = &v[0]
	}
	waves6AVX2(&row[0], n, add, base, &p, c)
	return n
}
