package atmosphere

// The inner loops of addLayer and of the subharmonics, in portable Go. On amd64 with AVX2 and FMA
// the assembly versions in interp_amd64.s take over the bulk of each row and
// these finish the tail; tests hold both to the same results.

// combine6 sets (or, with add, adds to) dst[k] the value Σ_m c[m]·src[m][k]: six
// rows of a layer's nodes combined with the vertical interpolation weights.
func combine6(dst []float32, add bool, src [6][]float32, c [6]float32) {
	k := combine6Fast(dst, add, &src, &c)
	for m := range src {
		src[m] = src[m][k:]
	}
	combine6Go(dst[k:], add, src, c)
}

func combine6Go(dst []float32, add bool, src [6][]float32, c [6]float32) {
	s0, s1, s2, s3, s4, s5 := src[0][:len(dst)], src[1][:len(dst)], src[2][:len(dst)], src[3][:len(dst)], src[4][:len(dst)], src[5][:len(dst)]
	for k := range dst {
		v := c[0]*s0[k] + c[1]*s1[k] + c[2]*s2[k] + c[3]*s3[k] + c[4]*s4[k] + c[5]*s5[k]
		if add {
			dst[k] += v
		} else {
			dst[k] = v
		}
	}
}

// taps6Add adds Σ_j a[j]·even[i+j] + b[j]·odd[i+j], j = 0, 1, 2, to out[i]: the
// horizontal interpolation of a combined row, whose even and odd nodes are in
// two rows; each holds len(out)+2 values.
func taps6Add(out []float64, even, odd []float32, a, b [3]float64) {
	i := taps6AddFast(out, even, odd, &a, &b)
	taps6AddGo(out[i:], even[i:], odd[i:], a, b)
}

func taps6AddGo(out []float64, even, odd []float32, a, b [3]float64) {
	e, o := even[:len(out)+2], odd[:len(out)+2]
	for i := range out {
		out[i] += a[0]*float64(e[i]) + a[1]*float64(e[i+1]) + a[2]*float64(e[i+2]) +
			b[0]*float64(o[i]) + b[1]*float64(o[i+1]) + b[2]*float64(o[i+2])
	}
}

// waves6 sets (or, with add, adds to) row[i] the value base + Σ_j x[j][i]·c[j]:
// three plane waves, real and imaginary parts, summed along a row.
func waves6(row []float64, add bool, base float64, x [6][]float64, c [6]float64) {
	i := waves6Fast(row, add, base, &x, &c)
	for j := range x {
		x[j] = x[j][i:]
	}
	waves6Go(row[i:], add, base, x, c)
}

func waves6Go(row []float64, add bool, base float64, x [6][]float64, c [6]float64) {
	x0, x1, x2, x3, x4, x5 := x[0][:len(row)], x[1][:len(row)], x[2][:len(row)], x[3][:len(row)], x[4][:len(row)], x[5][:len(row)]
	for i := range row {
		v := base + x0[i]*c[0] + x1[i]*c[1] + x2[i]*c[2] + x3[i]*c[3] + x4[i]*c[4] + x5[i]*c[5]
		if add {
			row[i] += v
		} else {
			row[i] = v
		}
	}
}
