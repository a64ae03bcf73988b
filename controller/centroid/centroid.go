// Package centroid turns a Shack–Hartmann detector frame into slopes: bias and
// dark subtraction, flat field, background or threshold removal, then the centre
// of gravity (CoG) or the weighted centre of gravity (WCoG) of each valid
// subaperture's window, less the reference slopes measured on the calibration
// source.
//
// The frame layout is that of sim/detector: (Subapertures·Pixels)² 16-bit
// pixels row by row, subaperture (r, c) owning the Pixels×Pixels window at
// (r·Pixels, c·Pixels). Slopes come out in pixels as float32 (the controller's
// slope type), x then y for each valid subaperture in turn (slopes[2i],
// slopes[2i+1], the bench's order), measured from the window's centre (Pixels−1)/2.
//
// Process and ProcessRows allocate nothing; a Calibration is immutable once
// made and is meant to be swapped whole between frames through an
// atomic.Pointer, as the controller's parameters are.
package centroid

import (
	"errors"
	"fmt"
	"math"
)

// Sentinel errors of a refused frame; callers count them under their own reason.
var (
	// ErrLength: the frame or chunk has the wrong number of pixels or rows.
	ErrLength = errors.New("centroid: wrong pixel count")
	// ErrConfig: a bad Layout or Calibration.
	ErrConfig = errors.New("centroid: bad configuration")
)

// Layout is the geometry of the frame.
type Layout struct {
	Subapertures int   // across the grid, >= 1
	Pixels       int   // across a window, 2..64
	Valid        []int // r·Subapertures+c in slope order
}

// Side is the number of pixels across the frame.
func (l Layout) Side() int { return l.Subapertures * l.Pixels }

// Method of the centroid.
type Method int

const (
	// CoG is the plain centre of gravity.
	CoG Method = iota
	// WCoG weights each pixel by a Gaussian of rms WeightSigma centred on the
	// window (Fusco et al. 2004; Thomas et al. 2006, from memory). Its
	// response to a shift is below one; the gain it needs is taken out by the
	// interaction matrix, measured with the same method.
	WCoG
)

// Calibration is everything Process needs besides the frame. Make it with
// NewCalibration; do not change it after.
type Calibration struct {
	layout Layout
	// cal holds, per valid window in slope order, Pixels rows of Pixels gains
	// (1/flat) then Pixels offsets (dark·gain), so that a calibrated pixel is
	// raw·gain − offset, rounded once (a fused multiply–subtract): 2·Pixels² float32 per window, read in one sequential
	// stream beside the frame (the dark and flat of invalid pixels are never
	// read, so they are not kept).
	cal []float32
	// weight per window pixel (1 for CoG).
	weight    []float32
	method    Method
	threshold float64 // fraction of the window's peak subtracted (>= 0, < 1)
	ref       []float32
	satADU    uint16
	hotRatio  float32
	hotFloor  float32
	// start: first pixel of each valid window in the frame.
	start []int32
	// byRow lists the valid windows grid row by grid row (slope order within a
	// row); those of grid rows [a, b) are byRow[rowFirst[a]:rowFirst[b]].
	byRow    []int32
	rowFirst []int32
	// xs are the window coordinates minus the centre.
	xs []float32
	// kern is the window kernel in use; par8 its constants when Pixels is 8;
	// cal64 is cal in float64 for the pure-Go kernels, which calibrate in
	// float64 (see kernel.go).
	kern  kernel
	par8  *params8
	cal64 []float64
}

// Options of a Calibration.
type Options struct {
	// Dark frame in ADU, len Side²; nil means zero.
	Dark []float32
	// Flat is the relative response per pixel (mean 1), len Side²; nil means
	// uniform. Each value must be in (0.05, 20).
	Flat []float32
	// Method is CoG or WCoG; WeightSigma (pixels, > 0) is WCoG's weight width.
	Method      Method
	WeightSigma float64
	// Threshold in [0, 1): that fraction of the window's brightest calibrated
	// pixel is subtracted from every pixel, negatives set to zero. At 0 no
	// pixel is clipped: the centre of gravity keeps the negative noise of
	// dark pixels, which is unbiased.
	Threshold float64
	// Reference slopes in pixels subtracted from the result (len 2·len(Valid));
	// nil means zero.
	Reference []float64
	// HotRatio (0 = off, else > 1) flags a window whose brightest pixel
	// exceeds HotRatio times each of its four neighbours (Flags.Hot). A
	// Gaussian spot of rms σ pixels has neighbours at exp(−1/(2σ²)) of its
	// peak: 0.5 for σ = 0.85, so 4 is a safe common-practice choice for
	// spots of one pixel rms or more.
	HotRatio float64
	// HotFloor (calibrated ADU, >= 0) is the least value the neighbours are
	// taken to hold in the hot-pixel test: a window is hot when its peak
	// exceeds HotRatio × max(HotFloor, each neighbour). Without it a faint
	// window, whose neighbours are read noise about zero, is flagged for any
	// positive peak; a few sigmas of the pixel noise (the daemon takes 5σ of
	// a pixel holding one photo-electron and the read noise: a 5σ detection,
	// common practice) keep the test to pixels that stand out of the noise.
	HotFloor float64
	// Saturation is the raw value at or above which a pixel counts as saturated
	// (1..65535; 0 means 65535).
	Saturation uint16
	// Kernel forces the window loop: "plain" (pure Go, any window size) or
	// "avx2" (AVX2 and FMA assembly, 8×8-pixel windows). "" picks the
	// fastest one the CPU and the window size allow (see Available). Both
	// give the same slopes and flags, bit for bit.
	Kernel string
}

// NewCalibration validates and builds a calibration.
func NewCalibration(l Layout, o Options) (*Calibration, error) {
	if l.Subapertures < 1 || l.Pixels < 2 || l.Pixels > 64 || len(l.Valid) == 0 {
		return nil, fmt.Errorf("%w: layout %d subapertures × %d pixels, %d valid; want >= 1, 2..64, >= 1",
			ErrConfig, l.Subapertures, l.Pixels, len(l.Valid))
	}
	if side := l.Side(); side > 1<<15 {
		return nil, fmt.Errorf("%w: layout %d subapertures × %d pixels = %d pixels across, want <= %d",
			ErrConfig, l.Subapertures, l.Pixels, side, 1<<15)
	}
	side, p, nv := l.Side(), l.Pixels, len(l.Valid)
	n2 := side * side
	seen := make([]bool, l.Subapertures*l.Subapertures)
	c := &Calibration{layout: Layout{l.Subapertures, l.Pixels, append([]int(nil), l.Valid...)},
		cal: make([]float32, 2*p*p*nv), weight: make([]float32, p*p),
		method: o.Method, threshold: o.Threshold, ref: make([]float32, 2*nv),
		satADU: o.Saturation, start: make([]int32, nv), xs: make([]float32, p)}
	for i, v := range l.Valid {
		if v < 0 || v >= len(seen) || seen[v] {
			return nil, fmt.Errorf("%w: Valid[%d] = %d, want a distinct index in [0, %d)", ErrConfig, i, v, len(seen))
		}
		seen[v] = true
		c.start[i] = int32((v/l.Subapertures)*p*side + (v%l.Subapertures)*p)
	}
	if o.Dark != nil {
		if len(o.Dark) != n2 {
			return nil, fmt.Errorf("%w: dark frame of %d pixels, want %d", ErrConfig, len(o.Dark), n2)
		}
		for i, v := range o.Dark {
			if math.IsNaN(float64(v)) || v < 0 || v > 65535 {
				return nil, fmt.Errorf("%w: dark pixel %d = %v, want 0..65535 ADU", ErrConfig, i, v)
			}
		}
	}
	if o.Flat != nil {
		if len(o.Flat) != n2 {
			return nil, fmt.Errorf("%w: flat of %d pixels, want %d", ErrConfig, len(o.Flat), n2)
		}
		for i, v := range o.Flat {
			if !(v > 0.05 && v < 20) {
				return nil, fmt.Errorf("%w: flat pixel %d = %v, want (0.05, 20)", ErrConfig, i, v)
			}
		}
	}
	for i := range nv {
		blk := c.cal[2*p*p*i : 2*p*p*(i+1)]
		for y := range p {
			g, off := blk[2*p*y:2*p*y+p], blk[2*p*y+p:2*p*(y+1)]
			for x := range p {
				k := int(c.start[i]) + y*side + x
				g[x] = 1
				if o.Flat != nil {
					g[x] = 1 / o.Flat[k]
				}
				if o.Dark != nil {
					off[x] = o.Dark[k] * g[x]
				}
				// An offset below gain/4096 (a dark under 1/4096 ADU) counts
				// as 0: then raw·gain − offset is exact in float64 (see
				// kernel.go), so that every kernel rounds it once, alike.
				if off[x] < g[x]/4096 {
					off[x] = 0
				}
			}
		}
	}
	if !(o.Threshold >= 0 && o.Threshold < 1) {
		return nil, fmt.Errorf("%w: threshold %v, want [0, 1)", ErrConfig, o.Threshold)
	}
	ctr := float64(p-1) / 2
	for x := range c.xs {
		c.xs[x] = float32(float64(x) - ctr)
	}
	switch o.Method {
	case CoG:
		for i := range c.weight {
			c.weight[i] = 1
		}
	case WCoG:
		if !(o.WeightSigma > 0 && o.WeightSigma < 1e3) {
			return nil, fmt.Errorf("%w: weight sigma %v pixels, want > 0", ErrConfig, o.WeightSigma)
		}
		for y := 0; y < p; y++ {
			for x := 0; x < p; x++ {
				r2 := float64(c.xs[x])*float64(c.xs[x]) + float64(c.xs[y])*float64(c.xs[y])
				c.weight[y*p+x] = float32(math.Exp(-r2 / (2 * o.WeightSigma * o.WeightSigma)))
			}
		}
	default:
		return nil, fmt.Errorf("%w: method %d, want CoG (0) or WCoG (1)", ErrConfig, o.Method)
	}
	if o.Reference != nil {
		if len(o.Reference) != len(c.ref) {
			return nil, fmt.Errorf("%w: %d reference slopes, want %d", ErrConfig, len(o.Reference), len(c.ref))
		}
		for i, v := range o.Reference {
			if math.IsNaN(v) || math.IsInf(v, 0) || math.Abs(v) > float64(p) {
				return nil, fmt.Errorf("%w: reference slope %d = %v, want finite within ±%d pixels", ErrConfig, i, v, p)
			}
		}
		for i, v := range o.Reference {
			c.ref[i] = float32(v)
		}
	}
	if o.HotRatio != 0 && !(o.HotRatio > 1 && o.HotRatio < 1e6) {
		return nil, fmt.Errorf("%w: hot ratio %v, want 0 (off) or > 1", ErrConfig, o.HotRatio)
	}
	c.hotRatio = float32(o.HotRatio)
	if !(o.HotFloor >= 0 && o.HotFloor < 65536) {
		return nil, fmt.Errorf("%w: hot floor %v ADU, want 0..65535", ErrConfig, o.HotFloor)
	}
	c.hotFloor = float32(o.HotFloor)
	if c.satADU == 0 {
		c.satADU = 65535
	}
	c.rowFirst = make([]int32, l.Subapertures+1)
	for _, v := range l.Valid {
		c.rowFirst[v/l.Subapertures+1]++
	}
	for r := range l.Subapertures {
		c.rowFirst[r+1] += c.rowFirst[r]
	}
	c.byRow = make([]int32, nv)
	next := append([]int32(nil), c.rowFirst[:l.Subapertures]...)
	for i, v := range l.Valid {
		r := v / l.Subapertures
		c.byRow[next[r]] = int32(i)
		next[r]++
	}
	k, err := pickKernel(o.Kernel, p)
	if err != nil {
		return nil, err
	}
	c.kern = k
	if !k.avx2 {
		c.cal64 = make([]float64, len(c.cal))
		for i, v := range c.cal {
			c.cal64[i] = float64(v)
		}
	}
	if p == 8 {
		c.par8 = newParams8(c)
	}
	return c, nil
}

// Layout returns the calibration's frame layout.
func (c *Calibration) Layout() Layout { return c.layout }

// Flags counts what one frame showed besides its slopes.
type Flags struct {
	// Saturated windows: valid subapertures with at least one pixel at or
	// above the saturation level.
	Saturated int
	// Dark windows: valid subapertures with no positive signal after
	// calibration; their slopes are set to zero (the reference).
	Dark int
	// DeadRows: rows of a valid window whose every pixel reads 0 (a dead
	// readout line counts once per window it crosses).
	DeadRows int
	// Hot windows: the brightest calibrated pixel exceeds HotRatio times the
	// brightest of its four neighbours, which a spot wider than a pixel never
	// does but a hot pixel or a cosmic-ray hit does.
	Hot int
}

// Process computes the slopes of a whole frame into slopes (len 2·len(Valid)),
// using work (len Pixels²) as scratch. It allocates nothing.
func (c *Calibration) Process(frame []uint16, slopes, work []float32) (Flags, error) {
	side := c.layout.Side()
	if len(frame) != side*side {
		return Flags{}, fmt.Errorf("%w: frame of %d pixels, want %d", ErrLength, len(frame), side*side)
	}
	return c.ProcessRows(frame, 0, side, slopes, work)
}

// RowsReady is the number of leading valid subapertures (in slope order)
// whose windows lie entirely in detector rows [0, rows): with Valid in raster
// order, once rows have arrived the slopes of Valid[:RowsReady(rows)] are known.
func (c *Calibration) RowsReady(rows int) int {
	k := 0
	for _, v := range c.layout.Valid {
		if (v/c.layout.Subapertures+1)*c.layout.Pixels <= rows {
			k++
		} else {
			break
		}
	}
	return k
}

// ProcessRows processes the valid subapertures whose windows lie entirely in
// rows [from, to) of the frame; frame holds rows [from, to) only (len
// (to−from)·Side), so a camera's row chunk can be handed in as it arrives.
// from and to must fall on window boundaries. It writes slopes[2i] and
// slopes[2i+1] of those subapertures only and allocates nothing.
func (c *Calibration) ProcessRows(frame []uint16, from, to int, slopes, work []float32) (Flags, error) {
	l := c.layout
	side, p, nv := l.Side(), l.Pixels, len(l.Valid)
	if from < 0 || to > side || from >= to || from%p != 0 || to%p != 0 {
		return Flags{}, fmt.Errorf("%w: rows [%d, %d), want window boundaries (multiples of %d) within [0, %d]",
			ErrLength, from, to, p, side)
	}
	if len(frame) != (to-from)*side {
		return Flags{}, fmt.Errorf("%w: chunk of %d pixels, want %d (rows %d..%d × %d)", ErrLength, len(frame), (to-from)*side, from, to, side)
	}
	if len(slopes) != 2*nv || len(work) != p*p {
		return Flags{}, fmt.Errorf("%w: %d slopes and %d work, want %d and %d", ErrLength, len(slopes), len(work), 2*nv, p*p)
	}
	var f Flags
	if rf, rt := from/p, to/p; c.rowFirst[rt] > c.rowFirst[rf] {
		c.kern.windows(c, frame, from*side, c.byRow[c.rowFirst[rf]:c.rowFirst[rt]], slopes, work, &f)
	}
	return f, nil
}
