package daemon

import (
	"errors"
	"fmt"
	"math"

	stillskyv1 "stillsky/proto/stillsky/v1"
)

// ErrExposure is returned (wrapped) by New when the beacon declared in
// Config.Beacon would put more energy into the eye than its configured limit,
// and ends a device session whose camera declares such a beacon in its
// Describe (retinal_beacon).
var ErrExposure = errors.New("retinal exposure above the configured limit")

// Beacon declares the light a retinal imager's beacon sends into the eye, as the
// operator gives it (`stillsky loop --beacon-power-w --beacon-exposure-s
// --exposure-limit-j`): the daemon cannot measure it. New refuses a beacon whose
// power × exposure time exceeds the limit. A camera that declares its beacon
// (Describe retinal_beacon) is checked by its own figures when it connects,
// against the lower of its limit and LimitJ. The check is indicative only:
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
	if err := errors.Join(inRange("beacon-power-w", b.PowerW, maxBeaconPowerW, "W"),
		inRange("beacon-exposure-s", b.ExposureS, maxBeaconExposureS, "s"),
		inRange("exposure-limit-j", b.LimitJ, maxExposureLimitJ, "J")); err != nil {
		return err
	}
	return checkExposure("beacon-power-w", b.PowerW, "beacon-exposure-s", b.ExposureS, "exposure-limit-j", b.LimitJ)
}

// The ranges of a declared beacon's figures (Beacon and the camera's
// Describe retinal_beacon alike).
const (
	maxBeaconPowerW    = 0.01
	maxBeaconExposureS = 36000
	maxExposureLimitJ  = 100
)

func inRange(name string, v, hi float64, unit string) error {
	if !(v > 0 && v <= hi) || math.IsInf(v, 0) {
		return fmt.Errorf("daemon: %s %g: must be in (0, %g] %s", name, v, hi, unit)
	}
	return nil
}

// checkExposure refuses a beacon whose power × exposure time exceeds the
// limit, naming the three figures as given, with ErrExposure.
func checkExposure(powerName string, power float64, exposureName string, exposure float64, limitName string, limit float64) error {
	if e := power * exposure; e > limit {
		return fmt.Errorf("daemon: %s %g W × %s %g s = %g J exceeds %s %g J: %w"+
			" (indicative check only; limits follow ANSI Z136.1 and ISO 15004-2, and local medical-device and ethics rules and licensed practice govern any real use)",
			powerName, power, exposureName, exposure, e, limitName, limit, ErrExposure)
	}
	return nil
}

// checkDeviceBeacon checks the beacon a camera declares in its Describe
// (retinal_beacon; nil for a sensor that looks at the sky) by the device's own
// figures, against the lower of the device's limit and the daemon's
// (Config.Beacon's LimitJ, if declared). A refusal wraps ErrExposure; a figure
// out of range is refused naming the field.
func checkDeviceBeacon(rb *stillskyv1.RetinalBeacon, own *Beacon) error {
	if rb == nil {
		return nil
	}
	const pf, ef, lf = "camera retinal_beacon.power_w", "retinal_beacon.exposure_s", "retinal_beacon.exposure_limit_j"
	if err := errors.Join(inRange(pf, rb.GetPowerW(), maxBeaconPowerW, "W"),
		inRange(ef, rb.GetExposureS(), maxBeaconExposureS, "s"),
		inRange(lf, rb.GetExposureLimitJ(), maxExposureLimitJ, "J")); err != nil {
		return err
	}
	limitName, limit := lf+" (the camera's)", rb.GetExposureLimitJ()
	if own != nil && own.LimitJ < limit {
		limitName, limit = "exposure-limit-j (the daemon's)", own.LimitJ
	}
	return checkExposure(pf, rb.GetPowerW(), ef, rb.GetExposureS(), limitName, limit)
}
