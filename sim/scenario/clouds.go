package scenario

import "fmt"

// maxClouds bounds the clouds list of a scenario.
const maxClouds = 1000

// Cloud is one cloud passage in front of the guide star (an entry of the YAML list
// "clouds"): the sky's transmission falls linearly from 1 to 1 − Depth over Ramp,
// stays there, and rises back to 1 over Ramp, Duration after Start. Time is the
// bench's frame time, frames × frame period from the first frame, so that a
// lockstep run meets its clouds at the same frames whatever the machine's load.
type Cloud struct {
	// Start of the passage in seconds of frame time (start_s, required, [0, 1e6];
	// each passage starts at or after the end of the one before).
	Start float64
	// Duration of the passage in seconds, ramps included (duration_s, required,
	// (0, 86400]).
	Duration float64
	// Depth is the fraction of the light the cloud takes at its thickest (depth,
	// required, (0, 0.999]; a cloud that let no light through would leave the
	// centroids undefined).
	Depth float64
	// Ramp is the time the transmission takes to fall and to rise again, seconds
	// (ramp_s, optional, default 0, [0, duration_s/2]).
	Ramp float64
}

// Clouds is a scenario's schedule of cloud passages, in time order and not
// overlapping.
type Clouds []Cloud

// Transmission returns the fraction of the guide star's light that the clouds let
// through at frame time t seconds: 1 outside every passage, 1 − depth·shape inside
// one, where the shape rises linearly over the ramp, is 1 in the middle, and falls
// linearly over the ramp at the end.
func (cs Clouds) Transmission(t float64) float64 {
	for _, c := range cs {
		end := c.Start + c.Duration
		if t < c.Start || t > end {
			continue
		}
		shape := 1.0
		if c.Ramp > 0 {
			shape = min(1, (t-c.Start)/c.Ramp, (end-t)/c.Ramp)
		}
		return 1 - c.Depth*shape
	}
	return 1
}

// Recovered returns the frame time, seconds, from which the passage lets at
// least frac of the light through again: the end of the passage less the part of
// its closing ramp above frac, end − ramp·(1 − frac)/depth (the start when the
// passage never takes the transmission below frac).
func (c Cloud) Recovered(frac float64) float64 {
	if 1-c.Depth >= frac {
		return c.Start
	}
	return c.Start + c.Duration - c.Ramp*(1-frac)/c.Depth
}

type rawCloud struct {
	Start    *float64 `yaml:"start_s"`
	Duration *float64 `yaml:"duration_s"`
	Depth    *float64 `yaml:"depth"`
	Ramp     *float64 `yaml:"ramp_s"`
}

func (cs Clouds) toRaw() []*rawCloud {
	if len(cs) == 0 {
		return nil
	}
	out := make([]*rawCloud, len(cs))
	for i := range cs {
		c := &cs[i]
		out[i] = &rawCloud{&c.Start, &c.Duration, &c.Depth, &c.Ramp}
	}
	return out
}

// clouds checks the clouds list: every field by name, and the passages in time
// order without overlap.
func (c *checker) clouds(raw []*rawCloud, r *rawScenario) Clouds {
	if len(raw) == 0 {
		return nil
	}
	if r.Eye != nil {
		c.fail("clouds", "an eye scenario has no sky: leave the clouds out")
		return nil
	}
	if len(raw) > maxClouds {
		c.fail("clouds", "%d passages: must be at most %d", len(raw), maxClouds)
		return nil
	}
	out := make(Clouds, len(raw))
	for i, x := range raw {
		at := fmt.Sprintf("clouds[%d].", i)
		cl := Cloud{
			Start:    c.float(at+"start_s", x.Start, closed(0, 1e6), " s of frame time"),
			Duration: c.float(at+"duration_s", x.Duration, openLow(0, 86400), " s"),
			Depth:    c.float(at+"depth", x.Depth, openLow(0, 0.999), " (fraction of the light taken)"),
		}
		if cl.Duration > 0 {
			cl.Ramp = c.float(at+"ramp_s", x.Ramp, closed(0, cl.Duration/2), " s (duration_s/2)", 0)
		}
		if i > 0 {
			prev := out[i-1]
			if end := prev.Start + prev.Duration; cl.Start < end {
				c.fail(at+"start_s", "%g: must be >= %g s, the end of clouds[%d] (passages in time order, not overlapping)", cl.Start, end, i-1)
			}
		}
		out[i] = cl
	}
	return out
}
