package scenario

import (
	"errors"
	"fmt"
)

// ErrExposure is returned (wrapped) when an eye scenario's beacon would put more
// energy into the eye than the limit the scenario configures for it.
var ErrExposure = errors.New("retinal exposure above the configured limit")

// StudyThibos2002 names the population statistics of the eye's aberrations:
// Thibos, Hong, Bradley & Cheng (2002), "Statistical variation of aberration
// structure and image quality in a normal population of healthy eyes", JOSA A
// 19, 2329 (6 mm pupil). The table the simulator uses is in sim/eye.
const StudyThibos2002 = "thibos2002"

// EyeCaution is the caution that help texts show beside the eye scenario.
const EyeCaution = "the eye scenario's beacon exposure check is indicative only: exposure limits follow ANSI Z136.1 and ISO 15004-2, and local medical-device and ethics rules and licensed practice govern any real use"

// EyePupil is the pupil diameter in metres for which the study's statistics
// hold; an eye scenario's telescope.diameter_m must equal it.
const EyePupil = 6e-3

// Eye replaces the layered atmosphere by the aberrations of one human eye
// (YAML section "eye"; a scenario has either "atmosphere" or "eye"). The
// exposure check is indicative only: exposure limits follow ANSI Z136.1 and
// ISO 15004-2, and local medical-device and ethics rules and licensed practice
// govern any real use.
type Eye struct {
	// Study names the population statistics the eye is drawn from (study,
	// required, StudyThibos2002).
	Study string
	// Seed draws the eye from the population and its fluctuations (seed,
	// optional, default 1).
	Seed int64
	// AccommodationRMS is the rms of the fluctuation of accommodation in
	// dioptres (accommodation_rms_d, optional, default 0.1, [0, 1]).
	AccommodationRMS float64
	// AccommodationLow and AccommodationHigh bound the band of the fluctuation
	// in hertz (accommodation_band_hz, optional, default [1, 2], 0 < low < high <= 10).
	AccommodationLow, AccommodationHigh float64
	// BeaconPower is the beacon's optical power entering the pupil in watts
	// (beacon_power_w, required, (0, 0.01]).
	BeaconPower float64
	// BeaconExposure is the exposure time of the beacon in seconds for one
	// session (beacon_exposure_s, required, (0, 36000]).
	BeaconExposure float64
	// ExposureLimit is the energy in joules that the beacon may put into the eye
	// over BeaconExposure, as the operator derives it from the standards for the
	// beacon's wavelength and spot (exposure_limit_j, required, (0, 100]).
	ExposureLimit float64
}

// Energy returns the beacon's energy into the eye, power × exposure time, in joules.
func (e *Eye) Energy() float64 { return e.BeaconPower * e.BeaconExposure }

// CheckExposure returns an error wrapping ErrExposure, naming the values, when
// the beacon's energy exceeds the configured limit. The check is indicative
// only (see Eye).
func (e *Eye) CheckExposure() error {
	if e == nil {
		return nil
	}
	if !(e.Energy() <= e.ExposureLimit) {
		return fmt.Errorf("eye: beacon_power_w %g W × beacon_exposure_s %g s = %g J exceeds exposure_limit_j %g J: %w"+
			" (indicative check only; limits follow ANSI Z136.1 and ISO 15004-2, and local medical-device and ethics rules and licensed practice govern any real use)",
			e.BeaconPower, e.BeaconExposure, e.Energy(), e.ExposureLimit, ErrExposure)
	}
	return nil
}

type rawEye struct {
	Study            *string    `yaml:"study"`
	Seed             *int64     `yaml:"seed"`
	AccommodationRMS *float64   `yaml:"accommodation_rms_d"`
	AccommodationHz  *[]float64 `yaml:"accommodation_band_hz"`
	BeaconPower      *float64   `yaml:"beacon_power_w"`
	BeaconExposure   *float64   `yaml:"beacon_exposure_s"`
	ExposureLimit    *float64   `yaml:"exposure_limit_j"`
}

func (e *Eye) toRaw() *rawEye {
	band := []float64{e.AccommodationLow, e.AccommodationHigh}
	return &rawEye{&e.Study, &e.Seed, &e.AccommodationRMS, &band, &e.BeaconPower, &e.BeaconExposure, &e.ExposureLimit}
}

func (c *checker) eye(r *rawEye, s *Scenario) *Eye {
	e := &Eye{
		Study:            str(r.Study, ""),
		Seed:             1,
		AccommodationRMS: c.float("eye.accommodation_rms_d", r.AccommodationRMS, closed(0, 1), " dioptres rms", 0.1),
		AccommodationLow: 1, AccommodationHigh: 2,
		BeaconPower:    c.float("eye.beacon_power_w", r.BeaconPower, openLow(0, 0.01), " W"),
		BeaconExposure: c.float("eye.beacon_exposure_s", r.BeaconExposure, openLow(0, 36000), " s"),
		ExposureLimit:  c.float("eye.exposure_limit_j", r.ExposureLimit, openLow(0, 100), " J"),
	}
	if r.Seed != nil {
		e.Seed = *r.Seed
	}
	switch {
	case r.Study == nil:
		c.fail("eye.study", "missing: required, must be %q", StudyThibos2002)
	case e.Study != StudyThibos2002:
		c.fail("eye.study", "%q: must be %q", e.Study, StudyThibos2002)
	}
	if r.AccommodationHz != nil {
		b := *r.AccommodationHz
		if len(b) != 2 || !(b[0] > 0) || !(b[0] < b[1]) || !(b[1] <= 10) {
			c.fail("eye.accommodation_band_hz", "%v: must be [low, high] with 0 < low < high <= 10 Hz", b)
		} else {
			e.AccommodationLow, e.AccommodationHigh = b[0], b[1]
		}
	}
	if f := s.Loop.FrameRate; f > 0 && !(e.AccommodationHigh < f/2) {
		c.fail("eye.accommodation_band_hz", "high %g Hz: must be below the Nyquist frequency loop.frame_rate_hz/2 = %g Hz", e.AccommodationHigh, f/2)
	}
	if d := s.Telescope.Diameter; d > 0 && d != EyePupil {
		c.fail("telescope.diameter_m", "%g: an eye scenario's pupil must be %g m, the pupil of the study's statistics", d, EyePupil)
	}
	if len(c.errs) == 0 {
		if err := e.CheckExposure(); err != nil {
			c.errs = append(c.errs, fmt.Errorf("scenario: eye: %w", err))
		}
	}
	return e
}
