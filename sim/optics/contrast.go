package optics

import (
	"fmt"
	"math"
)

// Contrast writes into out the raw contrast curve of the PSF image psf
// (size × size, zero spatial frequency at pixel (size/2, size/2), pad pixels per
// λ/D as Imager makes it): out[r] is the azimuthal mean of the PSF over the
// annulus of separations [r − ½, r + ½) λ/D from the centre, divided by the
// PSF's peak. out[0] covers the core (separations below ½ λ/D). Annuli that
// leave the image (r + ½ beyond size/(2·pad)) are not written: Contrast
// returns the number of separations written, min(len(out), ⌊size/(2·pad) − ½⌋ + 1).
// This is the raw contrast of high-contrast imaging: the PSF's own halo, with
// no calibration of the speckles and no throughput correction for off-axis
// sources (*common practice*).
func Contrast(psf []float64, size, pad int, out []float64) (int, error) {
	if size < 1 || len(psf) != size*size {
		return 0, fmt.Errorf("optics: contrast of a PSF of %d values: want size² = %d", len(psf), size*size)
	}
	if pad < 1 {
		return 0, fmt.Errorf("optics: contrast padding %d: must be >= 1", pad)
	}
	peak := 0.0
	for _, v := range psf {
		peak = max(peak, v)
	}
	if !(peak > 0) || math.IsInf(peak, 0) {
		return 0, fmt.Errorf("optics: contrast of a PSF with peak %g: must be finite and > 0", peak)
	}
	rmax := float64(size)/(2*float64(pad)) - 0.5
	n := min(len(out), int(math.Floor(rmax))+1)
	if n <= 0 {
		return 0, nil
	}
	var sums [64]float64
	var counts [64]int
	sum, count := sums[:0], counts[:0]
	if n > len(sums) {
		sum, count = make([]float64, n), make([]int, n)
	} else {
		sum, count = sum[:n], count[:n]
	}
	c := size / 2
	for y := 0; y < size; y++ {
		dy := float64(y - c)
		for x := 0; x < size; x++ {
			dx := float64(x - c)
			r := math.Sqrt(dx*dx+dy*dy) / float64(pad) // λ/D
			k := int(math.Floor(r + 0.5))
			if k < n {
				sum[k] += psf[y*size+x]
				count[k]++
			}
		}
	}
	for k := range n {
		out[k] = 0
		if count[k] > 0 {
			out[k] = sum[k] / float64(count[k]) / peak
		}
	}
	return n, nil
}
