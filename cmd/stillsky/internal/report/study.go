// Package report studies a telemetry recording (stillsky ctl record) with the
// analysis package — pseudo-open-loop modal coefficients, modal variances and
// spectra, the measured rejection against the loop model, the turbulence — and
// writes the page `stillsky report` makes: HTML with PNG plots drawn with
// gonum.org/v1/plot.
package report

import (
	"bytes"
	"errors"
	"fmt"
	"slices"

	"stillsky/analysis"
	"stillsky/controller"
	"stillsky/internal/fits"
	"stillsky/internal/recording"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// minStudyFrames is the shortest run of consecutive frames the modal study takes
// (the turbulence estimate needs 200, the spectra a few segments).
const minStudyFrames = 256

// Study is what the modal analysis of a recording found.
type Study struct {
	// Start and Frames locate the run of consecutive open- or closed-loop frames
	// studied; Closed says the loop was closed through all of it.
	Start, Frames int
	Closed        bool
	// Lag is the median number of frames between a frame and the frame whose
	// command the mirror held during its exposure.
	Lag int
	// Open and Residual are per frame the Zernike coefficients (Noll 2 …, radians at
	// the sensing wavelength) of the pseudo-open-loop slopes and of the measured
	// slopes.
	Open, Residual [][]float64
	// Turbulence estimated from Open (TurbulenceErr says why not).
	Turbulence    analysis.TurbulenceEstimate
	TurbulenceErr error
	// Loop is the loop's temporal model at the recorded gain and leak.
	Loop analysis.Loop
}

// ErrNoStudy is returned when a recording cannot be studied: no interaction
// matrix, or too few consecutive frames.
var ErrNoStudy = errors.New("report: nothing to study")

// NewStudy projects the longest run of consecutive open- or closed-loop frames
// of rec on Zernike modes, reconstructs the pseudo-open-loop coefficients
// (measured slopes plus the interaction matrix times the command the mirror held
// during each exposure) and estimates the turbulence from them.
func NewStudy(rec *recording.Recording) (*Study, error) {
	if rec.ReconstructorFile == nil {
		return nil, fmt.Errorf("%w: the recording holds no reconstructor, so no interaction matrix", ErrNoStudy)
	}
	r, err := controller.ReadReconstructor(bytes.NewReader(rec.ReconstructorFile))
	if err != nil {
		return nil, err
	}
	if r.Interaction == nil {
		return nil, fmt.Errorf("%w: the recorded reconstructor has no interaction matrix", ErrNoStudy)
	}
	cam := rec.Camera
	geom := analysis.SensorGeometry{Subapertures: int(cam.GetSubapertures()), SubapertureSize: cam.GetSubapertureSizeM(),
		PupilDiameter: cam.GetPupilDiameterM(), Wavelength: cam.GetWavelengthM()}
	for _, v := range cam.GetValidSubapertures() {
		geom.Valid = append(geom.Valid, int(v))
	}
	est, err := analysis.NewEstimator(geom, analysis.EstimatorConfig{})
	if err != nil {
		return nil, err
	}
	proj, err := analysis.NewProjector(est.Projection(), r.Interaction)
	if err != nil {
		return nil, err
	}
	start, n := longestRun(rec)
	if n < minStudyFrames {
		return nil, fmt.Errorf("%w: the longest run of consecutive open- or closed-loop frames is %d frames, fewer than %d", ErrNoStudy, n, minStudyFrames)
	}
	st := &Study{Start: start, Closed: true}
	ns, na := int(cam.GetSlopeCount()), int(rec.Mirror.GetActuatorCount())
	zero := make([]float32, na)
	var lags []int
	for i := start; i < start+n; i++ {
		if rec.States[i] != uint8(stillskyv1.LoopState_LOOP_STATE_CLOSED) {
			st.Closed = false
		}
		lag := applyLag(rec, i)
		if i-lag < start {
			continue
		}
		s := rec.Slopes[i*ns : (i+1)*ns]
		o, c := make([]float64, proj.Modes()), make([]float64, proj.Modes())
		proj.Coefficients(s, rec.Commands[(i-lag)*na:(i-lag+1)*na], o)
		proj.Coefficients(s, zero, c)
		st.Open, st.Residual = append(st.Open, o), append(st.Residual, c)
		lags = append(lags, lag)
	}
	st.Frames = len(st.Open)
	slices.Sort(lags)
	st.Lag = lags[len(lags)/2]
	st.Loop = analysis.Loop{Gain: rec.Gain, Leak: rec.Leak, Delay: max(st.Lag, 1), FrameRate: cam.GetFrameRateHz()}
	st.Turbulence, st.TurbulenceErr = est.Estimate(st.Open, cam.GetFrameRateHz(), cam.GetZenithDeg())
	return st, nil
}

// longestRun returns the start and length of the longest run of frames with
// consecutive frame numbers whose loop was open or closed.
func longestRun(rec *recording.Recording) (int, int) {
	bestStart, best, start := 0, 0, 0
	ok := func(i int) bool {
		s := stillskyv1.LoopState(rec.States[i])
		return s == stillskyv1.LoopState_LOOP_STATE_OPEN || s == stillskyv1.LoopState_LOOP_STATE_CLOSED
	}
	for i := 0; i <= rec.Frames; i++ {
		if i < rec.Frames && ok(i) && (i == start || rec.FrameNumbers[i] == rec.FrameNumbers[i-1]+1) {
			continue
		}
		if i-start > best {
			bestStart, best = start, i-start
		}
		start = i
		if i < rec.Frames && !ok(i) {
			start = i + 1
		}
	}
	return bestStart, best
}

// applyLag is how many frames before frame i the command the mirror held during
// its exposure was computed. A lockstep camera says so (its delay). For a
// free-running one it is the newest command sent before the exposure began, a
// frame period before its readout (the transport's delay to the mirror left out);
// the lag of a frame with no such command in the last few is taken as 2, a
// free-running camera's with a loop that answers within a frame.
func applyLag(rec *recording.Recording, i int) int {
	if rec.Camera.GetLockstep() {
		return max(int(rec.Camera.GetDelayFrames()), 1)
	}
	const maxLag = 6
	start := rec.Readout[i] - int64(1e9/rec.Camera.GetFrameRateHz())
	for k := 1; k <= maxLag && k <= i; k++ {
		if rec.FrameNumbers[i]-rec.FrameNumbers[i-k] == int64(k) && rec.Sent[i-k] <= start {
			return k
		}
	}
	return 2
}

// segment is the length, in frames, of the Welch segments of the spectra.
const segment = 256

// Rejection returns the measured rejection: the closed-loop over the
// pseudo-open-loop power summed over the modes, per frequency.
func (st *Study) Rejection() (analysis.Spectrum, error) {
	ol, err := analysis.ModalSpectra(st.Open, st.Loop.FrameRate, segment)
	if err != nil {
		return analysis.Spectrum{}, err
	}
	cl, err := analysis.ModalSpectra(st.Residual, st.Loop.FrameRate, segment)
	if err != nil {
		return analysis.Spectrum{}, err
	}
	return analysis.MeasuredRejection(cl, ol)
}

// TurbulenceHDU is the extension that stores a study's turbulence estimate in a
// recording, after its frames.
func (st *Study) TurbulenceHDU() *fits.HDU {
	h := &fits.HDU{Bitpix: -32}
	k := &h.Header
	te := st.Turbulence
	k.Set("EXTNAME", "TURBULENCE", "estimated from the recorded frames")
	k.Set("R0", te.R0, "[m] Fried parameter at 500 nm, towards the zenith")
	k.Set("R0SENSE", te.R0Sensing, "[m] r0 at the sensing wavelength, line of sight")
	k.Set("L0", te.L0, "[m] outer scale, best fit")
	k.Set("WIND", te.Wind, "[m/s] single frozen-flow layer speed, best fit")
	k.Set("TAU0", te.Tau0, "[s] coherence time 0.314 r0 / wind at 500 nm")
	k.Set("NOISE", te.Noise, "[rad2] mean modal noise variance removed")
	k.Set("NFRAMES", te.Frames, "frames used")
	k.Set("FRAME0", st.Start, "first row of FRAMES studied")
	k.Set("LAG", st.Lag, "[frames] command applied during an exposure")
	k.Set("COMMENT", nil, "Pseudo-open-loop Zernike statistics fitted by Noll's von Karman model")
	return h
}
