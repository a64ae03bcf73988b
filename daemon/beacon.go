package daemon

import (
	"errors"
	"fmt"
	"math"
)

// ErrExposure is returned (wrapped) by New when the beacon declared in
// Config.Beacon would put more energy into the eye than its configured limit.
var ErrExposure = errors.New("retinal exposure above the configured limit")

// Beacon declares the light a retinal imager's beacon sends into the eye, as the
// operator gives it (`stillsky loop --beacon-power-w --beacon-exposure-s
// --exposure-limit-j`): the daemon cannot measure it. New refuses a beacon whose
// power × exposure time exceeds the limit. The check is indicative only:
// exposure limits follow ANSI Z136.1 and ISO 15004-2, and local medical-device
// and ethics rules and licensed practice govern any real use.
type Beacon struct {
	// PowerW is the beacon's optical power entering the pupil, watts, in (0, 0.01].
	PowerW float64
	// ExposureS is the exposure time of the session, seconds, in (0, 36000].
	ExposureS float64
	// LimitJ is the energy allowed into the eye over ExposureS, joules, in (0, 100].
	LimitJ float64
}

func (b *Beacon) validate() error {
	if b == nil {
		return nil
	}
	check := func(name string, v, hi float64, unit string) error {
		if !(v > 0 && v <= hi) || math.IsInf(v, 0) {
			return fmt.Errorf("daemon: %s %g: must be in (0, %g] %s", name, v, hi, unit)
		}
		return nil
	}
	if err := errors.Join(check("beacon-power-w", b.PowerW, 0.01, "W"),
		check("beacon-exposure-s", b.ExposureS, 36000, "s"),
		check("exposure-limit-j", b.LimitJ, 100, "J")); err != nil {
		return err
	}
	if e := b.PowerW * b.ExposureS; e > b.LimitJ {
		return fmt.Errorf("daemon: beacon-power-w %g W × beacon-exposure-s %g s = %g J exceeds exposure-limit-j %g J: %w"+
			" (indicative check only; limits follow ANSI Z136.1 and ISO 15004-2, and local medical-device and ethics rules and licensed practice govern any real use)",
			b.PowerW, b.ExposureS, e, b.LimitJ, ErrExposure)
	}
	return nil
}
