package atmosphere

// The inner loops of addLayer and of the subharmonics, in portable Go. On amd64 with AVX2 and FMA
// the assembly versions in interp_amd64.s take over the bulk of each row and
// these finish the tail; tests hold both to the same results.

// blend4 sets dst[k] = a0·f0[k] + a1·f1[k] + b0·t0[k] + b1·t1[k]: the vertical
// interpolation of two screen rows, blended between the layer's two screens.
func blend4(dst, f0, f1, t0, t1 []float32, a0, a1, b0, b1 float32) {
	k := blend4Fast(dst, f0, f1, t0, t1, a0, a1, b0, b1)
	blend4Go(dst[k:], f0[k:], f1[k:], t0[k:], t1[k:], a0, a1, b0, b1)
}

func blend4Go(dst, f0, f1, t0, t1 []float32, a0, a1, b0, b1 float32) {
	f0, f1, t0, t1 = f0[:len(dst)], f1[:len(dst)], t0[:len(dst)], t1[:len(dst)]
	for k := range dst {
		dst[k] = a0*f0[k] + a1*f1[k] + b0*t0[k] + b1*t1[k]
	}
}

// lerpAdd adds wl·src[i] + wr·src[i+1] to out[i]: the horizontal
// interpolation of a blended row; src holds len(out)+1 values.
func lerpAdd(out []float64, src []float32, wl, wr float64) {
	i := lerpAddFast(out, src, wl, wr)
	lerpAddGo(out[i:], src[i:], wl, wr)
}

func lerpAddGo(out []float64, src []float32, wl, wr float64) {
	left, right := src[:len(out)], src[1:len(out)+1]
	for i := range out {
		out[i] += wl*float64(left[i]) + wr*float64(right[i])
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
