package bench

import (
	"fmt"
	"math"
	"math/rand/v2"

	"stillsky/sim/atmosphere"
	"stillsky/sim/dm"
	"stillsky/sim/eye"
	"stillsky/sim/optics"
	"stillsky/sim/scenario"
	"stillsky/sim/wfs"
)

// SciencePad is the zero-padding factor of the science imager: 2 samples the
// PSF at Nyquist, λ/(2D) per pixel.
const SciencePad = 2

// noiseStream separates the sensor's noise stream from the turbulence, which
// uses the scenario seed directly.
const noiseStream = 0x5eed_0f_5105

// fluxStream is the stream of the geometric sensor's flux noise, apart from the
// slopes' so that reporting the flux changes no slope of any earlier run.
const fluxStream = 0xf1_0c_5105

// Aberration is the bench's source of wavefront error in front of the mirror:
// the layered atmosphere (atmosphere.Atmosphere) or an eye (eye.Eye). Advance
// moves it on by dt seconds; OPD writes its wavefront in metres on the pupil
// grid (N*N values). Neither may allocate: they run once per frame.
type Aberration interface {
	Advance(dt float64)
	OPD(out []float64)
}

// viewer is an Aberration that can be seen along other lines of sight than the
// on-axis star at infinity (the atmosphere's layers).
type viewer interface {
	OPDView(out []float64, v atmosphere.View) error
}

// System is the optical bench of one scenario in lockstep: SetCommand sets the
// mirror shape that the following Frame calls see, and each Frame advances the
// turbulence by one frame period and senses the residual
// OPD = atmosphere − 2·surface (reflection doubles the path, common practice).
// A System is not safe for concurrent use.
type System struct {
	sc       *scenario.Scenario
	pupil    *optics.Pupil
	atm      Aberration
	mirror   *dm.Mirror
	sensor   *wfs.ShackHartmann
	imager   *optics.Imager
	noise    *rand.Rand
	period   float64
	cmd      []float32
	dirty    bool // cmd changed since surface was computed
	turb     bool
	frozen   bool
	noiseOn  bool
	atmOPD   []float64
	surface  []float64
	residual []float64
	// The views of the sensor (a laser beacon's cone, or the natural star on the
	// axis) and of the science camera (its offset). With both on the axis
	// sensOPD is atmOPD and sensResidual is residual, and nothing changes from a
	// single line of sight; otherwise the sensor's OPD is taken along its own
	// view, less the atmosphere's tip and tilt for a beacon (see removeTilt).
	sensView, sciView atmosphere.View
	viewer            viewer
	split             bool
	beacon            bool
	sensOPD           []float64
	sensResidual      []float64
	tiltX, tiltY      []float64 // mask-weighted, piston-free x and y over the pupil
	tiltNorm          [3]float64
	noTilt            []float64 // scratch of ResidualRMSNoTilt
	// frameTurb is whether the current frame sees the atmosphere; stale, that
	// its residual has not been formed yet (see ensureResidual).
	frameTurb, stale bool
	// Geometric mode is linear in the OPD, so a frame is measured in two parts:
	// Advance senses the atmosphere alone (with the noise) into atmSlopes, and
	// Observe adds the mirror's part, the sparse response times the clipped
	// command. The mirror never delays a frame by a full surface computation.
	linear    bool
	atmSlopes []float64
	acc       []float64
	response  sparseResponse
	// Science exposure: the PSFs added by Expose.
	psf []float64
	exp exposure
	// tilt is the tip-tilt mirror's correction, radians on the sky per axis:
	// the residual is atmosphere − 2·surface − (tilt_x·x + tilt_y·y). Zero
	// (the default) leaves every frame as it was without a tip-tilt mirror.
	tilt [2]float64
	// flux is the detected photo-electrons of each valid subaperture in the
	// last frame, as the camera reports them; fluxNoise draws the geometric
	// sensor's photon noise on them.
	flux      []float32
	fluxNoise *rand.Rand
	// advanced counts the frames begun: frame k (from 0) is at frame time
	// k·period, when the scenario's clouds pass; trans is the current frame's
	// transmission of the sky.
	advanced uint64
	trans    float64
}

// NewSystem builds the bench for scenario s. Errors name the part that refused
// the scenario.
func NewSystem(s *scenario.Scenario) (*System, error) {
	if s == nil {
		return nil, fmt.Errorf("bench: nil scenario")
	}
	p, err := optics.NewPupil(s.PupilConfig())
	if err != nil {
		return nil, fmt.Errorf("bench: scenario %s: %w", s.Name, err)
	}
	atm, err := newAberration(s, p)
	if err != nil {
		return nil, fmt.Errorf("bench: scenario %s: %w", s.Name, err)
	}
	m, err := dm.New(p, dm.Config{Actuators: s.DM.Actuators, Coupling: s.DM.Coupling,
		Stroke: s.DM.Stroke, Margin: s.DM.Margin})
	if err != nil {
		return nil, fmt.Errorf("bench: scenario %s: %w", s.Name, err)
	}
	w := s.WFS
	g := s.GuideStar
	sensor, err := wfs.New(p, wfs.Config{
		Subapertures: w.Subapertures, Mode: w.Mode, ValidThreshold: w.ValidThreshold,
		Wavelength: g.Wavelength, Magnitude: g.Magnitude, ZeroPoint: g.ZeroPoint,
		Throughput: g.Throughput, FrameRate: s.Loop.FrameRate,
		PixelsPerSubaperture: w.PixelsPerSubaperture, PixelScale: w.PixelScale,
		ReadNoise: w.ReadNoise, Background: w.Background,
		CentroidThreshold: w.CentroidThreshold, Noise: w.Noise,
	})
	if err != nil {
		return nil, fmt.Errorf("bench: scenario %s: %w", s.Name, err)
	}
	im, err := optics.NewImager(p, s.Science.Wavelength, SciencePad)
	if err != nil {
		return nil, fmt.Errorf("bench: scenario %s: %w", s.Name, err)
	}
	n := p.N * p.N
	sys := &System{
		sc: s, pupil: p, atm: atm, mirror: m, sensor: sensor, imager: im,
		noise:  rand.New(rand.NewPCG(uint64(seed(s)), noiseStream)),
		period: 1 / s.Loop.FrameRate,
		cmd:    make([]float32, m.NumValid()),
		turb:   true, noiseOn: w.Noise, trans: 1,
		atmOPD: make([]float64, n), surface: make([]float64, n), residual: make([]float64, n),
		linear:    w.Mode == wfs.Geometric,
		flux:      make([]float32, sensor.NumValid()),
		fluxNoise: rand.New(rand.NewPCG(uint64(seed(s)), fluxStream)),
	}
	sys.sensOPD, sys.sensResidual = sys.atmOPD, sys.residual
	cz := math.Cos(s.Atmosphere.ZenithDeg * math.Pi / 180)
	const arcsec = math.Pi / (180 * 3600)
	sys.sciView = atmosphere.View{OffsetX: s.Science.OffsetX * arcsec, OffsetY: s.Science.OffsetY * arcsec}
	if g := s.LaserGuideStar; g != nil {
		sys.sensView = atmosphere.View{BeaconHeight: g.Height / cz}
		sys.beacon = true
	}
	if sys.beacon || sys.sciView != (atmosphere.View{}) {
		v, ok := atm.(viewer)
		if !ok {
			return nil, fmt.Errorf("bench: scenario %s: laser_guide_star and science offsets need the atmosphere as the aberration source", s.Name)
		}
		sys.viewer = v
		sys.split = true
		sys.sensOPD, sys.sensResidual = make([]float64, n), make([]float64, n)
	}
	sys.tiltX, sys.tiltY, sys.noTilt = make([]float64, n), make([]float64, n), make([]float64, n)
	sys.tiltNorm = tiltModes(p, sys.tiltX, sys.tiltY)
	if sys.linear {
		sys.atmSlopes = make([]float64, sensor.NumSlopes())
		sys.acc = make([]float64, sensor.NumSlopes())
		sys.response = newSparseResponse(m, sensor, n)
	}
	return sys, nil
}

// newAberration builds the scenario's aberration source: its eye when it has
// one (refused if the beacon's exposure is above the configured limit),
// otherwise its layered atmosphere.
func newAberration(s *scenario.Scenario, p *optics.Pupil) (Aberration, error) {
	if e := s.Eye; e != nil {
		if err := e.CheckExposure(); err != nil {
			return nil, err
		}
		return eye.New(eye.Config{Seed: e.Seed, AccommodationRMS: e.AccommodationRMS,
			Low: e.AccommodationLow, High: e.AccommodationHigh, Step: 1 / s.Loop.FrameRate}, p)
	}
	layers := make([]atmosphere.LayerConfig, len(s.Atmosphere.Layers))
	for i, l := range s.Atmosphere.Layers {
		layers[i] = atmosphere.LayerConfig{Altitude: l.Altitude, Fraction: l.Fraction,
			WindSpeed: l.WindSpeed, WindDirectionDeg: l.WindDirectionDeg}
	}
	return atmosphere.New(atmosphere.Config{R0: s.Atmosphere.R0, L0: s.Atmosphere.L0,
		ZenithDeg: s.Atmosphere.ZenithDeg, Layers: layers, Seed: s.Atmosphere.Seed}, p)
}

// sparseResponse holds, per valid actuator, the slopes that a unit command
// (1 m of surface) produces: reflection doubles the path and the residual is
// atmosphere − 2·surface, so each column is the geometric measurement of
// −2·influence. Columns are stored sparse: an influence function reaches only
// the subapertures within its truncation radius.
type sparseResponse struct {
	start []int32 // column k is index[start[k]:start[k+1]], value[...]
	index []int32
	value []float64
}

func newSparseResponse(m *dm.Mirror, sensor *wfs.ShackHartmann, samples int) sparseResponse {
	n := m.NumValid()
	infl := make([]float64, samples)
	col := make([]float64, sensor.NumSlopes())
	r := sparseResponse{start: make([]int32, n+1)}
	for k := range n {
		m.Influence(k, infl)
		for i := range infl {
			infl[i] *= -2
		}
		sensor.SenseGeometric(infl, nil, col)
		for i, v := range col {
			if v != 0 {
				r.index = append(r.index, int32(i))
				r.value = append(r.value, v)
			}
		}
		r.start[k+1] = int32(len(r.index))
	}
	return r
}

// addTo adds the response to the clipped command c to acc.
func (r *sparseResponse) addTo(m *dm.Mirror, cmd []float32, acc []float64) {
	for k, c := range cmd {
		v := m.Clip(c)
		if v == 0 {
			continue
		}
		lo, hi := r.start[k], r.start[k+1]
		idx, val := r.index[lo:hi], r.value[lo:hi]
		for j, i := range idx {
			acc[i] += v * val[j]
		}
	}
}

// seed is the scenario's random seed: its eye's or its atmosphere's.
func seed(s *scenario.Scenario) int64 {
	if s.Eye != nil {
		return s.Eye.Seed
	}
	return s.Atmosphere.Seed
}

// Scenario returns the scenario the system was built from.
func (s *System) Scenario() *scenario.Scenario { return s.sc }

// NumSlopes returns the length of a slope vector (2 per valid subaperture).
func (s *System) NumSlopes() int { return s.sensor.NumSlopes() }

// NumActuators returns the length of a command (valid actuators).
func (s *System) NumActuators() int { return s.mirror.NumValid() }

// FrameTime returns the frame time of the current frame, seconds: frames begun
// before it × the frame period (the clock of the scenario's clouds).
func (s *System) FrameTime() float64 {
	return float64(max(s.advanced, 1)-1) * s.period
}

// Transmission returns the fraction of the guide star's light the scenario's
// clouds let through in the current frame (1 on a clear sky and on the
// calibration source).
func (s *System) Transmission() float64 { return s.trans }

// FramePeriod returns the time between frames in seconds, 1/frame rate.
func (s *System) FramePeriod() float64 { return s.period }

// SetCommand copies cmd (metres of surface per valid actuator; the mirror clips
// it to ±stroke) as the mirror shape seen by subsequent Frame calls. It panics
// if len(cmd) != NumActuators.
func (s *System) SetCommand(cmd []float32) {
	if len(cmd) != len(s.cmd) {
		panic(fmt.Sprintf("bench: SetCommand: %d values, want %d", len(cmd), len(s.cmd)))
	}
	copy(s.cmd, cmd)
	s.dirty = true
}

// SetTurbulence switches the atmosphere on or off. Off, frames see only the
// mirror, as with a calibration source; the layers do not move.
func (s *System) SetTurbulence(on bool) { s.turb = on }

// SetFrozen stops (true) or restarts (false) the layers' motion while the
// turbulence stays in front of the sensor: frames then see the same wavefront,
// which takes the servo lag out of a closed loop.
func (s *System) SetFrozen(on bool) { s.frozen = on }

// SetNoise switches sensor noise on or off (it starts as the scenario says).
func (s *System) SetNoise(on bool) { s.noiseOn = on }

// Frame advances the turbulence by one frame period, forms the residual
// OPD = atmosphere − 2·surface and writes its slopes (radians, wfs layout) into
// slopes: Advance, then Observe with the command SetCommand set. It panics if
// len(slopes) != NumSlopes and allocates nothing.
func (s *System) Frame(slopes []float32) {
	s.Advance()
	s.observe(slopes)
}

// Advance starts the next frame: it moves the turbulence on by one frame
// period (when it is on) and, in geometric mode, measures the atmosphere alone
// with the frame's sensor noise. None of it depends on the mirror, so a
// free-running bench does it ahead of the command the frame will see.
func (s *System) Advance() {
	s.frameTurb = s.turb
	// Clouds dim the star on the sky, not the instrument's calibration source.
	s.trans = 1
	if s.turb && len(s.sc.Clouds) > 0 {
		s.trans = s.sc.Clouds.Transmission(float64(s.advanced) * s.period)
	}
	s.advanced++
	s.sensor.SetTransmission(s.trans)
	if s.turb {
		if !s.frozen {
			s.atm.Advance(s.period)
		}
		if !s.split {
			s.atm.OPD(s.atmOPD)
		} else {
			// The views were validated by the scenario's ranges; an error here is a bug.
			if err := s.viewer.OPDView(s.atmOPD, s.sciView); err != nil {
				panic(err)
			}
			if err := s.viewer.OPDView(s.sensOPD, s.sensView); err != nil {
				panic(err)
			}
			if s.beacon {
				s.removeTilt(s.sensOPD)
			}
		}
	}
	if !s.linear {
		return
	}
	var rng *rand.Rand
	if s.noiseOn {
		rng = s.noise
	}
	if !s.frameTurb {
		clear(s.sensOPD) // a calibration source: flat, but the sensor's noise stays
	}
	s.sensor.SenseGeometric(s.sensOPD, rng, s.atmSlopes)
	// A geometric sensor has no pixels: its flux is the mean count with the
	// photon noise of a Poisson count, √N (normal approximation).
	for k, n := range s.sensor.Flux() {
		if s.noiseOn {
			n += math.Sqrt(n) * s.fluxNoise.NormFloat64()
		}
		s.flux[k] = float32(n)
	}
}

// Observe completes the frame Advance started with the mirror shaped by cmd
// (metres of surface per valid actuator, clipped to ±stroke), which becomes the
// command SetCommand would set, and writes its slopes into slopes. In
// geometric mode this is the sparse mirror response added to the atmosphere's
// slopes, which equals sensing the residual OPD to float64 rounding; in
// diffractive mode it forms the residual and images every subaperture. It
// panics if len(cmd) != NumActuators or len(slopes) != NumSlopes, and
// allocates nothing.
func (s *System) Observe(cmd []float32, slopes []float32) {
	s.SetCommand(cmd)
	s.observe(slopes)
}

// observe completes the frame with the command SetCommand last set.
func (s *System) observe(slopes []float32) {
	if len(slopes) != s.sensor.NumSlopes() {
		panic(fmt.Sprintf("bench: Observe: %d slopes, want %d", len(slopes), s.sensor.NumSlopes()))
	}
	s.stale = true
	if !s.linear {
		s.ensureResidual()
		var rng *rand.Rand
		if s.noiseOn {
			rng = s.noise
		}
		s.sensor.Sense(s.sensResidual, rng, slopes)
		for k, n := range s.sensor.Flux() {
			s.flux[k] = float32(n)
		}
		return
	}
	copy(s.acc, s.atmSlopes)
	s.response.addTo(s.mirror, s.cmd, s.acc)
	if s.tilt != [2]float64{} {
		// A plane's mean gradient over any subaperture is the plane's slope.
		for k := 0; k < len(s.acc); k += 2 {
			s.acc[k] -= s.tilt[0]
			s.acc[k+1] -= s.tilt[1]
		}
	}
	for i, v := range s.acc {
		slopes[i] = float32(v)
	}
}

// ensureResidual forms the residual OPD of the current frame if it has not
// been formed since Observe; in geometric mode only the figures of merit need it.
func (s *System) ensureResidual() {
	if !s.stale {
		return
	}
	s.stale = false
	if s.dirty {
		s.mirror.Surface(s.cmd, s.surface)
		s.dirty = false
	}
	if s.frameTurb {
		for i, a := range s.atmOPD {
			s.residual[i] = a - 2*s.surface[i]
		}
		if s.split {
			for i, a := range s.sensOPD {
				s.sensResidual[i] = a - 2*s.surface[i]
			}
		}
	} else {
		for i, h := range s.surface {
			s.residual[i] = -2 * h
		}
		if s.split {
			copy(s.sensResidual, s.residual)
		}
	}
	if s.tilt == [2]float64{} {
		return
	}
	n := s.pupil.N
	for iy := range n {
		y := s.pupil.Coord(iy)
		for ix := range n {
			p := s.tilt[0]*s.pupil.Coord(ix) + s.tilt[1]*y
			s.residual[iy*n+ix] -= p
			if s.split {
				s.sensResidual[iy*n+ix] -= p
			}
		}
	}
}

// tiltModes writes into x and y the pupil coordinates of the lit samples, less
// their mask-weighted means (0 outside the pupil), and returns Σm·x², Σm·y² and
// Σm·x·y for the least-squares fit of removeTilt.
func tiltModes(p *optics.Pupil, x, y []float64) [3]float64 {
	n := p.N
	var sw, sx, sy float64
	for iy := 0; iy < n; iy++ {
		for ix := 0; ix < n; ix++ {
			m := p.Mask[iy*n+ix]
			sw += m
			sx += m * float64(ix)
			sy += m * float64(iy)
		}
	}
	mx, my := sx/sw, sy/sw
	var nrm [3]float64
	for iy := 0; iy < n; iy++ {
		for ix := 0; ix < n; ix++ {
			i := iy*n + ix
			if m := p.Mask[i]; m != 0 {
				x[i] = (float64(ix) - mx) * p.Scale
				y[i] = (float64(iy) - my) * p.Scale
				nrm[0] += m * x[i] * x[i]
				nrm[1] += m * y[i] * y[i]
				nrm[2] += m * x[i] * y[i]
			}
		}
	}
	return nrm
}

// removeTilt subtracts from opd its least-squares tip and tilt over the pupil
// (weighted by the mask). A laser beacon's light goes up and comes back down
// through the same air: the atmosphere's tilt moves the beacon on the sky by the
// same angle as it moves the returning image, so the sensor never sees it
// (common practice). The mirror's tilt, in the return path only, stays seen.
func (s *System) removeTilt(opd []float64) {
	var bx, by float64
	for i, m := range s.pupil.Mask {
		if m != 0 {
			bx += m * s.tiltX[i] * opd[i]
			by += m * s.tiltY[i] * opd[i]
		}
	}
	xx, yy, xy := s.tiltNorm[0], s.tiltNorm[1], s.tiltNorm[2]
	det := xx*yy - xy*xy
	ax, ay := (bx*yy-by*xy)/det, (by*xx-bx*xy)/det
	for i := range opd {
		opd[i] -= ax*s.tiltX[i] + ay*s.tiltY[i]
	}
}

// ResidualRMSNoTilt returns the rms over the pupil of the residual OPD of the
// last frame with its piston, tip and tilt removed (least squares over the
// pupil), in metres: the high-order part, which a laser beacon's sensor alone
// must correct. It allocates nothing.
func (s *System) ResidualRMSNoTilt() float64 {
	s.ensureResidual()
	copy(s.noTilt, s.residual)
	s.removeTilt(s.noTilt)
	return optics.ResidualRMS(s.pupil, s.noTilt)
}

// SetTipTilt sets the tip-tilt mirror's correction (tx, ty), radians of tilt
// on the sky per axis, seen from the next Observe or Frame on: the residual
// becomes atmosphere − 2·surface − (tx·x + ty·y), and every subaperture's
// slopes lose (tx, ty). It panics on a non-finite value.
func (s *System) SetTipTilt(tx, ty float64) {
	if math.IsNaN(tx) || math.IsInf(tx, 0) || math.IsNaN(ty) || math.IsInf(ty, 0) {
		panic(fmt.Sprintf("bench: SetTipTilt(%g, %g): must be finite", tx, ty))
	}
	s.tilt = [2]float64{tx, ty}
}

// ResidualTilt returns the mean gradient (G-tilt) of the last frame's residual
// OPD over the lit pupil, radians per axis: what a natural-star tilt sensor on
// axis measures. It allocates nothing.
func (s *System) ResidualTilt() (tx, ty float64) {
	s.ensureResidual()
	n, m := s.pupil.N, s.pupil.Mask
	var gx, gy float64
	var nx, ny int
	for iy := range n {
		for ix := range n {
			i := iy*n + ix
			if m[i] == 0 {
				continue
			}
			if ix+1 < n && m[i+1] != 0 {
				gx += s.residual[i+1] - s.residual[i]
				nx++
			}
			if iy+1 < n && m[i+n] != 0 {
				gy += s.residual[i+n] - s.residual[i]
				ny++
			}
		}
	}
	if nx > 0 {
		tx = gx / (float64(nx) * s.pupil.Scale)
	}
	if ny > 0 {
		ty = gy / (float64(ny) * s.pupil.Scale)
	}
	return tx, ty
}

// ResidualRMS returns the rms over the pupil of the residual OPD of the last
// frame, piston removed, in metres.
func (s *System) ResidualRMS() float64 {
	s.ensureResidual()
	return optics.ResidualRMS(s.pupil, s.residual)
}

// Strehl returns the science Strehl ratio of the last frame's residual at
// Science.Wavelength: brightest PSF pixel over the diffraction-limited peak. It
// costs a padded FFT of the pupil: call it on a subset of frames.
func (s *System) Strehl() float64 {
	s.ensureResidual()
	return s.imager.Strehl(s.residual)
}

// PSF writes the science point-spread function of the last frame's residual
// into out (PSFSize()² values, diffraction-limited peak 1, zero frequency at
// the centre pixel).
func (s *System) PSF(out []float64) {
	s.ensureResidual()
	s.imager.PSF(s.residual, out)
}

// Expose adds the PSF of the last frame's residual to the science exposure,
// as a camera integrating over the frames it is called on (one padded FFT).
func (s *System) Expose() {
	if s.exp.sum == nil {
		s.psf = make([]float64, s.imager.Size()*s.imager.Size())
		s.exp.sum = make([]float64, len(s.psf))
	}
	s.PSF(s.psf)
	s.exp.add(s.psf)
}

// ExposureStrehl returns the Strehl ratio of the science exposure: the peak of
// the mean PSF over the Expose calls since the last ResetExposure, against the
// diffraction-limited peak. It is the long-exposure Strehl, which averages the
// speckle that makes single-frame peaks of an uncorrected wavefront high. It
// returns 0 before the first Expose.
func (s *System) ExposureStrehl() float64 { return s.exp.strehl() }

// ExposureFrames returns the number of frames in the science exposure.
func (s *System) ExposureFrames() int { return s.exp.n }

// Exposure writes the mean PSF of the science exposure into out (PSFSize()²
// values, diffraction-limited peak 1); all zero before the first Expose.
func (s *System) Exposure(out []float64) {
	if len(out) != s.imager.Size()*s.imager.Size() {
		panic(fmt.Sprintf("bench: Exposure: %d values, want %d", len(out), s.imager.Size()*s.imager.Size()))
	}
	clear(out)
	for i, v := range s.exp.sum {
		out[i] = v / float64(s.exp.n)
	}
}

// ResetExposure starts a new science exposure.
func (s *System) ResetExposure() { s.exp.reset() }

// PSFSize returns the side of the science PSF in pixels.
func (s *System) PSFSize() int { return s.imager.Size() }

// Residual returns the residual OPD of the last frame on the pupil grid
// (metres). The slice is the system's own: copy it to keep it.
func (s *System) Residual() []float64 {
	s.ensureResidual()
	return s.residual
}

// SensorAtmosphere returns the turbulence OPD the wavefront sensor sees in the
// current frame: Atmosphere itself for an on-axis natural star, otherwise the
// OPD along the beacon's cone less its tip and tilt. Read-only, valid until the
// next Advance.
func (s *System) SensorAtmosphere() []float64 { return s.sensOPD }

// Atmosphere returns the turbulence OPD of the current frame on the pupil grid
// (metres) while the turbulence is on. The slice is the system's own:
// copy it to keep it.
func (s *System) Atmosphere() []float64 { return s.atmOPD }

// Flux returns the detected photo-electrons of each valid subaperture in the
// last frame (background subtracted; in diffractive mode its pixels' sum after
// noise, in geometric mode the mean count with Poisson noise), in the order of
// the slopes' subapertures. The slice is the system's own, valid until the next
// frame.
func (s *System) Flux() []float32 { return s.flux }

// Sensor returns the wavefront sensor.
func (s *System) Sensor() *wfs.ShackHartmann { return s.sensor }

// Mirror returns the deformable mirror.
func (s *System) Mirror() *dm.Mirror { return s.mirror }

// Pupil returns the sampled pupil shared by all parts.
func (s *System) Pupil() *optics.Pupil { return s.pupil }
