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
	// dark is the mean frame with the source off, in ADU (bias + dark current
	// + background as captured).
	dark []float32
	// gain is 1/flat per pixel; offset is dark·gain, so that a calibrated
	// pixel is raw·gain − offset.
	gain, offset []float32
	// weight per window pixel (1 for CoG).
	weight    []float32
	method    Method
	threshold float64 // fraction of the window's peak subtracted (>= 0, < 1)
	ref       []float32
	satADU    uint16
	hotRatio  float32
	// windows: first pixel of each valid window.
	start []int
	// xs are the window coordinates minus the centre.
	xs []float32
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
	// Saturation is the raw value at or above which a pixel counts as saturated
	// (1..65535; 0 means 65535).
	Saturation uint16
}

// NewCalibration validates and builds a calibration.
func NewCalibration(l Layout, o Options) (*Calibration, error) {
	if l.Subapertures < 1 || l.Pixels < 2 || l.Pixels > 64 || len(l.Valid) == 0 {
		return nil, fmt.Errorf("%w: layout %d subapertures × %d pixels, %d valid; want >= 1, 2..64, >= 1",
			ErrConfig, l.Subapertures, l.Pixels, len(l.Valid))
	}
	n2 := l.Side() * l.Side()
	seen := make([]bool, l.Subapertures*l.Subapertures)
	c := &Calibration{layout: Layout{l.Subapertures, l.Pixels, append([]int(nil), l.Valid...)},
		dark: make([]float32, n2), gain: make([]float32, n2), weight: make([]float32, l.Pixels*l.Pixels),
		method: o.Method, threshold: o.Threshold, ref: make([]float32, 2*len(l.Valid)),
		satADU: o.Saturation, start: make([]int, len(l.Valid)), xs: make([]float32, l.Pixels)}
	for i, v := range l.Valid {
		if v < 0 || v >= len(seen) || seen[v] {
			return nil, fmt.Errorf("%w: Valid[%d] = %d, want a distinct index in [0, %d)", ErrConfig, i, v, len(seen))
		}
		seen[v] = true
		c.start[i] = (v/l.Subapertures)*l.Pixels*l.Side() + (v%l.Subapertures)*l.Pixels
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
		copy(c.dark, o.Dark)
	}
	for i := range c.gain {
		c.gain[i] = 1
	}
	if o.Flat != nil {
		if len(o.Flat) != n2 {
			return nil, fmt.Errorf("%w: flat of %d pixels, want %d", ErrConfig, len(o.Flat), n2)
		}
		for i, v := range o.Flat {
			if !(v > 0.05 && v < 20) {
				return nil, fmt.Errorf("%w: flat pixel %d = %v, want (0.05, 20)", ErrConfig, i, v)
			}
			c.gain[i] = 1 / v
		}
	}
	c.offset = make([]float32, n2)
	for i := range c.offset {
		c.offset[i] = c.dark[i] * c.gain[i]
	}
	if !(o.Threshold >= 0 && o.Threshold < 1) {
		return nil, fmt.Errorf("%w: threshold %v, want [0, 1)", ErrConfig, o.Threshold)
	}
	ctr := float64(l.Pixels-1) / 2
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
		for y := 0; y < l.Pixels; y++ {
			for x := 0; x < l.Pixels; x++ {
				r2 := float64(c.xs[x])*float64(c.xs[x]) + float64(c.xs[y])*float64(c.xs[y])
				c.weight[y*l.Pixels+x] = float32(math.Exp(-r2 / (2 * o.WeightSigma * o.WeightSigma)))
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
			if math.IsNaN(v) || math.IsInf(v, 0) || math.Abs(v) > float64(l.Pixels) {
				return nil, fmt.Errorf("%w: reference slope %d = %v, want finite within ±%d pixels", ErrConfig, i, v, l.Pixels)
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
	if c.satADU == 0 {
		c.satADU = 65535
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

// isHot reports whether the window's peak pixel k stands alone.
func (c *Calibration) isHot(work []float32, k int, peak float32) bool {
	p := c.layout.Pixels
	x, y := k%p, k/p
	n := float32(0)
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
	base := from * side
	for i, v := range l.Valid {
		r := v / l.Subapertures
		if r*p < from || (r+1)*p > to {
			continue
		}
		st := c.start[i]
		peak := float32(0)
		pk := 0
		var top uint16
		for y := 0; y < p; y++ {
			o := st + y*side
			raw := frame[o-base : o-base+p]
			gn := c.gain[o : o+len(raw)]
			off := c.offset[o : o+len(raw)]
			wk := work[y*p : y*p+len(raw)]
			var rowTop uint16
			for x, a := range raw {
				if a > rowTop {
					rowTop = a
				}
				v := float32(a)*gn[x] - off[x]
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
		thr := float32(c.threshold) * peak
		var s, sx, sy float32
		for y := 0; y < p; y++ {
			wk := work[y*p : y*p+p]
			xs := c.xs[:len(wk)]
			var rs, rx float32
			switch {
			case c.method == CoG && thr > 0:
				for x, v := range wk {
					if v -= thr; v > 0 {
						rs += v
						rx += v * xs[x]
					}
				}
			case c.method == CoG:
				for x, v := range wk {
					rs += v
					rx += v * xs[x]
				}
			default:
				wt := c.weight[y*p : y*p+len(wk)]
				for x, v := range wk {
					if thr > 0 {
						v = max(v-thr, 0)
					}
					v *= wt[x]
					rs += v
					rx += v * xs[x]
				}
			}
			s += rs
			sx += rx
			sy += rs * c.xs[y]
		}
		if s <= 0 {
			f.Dark++
			slopes[2*i], slopes[2*i+1] = 0, 0
			continue
		}
		slopes[2*i] = sx/s - c.ref[2*i]
		slopes[2*i+1] = sy/s - c.ref[2*i+1]
	}
	return f, nil
}
