package controller

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// CalibrationConfig describes a push–pull calibration of the interaction matrix.
type CalibrationConfig struct {
	// Actuators and Slopes give the geometry (both >= 1).
	Actuators, Slopes int
	// Amplitude is the poke amplitude in metres of mirror surface (finite, > 0).
	// With Hadamard patterns every actuator moves by ±Amplitude in every pattern.
	Amplitude float64
	// FramesPerPattern is the number of frames averaged for each sign of each
	// pattern (>= 1).
	FramesPerPattern int
	// SettleFrames is the number of frames discarded after each change of the
	// applied command (>= 0). It must be at least the loop delay in frames, so that
	// no averaged frame was produced by the previous pattern.
	SettleFrames int
	// Hadamard selects Hadamard patterns (Sylvester order, the next power of two
	// >= Actuators) instead of single-actuator pokes.
	Hadamard bool
}

// Calibrator measures an interaction matrix step by step. The caller owns the
// hardware; the calibrator only says which command to apply and consumes the
// slopes measured with it:
//
//	for !c.Done() {
//		c.Command(cmd)       // the command to apply for the next frame
//		apply(cmd)
//		if err := c.Feed(measure()); err != nil { /* bad frame: not counted */ }
//	}
//	m, err := c.InteractionMatrix()
//
// The sequence is: for each pattern p (a column of the pattern matrix H), the push
// command +a·H[:,p] for SettleFrames+FramesPerPattern frames, then the pull command
// −a·H[:,p] for as many; the first SettleFrames frames of each are discarded and
// the rest averaged. The pattern column is y_p = (mean push − mean pull)/(2a) = M·H[:,p].
// Pokes use H = I. Hadamard patterns use the first Actuators rows of a Sylvester
// Hadamard matrix of order n, whose rows are orthogonal with norm² n, so the
// decoded matrix is M = Y·Hᵀ/n. After Done, Command writes zeros (a flat mirror).
type Calibrator struct {
	cfg      CalibrationConfig
	patterns int // number of patterns
	order    int // Hadamard order (0 for pokes)
	frame    int // frames consumed so far
	total    int
	sum      []float64  // running sum of the current push/pull block, per slope
	y        *mat.Dense // slopes × patterns, decoded columns M·H[:,p]
}

// NewCalibrator validates c and returns a calibrator at its first frame.
func NewCalibrator(c CalibrationConfig) (*Calibrator, error) {
	switch {
	case c.Actuators < 1:
		return nil, fmt.Errorf("controller: calibration actuators %d: must be >= 1", c.Actuators)
	case c.Slopes < 1:
		return nil, fmt.Errorf("controller: calibration slopes %d: must be >= 1", c.Slopes)
	case !(c.Amplitude > 0) || math.IsInf(c.Amplitude, 0):
		return nil, fmt.Errorf("controller: calibration amplitude %g m: must be finite and > 0", c.Amplitude)
	case c.Actuators > maxCalibrationSize:
		return nil, fmt.Errorf("controller: calibration actuators %d: must be <= %d", c.Actuators, maxCalibrationSize)
	case c.Slopes > maxCalibrationSize:
		return nil, fmt.Errorf("controller: calibration slopes %d: must be <= %d", c.Slopes, maxCalibrationSize)
	case c.FramesPerPattern < 1 || c.FramesPerPattern > maxCalibrationFrames:
		return nil, fmt.Errorf("controller: calibration frames per pattern %d: must be in [1, %d]", c.FramesPerPattern, maxCalibrationFrames)
	case c.SettleFrames < 0 || c.SettleFrames > maxCalibrationFrames:
		return nil, fmt.Errorf("controller: calibration settle frames %d: must be in [0, %d]", c.SettleFrames, maxCalibrationFrames)
	}
	cal := &Calibrator{cfg: c, patterns: c.Actuators}
	if c.Hadamard {
		n := 1
		for n < c.Actuators {
			n *= 2
		}
		cal.order, cal.patterns = n, n
	}
	if c.Slopes*cal.patterns > maxCalibrationElements {
		return nil, fmt.Errorf("controller: calibration of %d slopes × %d patterns: more than %d matrix elements", c.Slopes, cal.patterns, maxCalibrationElements)
	}
	cal.sum = make([]float64, c.Slopes)
	cal.total = cal.patterns * 2 * (c.SettleFrames + c.FramesPerPattern)
	cal.y = mat.NewDense(c.Slopes, cal.patterns, nil)
	return cal, nil
}

// Bounds that keep a mistyped geometry from exhausting memory: a 40 m class
// system has about 10⁴ actuators and 10⁵ slopes.
const (
	maxCalibrationSize     = 1 << 20
	maxCalibrationFrames   = 1 << 20
	maxCalibrationElements = 1 << 30 // 8 GB of float64
)

// hadamard returns entry (i, j) of the Sylvester Hadamard matrix: (−1)^popcount(i&j).
func hadamard(i, j int) float64 {
	v := uint(i & j)
	parity := 0
	for v != 0 {
		parity ^= int(v & 1)
		v >>= 1
	}
	if parity == 1 {
		return -1
	}
	return 1
}

// position splits the frame counter into pattern, sign (+1 push, −1 pull) and the
// index of the frame within its push or pull block.
func (c *Calibrator) position() (pattern int, sign float64, inBlock int) {
	block := c.cfg.SettleFrames + c.cfg.FramesPerPattern
	pattern = c.frame / (2 * block)
	rest := c.frame % (2 * block)
	sign = 1
	if rest >= block {
		sign, rest = -1, rest-block
	}
	return pattern, sign, rest
}

// Done reports whether every pattern has been measured.
func (c *Calibrator) Done() bool { return c.frame >= c.total }

// Progress returns the number of frames consumed and the total the calibration needs.
func (c *Calibrator) Progress() (done, total int) { return c.frame, c.total }

// Command writes into cmd (length Actuators, metres of surface) the command to
// apply for the next frame. It returns an error if len(cmd) is wrong.
func (c *Calibrator) Command(cmd []float32) error {
	if len(cmd) != c.cfg.Actuators {
		return fmt.Errorf("controller: calibration command length %d: want %d actuators", len(cmd), c.cfg.Actuators)
	}
	clear(cmd)
	if c.Done() {
		return nil
	}
	p, sign, _ := c.position()
	a := sign * c.cfg.Amplitude
	if c.order == 0 {
		cmd[p] = float32(a)
		return nil
	}
	for i := range cmd {
		cmd[i] = float32(a * hadamard(i, p))
	}
	return nil
}

// Feed consumes the slopes (radians) measured with the command last returned by
// Command. A frame of the wrong length or with a non-finite value is refused with
// an error and not counted: feed the next frame instead. Feeding after Done is an error.
func (c *Calibrator) Feed(slopes []float32) error {
	if c.Done() {
		return fmt.Errorf("controller: calibration already done after %d frames", c.total)
	}
	if len(slopes) != c.cfg.Slopes {
		return fmt.Errorf("controller: calibration slopes length %d: want %d: %w", len(slopes), c.cfg.Slopes, ErrSlopesLength)
	}
	for i, v := range slopes {
		if !isFinite32(v) {
			return fmt.Errorf("controller: calibration slope %d = %g: %w", i, v, ErrNonFinite)
		}
	}
	p, sign, in := c.position()
	c.frame++
	if in < c.cfg.SettleFrames {
		return nil
	}
	for i, v := range slopes {
		c.sum[i] += float64(v)
	}
	if in < c.cfg.SettleFrames+c.cfg.FramesPerPattern-1 {
		return nil
	}
	// End of a push or pull block: fold its mean into the pattern column.
	w := sign / (2 * c.cfg.Amplitude * float64(c.cfg.FramesPerPattern))
	for i, s := range c.sum {
		c.y.Set(i, p, c.y.At(i, p)+w*s)
	}
	clear(c.sum)
	return nil
}

// InteractionMatrix returns the measured interaction matrix M (Slopes × Actuators,
// radians per metre of surface). It is an error to call it before Done.
func (c *Calibrator) InteractionMatrix() (*mat.Dense, error) {
	if !c.Done() {
		return nil, fmt.Errorf("controller: calibration incomplete: %d of %d frames", c.frame, c.total)
	}
	m := mat.NewDense(c.cfg.Slopes, c.cfg.Actuators, nil)
	if c.order == 0 {
		m.Copy(c.y)
		return m, nil
	}
	// Row r of Y·Hᵀ is the Walsh–Hadamard transform of row r of Y (H is
	// symmetric), which the fast transform gives in n·log₂n additions instead of
	// the n² multiply-adds of the product per slope.
	row := make([]float64, c.order)
	inv := 1 / float64(c.order)
	for r := 0; r < c.cfg.Slopes; r++ {
		mat.Row(row, r, c.y)
		walshHadamard(row)
		for a := 0; a < c.cfg.Actuators; a++ {
			m.Set(r, a, row[a]*inv)
		}
	}
	return m, nil
}

// walshHadamard overwrites x (length a power of two) with its Walsh–Hadamard
// transform in Sylvester order, x̂ᵢ = Σⱼ (−1)^popcount(i&j) xⱼ, by the fast
// butterfly (Fino & Algazi, IEEE Trans. Computers C-25 (1976) 1142, *from
// memory*).
func walshHadamard(x []float64) {
	for h := 1; h < len(x); h *= 2 {
		for i := 0; i < len(x); i += 2 * h {
			for j := i; j < i+h; j++ {
				a, b := x[j], x[j+h]
				x[j], x[j+h] = a+b, a-b
			}
		}
	}
}

func isFinite32(v float32) bool {
	return v-v == 0
}
