package centroid

import "math"

// params8 holds the constants of the 8×8-pixel assembly kernel, laid out as
// it reads them (byte offsets in the comments; TestParams8Layout checks
// them). Broadcast values are stored in all 8 lanes so that they are read as
// one 256-bit memory operand.
type params8 struct {
	xs     [8]float32    // 0: window x coordinate minus the centre
	ys     [8][8]float32 // 32: ys[y] = xs[y] in every lane
	weight [64]float32   // 288: the window weight, row by row
	satm1  [8]int32      // 544: saturation level − 1
	thr    [8]float32    // 576: Threshold
	negInf [8]float32    // 608: −∞
	hot    float32       // 640: HotRatio
	hotOn  int32         // 644: HotRatio > 0
	wcog   int32         // 648: Method == WCoG
	floor  float32       // 652: HotFloor
}

func newParams8(c *Calibration) *params8 {
	q := &params8{hot: c.hotRatio, floor: c.hotFloor}
	copy(q.xs[:], c.xs)
	copy(q.weight[:], c.weight)
	for y := range 8 {
		for x := range 8 {
			q.ys[y][x] = c.xs[y]
		}
		q.satm1[y] = int32(c.satADU) - 1
		q.thr[y] = float32(c.threshold)
		q.negInf[y] = float32(math.Inf(-1))
	}
	if c.hotRatio > 0 {
		q.hotOn = 1
	}
	if c.method == WCoG {
		q.wcog = 1
	}
	return q
}
