package atmosphere

// The two inner loops of addLayer, in portable Go. On amd64 with AVX2 and FMA
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
