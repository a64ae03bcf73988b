package centroid

import (
	"fmt"
	"slices"
)

// A kernel turns the windows idx (valid-subaperture indices, all inside the
// rows held by frame, whose first pixel is frame pixel base) into slopes and
// adds what it saw to f. The caller has checked every length.
//
// Every kernel computes the same thing in the same order, so that their
// results agree bit for bit:
//
//  1. calibrate: v = raw·gain − offset rounded once to float32, as a fused
//     multiply–subtract does it. The pure-Go kernels get the same bits from
//     float64: raw (16 bits) times gain (24) is exact there, and so is the
//     difference, whose bits span at most 41 + 12 = 53 places because
//     NewCalibration keeps every offset 0 or >= gain/4096;
//  2. peak = max(0, max v), k its first position in row-major order; a dead
//     row is one whose raw pixels are all 0, a saturated window has a raw
//     pixel >= the saturation level, a hot window has peak > 0 and
//     peak > HotRatio × the largest of k's four neighbours and HotFloor;
//  3. thr = Threshold·peak; where thr > 0, v = max(v − thr, 0); then v
//     times the window weight (WCoG);
//  4. rows y and p−1−y (y < h = ⌊p/2⌋) pair up, xs[p−1−y] being −xs[y]:
//     their sum a_y = v_y + v_{p−1−y} and their moment
//     d_y = float32(xs[y]·(v_y − v_{p−1−y})), per column; S = pairs of
//     a_0, …, a_{h−1} (then the middle row when p is odd), D = pairs of
//     d_{h−1}, …, d_0, X = float32(S·xs) per column;
//  5. s, sx, sy are S, X, D summed in adjacent pairs across the columns (pairs),
//     so 8 columns sum as ((c0+c1)+(c2+c3)) + ((c4+c5)+(c6+c7)), the order of
//     a 256-bit register's horizontal add;
//  6. s <= 0: a dark window, slopes 0; else sx/s − ref and sy/s − ref.
//
// "Pairs of" a list is its sum in adjacent pairs, level by level, an odd last
// element carried up (pairs and pairRows); for 8 columns and 4 row pairs it
// is the tree the assembly's registers add in (addition commutes, so the
// reversed order of D gives the same bits there).
type kernel struct {
	name   string
	pixels int // window size the kernel handles; 0 for any
	avx2   bool
}

var plainKernel = kernel{name: "plain"}

// windows runs the kernel. It is a switch rather than a func value so that
// the flags and scratch of the caller stay on its stack (an indirect call
// would make them escape).
func (k kernel) windows(c *Calibration, frame []uint16, base int, idx []int32, slopes, work []float32, f *Flags) {
	if k.avx2 {
		windowsAVX2(c, frame, base, idx, slopes, f)
		return
	}
	if c.layout.Pixels == 8 {
		windowsGo8(c, frame, base, idx, slopes, work, f)
		return
	}
	windowsGo(c, frame, base, idx, slopes, work, f)
}

// kernelNames lists every kernel this package knows, whether or not the CPU,
// the build and the window size allow it.
var kernelNames = []string{"plain", "avx2"}

// Available returns the kernels usable on this CPU and build for windows of
// pixels×pixels, fastest first; "plain" is always last.
func Available(pixels int) []string {
	var names []string
	for _, k := range kernels(pixels) {
		names = append(names, k.name)
	}
	return names
}

func kernels(pixels int) []kernel {
	var ks []kernel
	for _, k := range archKernels() {
		if k.pixels == 0 || k.pixels == pixels {
			ks = append(ks, k)
		}
	}
	return append(ks, plainKernel)
}

func pickKernel(name string, pixels int) (kernel, error) {
	ks := kernels(pixels)
	if name == "" {
		return ks[0], nil
	}
	for _, k := range ks {
		if k.name == name {
			return k, nil
		}
	}
	if slices.Contains(kernelNames, name) {
		return kernel{}, fmt.Errorf("%w: options kernel %q: not supported by this CPU, build or %d-pixel window (available: %v)",
			ErrConfig, name, pixels, Available(pixels))
	}
	return kernel{}, fmt.Errorf("%w: options kernel %q: unknown (known: %v)", ErrConfig, name, kernelNames)
}

// Kernel returns the name of the window loop in use: "plain" or "avx2".
func (c *Calibration) Kernel() string { return c.kern.name }

// pairs sums a in adjacent pairs, level by level: a[i] = a[2i] + a[2i+1],
// an odd last element carried up, until one is left. It overwrites a.
func pairs(a []float32) float32 {
	for n := len(a); n > 1; n = (n + 1) / 2 {
		for i := range n / 2 {
			a[i] = a[2*i] + a[2*i+1]
		}
		if n%2 == 1 {
			a[n/2] = a[n-1]
		}
	}
	return a[0]
}

// pairRows is pairs on the n rows of p columns that start at w: column by
// column, in place; it returns the first row, which holds the sums.
func pairRows(w []float32, p, n int) []float32 {
	for ; n > 1; n = (n + 1) / 2 {
		for i := range n / 2 {
			dst, a, b := w[i*p:i*p+p], w[2*i*p:2*i*p+p], w[(2*i+1)*p:(2*i+1)*p+p]
			for j := range dst {
				dst[j] = a[j] + b[j]
			}
		}
		if n%2 == 1 {
			copy(w[n/2*p:n/2*p+p], w[(n-1)*p:n*p])
		}
	}
	return w[:p]
}

// windowsGo is the pure-Go kernel, for any window size; work (Pixels²) holds
// one calibrated window.
func windowsGo(c *Calibration, frame []uint16, base int, idx []int32, slopes, work []float32, f *Flags) {
	p, side := c.layout.Pixels, c.layout.Side()
	xs := c.xs[:p]
	var sumX [64]float32
	for _, i := range idx {
		st := int(c.start[i]) - base
		blk := c.cal64[2*p*p*int(i) : 2*p*p*(int(i)+1)]
		peak := float32(0)
		pk := 0
		var top uint16
		for y := range p {
			raw := frame[st+y*side : st+y*side+p]
			g := blk[2*p*y : 2*p*y+len(raw)]
			off := blk[2*p*y+p : 2*p*y+p+len(raw)]
			wk := work[y*p : y*p+len(raw)]
			var rowTop uint16
			for x, a := range raw {
				rowTop = max(rowTop, a)
				v := float32(float64(a)*g[x] - off[x])
				wk[x] = v
				if v > peak {
					peak, pk = v, y*p+x
				}
			}
			if rowTop == 0 {
				f.DeadRows++
			}
			top = max(top, rowTop)
		}
		if top >= c.satADU {
			f.Saturated++
		}
		if c.hotRatio > 0 && peak > 0 && c.isHot(work, pk, peak) {
			f.Hot++
		}
		// Clip and weight rows y and p−1−y, then pair them (step 4). A
		// clipped value is v − thr or 0, as max(v − thr, 0): v − thr is never
		// −0 when thr > 0.
		thr := float32(c.threshold) * peak
		clip, wcog := thr > 0, c.method == WCoG
		h := p / 2
		for y := range h + p%2 {
			a, b := work[y*p:y*p+p], work[(p-1-y)*p:(p-y)*p]
			wa, wb := c.weight[y*p:y*p+p], c.weight[(p-1-y)*p:(p-y)*p]
			b, wa, wb = b[:len(a)], wa[:len(a)], wb[:len(a)]
			ys := xs[y]
			for j := range a {
				u, v := a[j], b[j]
				if clip {
					if u -= thr; u < 0 {
						u = 0
					}
					if v -= thr; v < 0 {
						v = 0
					}
				}
				if wcog {
					u *= wa[j]
					v *= wb[j]
				}
				if y == h { // the middle row of an odd p pairs with nothing
					a[j] = u
					continue
				}
				a[j], b[j] = u+v, float32(ys*(u-v))
			}
		}
		sum := pairRows(work, p, h+p%2)
		mom := pairRows(work[(p-h)*p:], p, h)
		x := sumX[:p]
		for j := range x {
			x[j] = float32(sum[j] * xs[j])
		}
		sx, sy, ss := pairs(x), pairs(mom), pairs(sum)
		if !(ss > 0) {
			f.Dark++
			slopes[2*i], slopes[2*i+1] = 0, 0
			continue
		}
		slopes[2*i] = sx/ss - c.ref[2*i]
		slopes[2*i+1] = sy/ss - c.ref[2*i+1]
	}
}

// isHot reports whether the window's peak pixel k stands alone.
func (c *Calibration) isHot(work []float32, k int, peak float32) bool {
	p := c.layout.Pixels
	x, y := k%p, k/p
	n := c.hotFloor
	if x > 0 {
		n = max(n, work[k-1])
	}
	if x < p-1 {
		n = max(n, work[k+1])
	}
	if y > 0 {
		n = max(n, work[k-p])
	}
	if y < p-1 {
		n = max(n, work[k+p])
	}
	return peak > c.hotRatio*n
}

// windowsGo8 is windowsGo for 8×8-pixel windows, with the window in fixed
// arrays so that the loops carry no bounds checks: the pure-Go route where
// the assembly is missing. The same order of operations, the same bits.
func windowsGo8(c *Calibration, frame []uint16, base int, idx []int32, slopes, work []float32, f *Flags) {
	side := c.layout.Side()
	xs := (*[8]float32)(c.xs)
	wt := (*[64]float32)(c.weight)
	w := (*[64]float32)(work)
	for _, i := range idx {
		st := int(c.start[i]) - base
		blk := (*[128]float64)(c.cal64[128*int(i):])
		peak := float32(0)
		pk := 0
		var top uint16
		for y := range 8 {
			raw := (*[8]uint16)(frame[st+y*side:])
			var rowTop uint16
			for x, a := range raw {
				rowTop = max(rowTop, a)
				v := float32(float64(a)*blk[16*y+x] - blk[16*y+8+x])
				w[8*y+x] = v
				if v > peak {
					peak, pk = v, 8*y+x
				}
			}
			if rowTop == 0 {
				f.DeadRows++
			}
			top = max(top, rowTop)
		}
		if top >= c.satADU {
			f.Saturated++
		}
		if c.hotRatio > 0 && peak > 0 && c.isHot(work, pk, peak) {
			f.Hot++
		}
		thr := float32(c.threshold) * peak
		clip, wcog := thr > 0, c.method == WCoG
		var sum, mom, xm [8]float32
		for j := range 8 {
			var a, d [4]float32
			for y := range 4 {
				u, v := w[8*y+j], w[8*(7-y)+j]
				if clip {
					if u -= thr; u < 0 {
						u = 0
					}
					if v -= thr; v < 0 {
						v = 0
					}
				}
				if wcog {
					u *= wt[8*y+j]
					v *= wt[8*(7-y)+j]
				}
				a[y], d[y] = u+v, float32(xs[y]*(u-v))
			}
			sum[j] = (a[0] + a[1]) + (a[2] + a[3])
			mom[j] = (d[3] + d[2]) + (d[1] + d[0])
			xm[j] = float32(sum[j] * xs[j])
		}
		ss, sx, sy := pair8(&sum), pair8(&xm), pair8(&mom)
		if !(ss > 0) {
			f.Dark++
			slopes[2*i], slopes[2*i+1] = 0, 0
			continue
		}
		slopes[2*i] = sx/ss - c.ref[2*i]
		slopes[2*i+1] = sy/ss - c.ref[2*i+1]
	}
}

// pair8 is pairs on 8 values.
func pair8(a *[8]float32) float32 {
	return ((a[0] + a[1]) + (a[2] + a[3])) + ((a[4] + a[5]) + (a[6] + a[7]))
}
