package scenario

import (
	"math"

	"stillsky/sim/optics"
)

// Default is the name of the built-in scenario used when none is given.
const Default = "default"

// Wavefront-sensor modes.
const (
	// ModeGeometric measures the mean OPD gradient over each subaperture directly.
	ModeGeometric = "geometric"
	// ModeDiffractive forms an FFT spot per subaperture and centroids it.
	ModeDiffractive = "diffractive"
)

// Scenario is a validated description of a simulated adaptive-optics system.
// Every field has been range-checked by Parse; optional YAML keys have been
// replaced by their documented defaults.
type Scenario struct {
	// Name is a short identifier (YAML "name", required).
	Name string
	// Description is free text (YAML "description", optional, default "").
	Description string
	Telescope   Telescope
	Atmosphere  Atmosphere
	GuideStar   GuideStar
	// LaserGuideStar, when not nil, makes the wavefront sensor look at a laser
	// beacon instead of the natural guide star (YAML section "laser_guide_star",
	// optional; absent, the sensor looks at the natural star at infinity).
	LaserGuideStar *LaserGuideStar
	// TipTilt, when not nil, adds a natural-star tip-tilt sensor (a quad cell)
	// and a tip-tilt mirror to the bench, and sets the daemon's tip-tilt loop
	// (YAML section "tip_tilt", optional).
	TipTilt *TipTilt
	WFS     WFS
	DM      DM
	Loop    Loop
	Science Science
	// Eye, when not nil, is the aberration source in place of Atmosphere (whose
	// fields are then zero): the retinal-imaging scenarios (see Eye).
	Eye *Eye
	// Clouds are the cloud passages in front of the guide star (YAML list
	// "clouds", optional; absent, a clear night). See Cloud.
	Clouds Clouds
	// Supervisor, when not nil, sets the thresholds of the unattended-operation
	// supervisor for `stillsky demo --autonomous` (YAML section "supervisor",
	// optional; absent, its defaults). See Supervisor.
	Supervisor *Supervisor
}

// Telescope is the entrance pupil and its sampling (YAML section "telescope").
type Telescope struct {
	// Name and Site are descriptive labels (optional, default "").
	Name, Site string
	// Diameter of the primary in metres (diameter_m, required, (0, 100]).
	Diameter float64
	// Obstruction is the central obstruction diameter as a fraction of Diameter
	// (obstruction, required, [0, 0.9]).
	Obstruction float64
	// Spiders is the number of support vanes (spiders, optional, default 0, [0, 16]).
	Spiders int
	// SpiderWidth is the vane width in metres (spider_width_m, optional, default 0,
	// [0, diameter_m/10]).
	SpiderWidth float64
	// PupilSamples is the number of wavefront samples across the diameter
	// (pupil_samples, required, [8, 4096], a multiple of wfs.subapertures with at
	// least 2 samples per subaperture).
	PupilSamples int
}

// Atmosphere is the turbulence profile (YAML section "atmosphere").
type Atmosphere struct {
	// R0 is the Fried parameter in metres at 500 nm towards the zenith (r0_m,
	// required, (0, 5]).
	R0 float64
	// L0 is the von Kármán outer scale in metres (l0_m, required, (0, 1e6]).
	L0 float64
	// ZenithDeg is the zenith angle of the line of sight in degrees (zenith_deg,
	// optional, default 0, [0, 75]).
	ZenithDeg float64
	// Seed makes the turbulence reproducible (seed, optional, default 1).
	Seed int64
	// Layers are the frozen-flow layers (layers, required, 1 to 16 entries,
	// fractions summing to 1 within 1e-6).
	Layers []Layer
}

// Layer is one turbulent layer.
type Layer struct {
	// Altitude above the telescope in metres (altitude_m, required, [0, 30000]).
	Altitude float64
	// Fraction of the total Cn² integral (fraction, required, (0, 1]).
	Fraction float64
	// WindSpeed in metres per second (wind_speed_m_per_s, required, [0, 100]).
	WindSpeed float64
	// WindDirectionDeg is the direction the layer moves towards, degrees
	// counter-clockwise from +x (wind_direction_deg, required, [-360, 360]).
	WindDirectionDeg float64
}

// GuideStar is the wavefront-sensing source (YAML section "guide_star").
type GuideStar struct {
	// Magnitude in the sensing band (magnitude, required, [-2, 25]).
	Magnitude float64
	// Wavelength of the sensing band in metres (wavelength_m, required, [3e-7, 5e-6]).
	Wavelength float64
	// ZeroPoint is the photon flux of a magnitude-0 star in photons s⁻¹ m⁻²
	// (zero_point_photons_per_s_per_m2, required, (0, 1e13]).
	ZeroPoint float64
	// Throughput from the top of the atmosphere to detected photo-electrons
	// (throughput, required, (0, 1]).
	Throughput float64
}

// LGSCaution is the caution that help texts show beside the lgs scenario.
const LGSCaution = "the lgs scenario simulates a laser guide star: a real laser pointed at the sky needs coordination with the aviation authority and a laser-safety review (ANSI Z136.1, ANSI Z136.6, IEC 60825-1), and local rules govern"

// LaserGuideStar is a sodium laser beacon (YAML section "laser_guide_star"). The
// sensor sees the layers through the beacon's cone (sim/atmosphere, View) and
// none of the atmosphere's tip and tilt: the beam goes up and comes back down
// through the same air, so its image does not move with the atmospheric tilt.
// The guide_star section still sets the beacon's brightness in the sensing band.
//
// SAFETY: a laser pointed at the sky needs coordination with the aviation
// authority and a laser-safety review before it is switched on (ANSI Z136.1 and
// Z136.6, IEC 60825-1); local rules govern. The simulator emits no light.
type LaserGuideStar struct {
	// Height of the centre of the sodium layer above the telescope, vertical, in
	// metres (height_m, required, [20000, 200000]; about 90 km, common practice).
	Height float64
	// Thickness of the sodium layer in metres (thickness_m, required, [0, 50000];
	// about 10 km, common practice). It elongates the spots of subapertures away
	// from the launch point; the slope modes carry it for the record.
	Thickness float64
	// LaunchX and LaunchY are the launch telescope's position in the pupil plane,
	// metres from the pupil's centre (launch_x_m, launch_y_m, optional, default 0,
	// behind the secondary; [-diameter_m, diameter_m]).
	LaunchX, LaunchY float64
}

// TipTilt is the natural-star tip-tilt sensor, the tip-tilt mirror and their
// loop (YAML section "tip_tilt"). The sensor is a quad cell on a natural star
// in the science direction; it counts photons with the guide_star section's
// zero point and throughput over the whole pupil, and its spot is the seeing
// disc at its wavelength (FWHM 0.98 λ/r0, common practice). The tip-tilt
// mirror is in the common path: the laser sensor sees its tilt, the natural
// star sees the residual of both mirrors.
type TipTilt struct {
	// Magnitude of the natural star in the tip-tilt sensor's band (magnitude,
	// required, [-2, 22]).
	Magnitude float64
	// Wavelength of the tip-tilt sensor's band in metres (wavelength_m,
	// optional, default 8e-7, [3e-7, 5e-6]).
	Wavelength float64
	// FrameRate of the tip-tilt sensor in hertz (frame_rate_hz, required,
	// loop.frame_rate_hz divided by a whole number).
	FrameRate float64
	// ReadNoise per quadrant, electrons rms (read_noise_e, optional, default 0,
	// [0, 100]).
	ReadNoise float64
	// Gain of the tip-tilt loop's integrator (gain, required, [0, 2)).
	Gain float64
	// OffloadGain is the fraction of the deformable mirror's tip-tilt moved to
	// the tip-tilt mirror each frame (offload_gain, required, (0, 1]).
	OffloadGain float64
	// Stroke of the tip-tilt mirror, radians of tilt on the sky per axis, ±
	// (stroke_rad, required, (0, 1e-3]).
	Stroke float64
}

// TipTiltPhotons returns the natural star's detected photo-electrons per
// tip-tilt frame over the whole pupil: N = ZP·10^(−0.4 m)·throughput·A/rate,
// A = π/4·D²·(1 − ε²) for the central obstruction ε.
func (s *Scenario) TipTiltPhotons() float64 {
	t, g, d := s.TipTilt, s.GuideStar, s.Telescope.Diameter
	area := math.Pi / 4 * d * d * (1 - s.Telescope.Obstruction*s.Telescope.Obstruction)
	return g.ZeroPoint * math.Pow(10, -0.4*t.Magnitude) * g.Throughput * area / t.FrameRate
}

// TipTiltSpotSigma returns the rms width, radians per axis, of the natural
// star's seeing disc on the quad cell: FWHM = 0.98 λ/r0(λ) with
// r0(λ) = r0·(λ/500 nm)^(6/5)·cos(z)^(3/5) (common practice), σ = FWHM/2.355.
func (s *Scenario) TipTiltSpotSigma() float64 {
	l := s.TipTilt.Wavelength
	r0 := s.Atmosphere.R0 * math.Pow(l/500e-9, 1.2) * math.Pow(math.Cos(s.Atmosphere.ZenithDeg*math.Pi/180), 0.6)
	return 0.98 * l / r0 / (2 * math.Sqrt(2*math.Ln2))
}

// SpotSigmaPixels returns the rms width in pixels of a pixel-mode spot
// (wfs.pixels present): FWHM λ/d for a subaperture of width d smaller than
// r0(λ) = r0·(λ/500 nm)^(6/5)·cos(z)^(3/5), else the seeing disc 0.98 λ/r0(λ)
// (common practice), σ = FWHM/2.355, over the pixel scale.
func (s *Scenario) SpotSigmaPixels() float64 {
	l := s.GuideStar.Wavelength
	fwhm := l / s.SubapertureSize()
	if a := s.Atmosphere; a.R0 > 0 {
		r0 := a.R0 * math.Pow(l/500e-9, 1.2) * math.Pow(math.Cos(a.ZenithDeg*math.Pi/180), 0.6)
		fwhm = max(fwhm, 0.98*l/r0)
	}
	return fwhm / (2 * math.Sqrt(2*math.Ln2)) / s.WFS.Pixels.PixelScale
}

// TipTiltRatio returns the wavefront-sensor frames per tip-tilt frame.
func (s *Scenario) TipTiltRatio() int {
	return int(math.Round(s.Loop.FrameRate / s.TipTilt.FrameRate))
}

// WFS is the Shack–Hartmann sensor (YAML section "wfs").
type WFS struct {
	// Subapertures across the pupil (subapertures, required, [1, 256]).
	Subapertures int
	// Mode is ModeGeometric or ModeDiffractive (mode, required).
	Mode string
	// ValidThreshold is the minimum illuminated fraction of a valid subaperture
	// (valid_threshold, optional, default 0.5, (0, 1]).
	ValidThreshold float64
	// PixelsPerSubaperture across each subaperture image in diffractive mode
	// (pixels_per_subaperture, optional, default 2 × pupil samples per subaperture,
	// i.e. the whole field the sampled pupil represents, [2, 64]).
	PixelsPerSubaperture int
	// PixelScale in radians per pixel in diffractive mode (pixel_scale_rad,
	// optional, default λ_gs/(2d), Nyquist for subaperture width d, (0, 1e-3]).
	PixelScale float64
	// ReadNoise in electrons rms per pixel (read_noise_e, optional, default 0, [0, 100]).
	ReadNoise float64
	// Background in electrons per pixel per frame (background_e_per_pixel,
	// optional, default 0, [0, 1e6]).
	Background float64
	// CentroidThreshold as a fraction of the brightest pixel of each subaperture
	// image, subtracted before the centre of gravity (centroid_threshold,
	// optional, default 0, [0, 1)).
	CentroidThreshold float64
	// Noise turns photon, read and background noise on (noise, optional, default true).
	Noise bool
	// Pixels, when present (subsection pixels, optional), puts the camera in
	// pixel mode: it streams raw detector frames rendered by sim/detector, and
	// the loop daemon centroids them. Absent (nil), the camera streams slopes.
	Pixels *Pixels
}

// Centroid methods of wfs.pixels.centroid.
const (
	CentroidCoG  = "cog"
	CentroidWCoG = "wcog"
)

// Pixels is the wavefront sensor's detector in pixel mode (YAML subsection
// "wfs.pixels"). The spots are Gaussians of the subaperture's diffraction
// width λ/d or, when the subaperture is larger than r0 at the sensing
// wavelength, of the seeing disc 0.98 λ/r0 (FWHM; common practice), elongated
// along the line to the launch point when the scenario has a laser_guide_star.
type Pixels struct {
	// PixelsPerSubaperture across each subaperture window
	// (pixels_per_subaperture, required, [2, 64]).
	PixelsPerSubaperture int
	// PixelScale in radians per pixel (pixel_scale_rad, required, (0, 1e-3]).
	PixelScale float64
	// ReadNoise in electrons rms per pixel (read_noise_e, required, [0, 100]).
	ReadNoise float64
	// Background in electrons per pixel per frame (background_e_per_pixel,
	// optional, default 0, [0, 1e5]).
	Background float64
	// Bias in ADU added to every pixel (bias_adu, optional, default 100, [0, 60000]).
	Bias float64
	// Dark current in electrons per pixel per frame (dark_e_per_pixel,
	// optional, default 0, [0, 1e4]).
	Dark float64
	// FlatRMS is the rms of the fixed pixel-to-pixel response (flat_rms,
	// optional, default 0, [0, 0.3]); FlatSeed draws its pattern (flat_seed,
	// optional, default 1).
	FlatRMS  float64
	FlatSeed int64
	// FullWell in electrons (full_well_e, required, [100, 1e7]); pixels clip there.
	FullWell float64
	// Gain in electrons per ADU (gain_e_per_adu, optional, default 1, (0, 1000]).
	Gain float64
	// Centroid is CentroidCoG or CentroidWCoG (centroid, required).
	Centroid string
	// Threshold, a fraction of each window's brightest pixel subtracted before
	// the centroid (threshold, optional, default 0, [0, 1)).
	Threshold float64
	// WeightSigma is the rms width in pixels of the weighted centre of
	// gravity's Gaussian (weight_sigma_px, optional, default the spot's rms
	// width, (0, 64]; only with centroid wcog).
	WeightSigma float64
}

// DM is the deformable mirror (YAML section "dm").
type DM struct {
	// Actuators across the mirror; Fried geometry requires wfs.subapertures+1
	// (actuators, required).
	Actuators int
	// Coupling is the influence function's value at the neighbouring actuator
	// (coupling, required, [0.01, 0.6]).
	Coupling float64
	// Stroke is the surface stroke limit in metres, ± (stroke_m, required, (0, 1e-4]).
	Stroke float64
	// Margin in actuator pitches beyond the pupil radius within which actuators
	// are kept (margin_pitches, optional, default 0.75, [0, 3]).
	Margin float64
}

// Loop is the timing of the control loop (YAML section "loop").
type Loop struct {
	// FrameRate of the wavefront sensor in hertz (frame_rate_hz, required, (0, 1e5]).
	FrameRate float64
	// DelayFrames between a frame and the frame that sees its command
	// (delay_frames, required, [0, 10]).
	DelayFrames int
}

// Science is the science camera (YAML section "science").
type Science struct {
	// Wavelength in metres at which Strehl ratios are computed (wavelength_m,
	// required, [3e-7, 2.5e-5]).
	Wavelength float64
	// OffsetX and OffsetY are the direction the science camera looks at, in
	// arcseconds from the guide star (offset_x_arcsec, offset_y_arcsec, optional,
	// default 0, [-120, 120]): off the axis, each layer is seen shifted by θ·h
	// and the true Strehl shows the anisoplanatism.
	OffsetX, OffsetY float64
}

// PupilConfig returns the sampled-pupil description of the telescope.
func (s *Scenario) PupilConfig() optics.PupilConfig {
	t := s.Telescope
	return optics.PupilConfig{
		Diameter:    t.Diameter,
		Obstruction: t.Obstruction,
		Spiders:     t.Spiders,
		SpiderWidth: t.SpiderWidth,
		N:           t.PupilSamples,
	}
}

// SubapertureSize returns the subaperture width in metres: Diameter/Subapertures.
func (s *Scenario) SubapertureSize() float64 {
	return s.Telescope.Diameter / float64(s.WFS.Subapertures)
}

// PhotonsPerSubaperture returns the detected photons per frame on a fully
// illuminated subaperture: N = ZP·10^(−0.4 m)·throughput·d²/frame rate.
func (s *Scenario) PhotonsPerSubaperture() float64 {
	g := s.GuideStar
	d := s.SubapertureSize()
	return g.ZeroPoint * math.Pow(10, -0.4*g.Magnitude) * g.Throughput * d * d / s.Loop.FrameRate
}
