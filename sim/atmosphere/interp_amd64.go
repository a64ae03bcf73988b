//go:build amd64

package atmosphere

import "golang.org/x/sys/cpu"

var haveAVX2FMA = cpu.X86.HasAVX2 && cpu.X86.HasFMA

//go:noescape
func combine6AVX2(dst *float32, n int, add bool, src *[6]*float32, c *[6]float32)

//go:noescape
func taps6AddAVX2(out *float64, even, odd *float32, n int, a, b *[3]float64)

//go:noescape
func waves6AVX2(row *float64, n int, add bool, base float64, x *[6]*float64, c *[6]float64)

// combine6Fast does the first multiple of 8 elements and returns how many.
func combine6Fast(dst []float32, add bool, src *[6][]float32, c *[6]float32) int {
	n := len(dst) &^ 7
	if !haveAVX2FMA || n == 0 {
		return 0
	}
	var p [6]*float32
	for m, v := range src {
		_ = v[n-1]
		p[m] = &v[0]
	}
	combine6AVX2(&dst[0], n, add, &p, c)
	return n
}

// taps6AddFast does the first multiple of 4 elements and returns how many.
func taps6AddFast(out []float64, even, odd []float32, a, b *[3]float64) int {
	n := len(out) &^ 3
	if !haveAVX2FMA || n == 0 {
		return 0
	}
	_, _ = even[n+1], odd[n+1] // the kernel reads [0:n+2] of both
	taps6AddAVX2(&out[0], &even[0], &odd[0], n, a, b)
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
