package bench

import (
	"math"
	"sync"
)

// Stats are the bench's true figures of merit since the last ResetStats.
type Stats struct {
	Frames int
	// ResidualRMS is the mean over frames of the true residual OPD rms, metres.
	ResidualRMS float64
	// Strehl is the long-exposure science Strehl ratio: the peak of the PSF
	// averaged over the sampled frames, over the diffraction-limited peak. It is
	// what a science camera integrating over the window would measure; single-frame
	// peaks of an uncorrected wavefront are speckles and read far higher.
	Strehl float64
	// StrehlSamples is the number of PSFs in the exposure.
	StrehlSamples int
	// BlockStrehl is the long-exposure Strehl ratio of each complete second of
	// frames in the window (frame rate frames, however long they took), in order:
	// how much the figure of a run varies over its length.
	BlockStrehl []float64
	// Contrast is the raw contrast curve of the window's exposure: Contrast[r]
	// is the azimuthal mean of the PSF at r λ/D over its peak (optics.Contrast);
	// nil before the first PSF.
	Contrast []float64
}

type statsAccumulator struct {
	mu           sync.Mutex
	frames       int // frames seen (tick)
	residualN    int // frames whose residual was formed (add)
	sumResidual  float64
	lastResidual float64
	exp          exposure
	// block is the exposure of the current second of frames (blockFrames),
	// blocks the Strehl ratios of the complete ones.
	block       exposure
	blockFrames int
	blocks      []float64
}

// tick counts a frame and closes the one-second block at every blockFrames
// frames, whether or not the frame's residual was formed (free-running, only
// the science camera's samples form it).
func (a *statsAccumulator) tick() {
	a.mu.Lock()
	a.frames++
	if a.frames%a.blockFrames == 0 && a.block.n > 0 {
		a.blocks = append(a.blocks, a.block.strehl())
		a.block.reset()
	}
	a.mu.Unlock()
}

// add adds a frame's true residual rms to the mean.
func (a *statsAccumulator) add(rms float64) {
	a.mu.Lock()
	a.residualN++
	a.sumResidual += rms
	a.lastResidual = rms
	a.mu.Unlock()
}

func (a *statsAccumulator) expose(psf []float64) {
	a.mu.Lock()
	a.exp.add(psf)
	a.block.add(psf)
	a.mu.Unlock()
}

// Latest returns the true residual OPD rms (metres) of the newest frame and the
// Strehl ratio of the last completed one-second exposure.
func (b *Server) Latest() (residualRMS, strehl float64) {
	a := &b.stats
	a.mu.Lock()
	defer a.mu.Unlock()
	return a.lastResidual, math.Float64frombits(b.sci.lastStrehl.Load())
}

// Stats returns the figures since the last ResetStats.
func (b *Server) Stats() Stats {
	a := &b.stats
	a.mu.Lock()
	defer a.mu.Unlock()
	s := Stats{Frames: a.frames, StrehlSamples: a.exp.n, Strehl: a.exp.strehl(), BlockStrehl: append([]float64(nil), a.blocks...),
		Contrast: a.exp.contrastCurve(b.sys.PSFSize())}
	if a.residualN > 0 {
		s.ResidualRMS = a.sumResidual / float64(a.residualN)
	}
	return s
}

// ResetStats starts a new averaging window and science exposure.
func (b *Server) ResetStats() { b.stats.reset() }

func (a *statsAccumulator) reset() {
	a.mu.Lock()
	a.frames, a.residualN, a.sumResidual = 0, 0, 0
	a.exp.reset()
	a.block.reset()
	a.blocks = a.blocks[:0]
	a.mu.Unlock()
}
