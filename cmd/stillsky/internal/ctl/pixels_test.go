package ctl_test

import (
	"bytes"
	"context"
	"fmt"
	"math"
	"strings"
	"testing"

	"stillsky/cmd/stillsky/internal/ctl"
	"stillsky/rig"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// The capture verbs against a pixel camera: each prints what it measured
// (the dark at the bias of 100 ADU, the flat's mean response 1, the
// reference of centred spots near 0) and bad arguments are refused naming
// the verb.
func TestCaptureVerbs(t *testing.T) {
	scn, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	scn.WFS.Pixels = &scenario.Pixels{PixelsPerSubaperture: 8, PixelScale: scn.GuideStar.Wavelength / (2 * scn.SubapertureSize()),
		ReadNoise: 1, Bias: 100, FlatSeed: 1, FullWell: 60000, Gain: 1, Centroid: scenario.CentroidCoG}
	ctx := context.Background()
	r, err := rig.Start(ctx, rig.Config{Scenario: scn, Bench: bench.Options{Lockstep: true}})
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	if _, err := r.WaitFrames(ctx, 5); err != nil {
		t.Fatal(err)
	}
	run := func(args ...string) (string, error) {
		var out bytes.Buffer
		err := ctl.Run(ctx, r.Conn, args, &out)
		return out.String(), err
	}
	// The dark's mean is the bias, 100 ADU, within the noise of 10 frames of
	// 4096 pixels at 1 e⁻ read noise (σ ≈ 0.005 ADU: printed to 4 digits it
	// reads 99.99 or 100 by the draw, so it is parsed, not matched); the
	// flat is normalised to a mean of 1.
	for _, c := range []struct {
		args, want string
		mean, tol  float64
	}{
		{"capture-dark --frames 10", "dark: 10 frames, mean ", 100, 0.03},
		{"capture-flat --frames 10", "flat: 10 frames, mean ", 1, 1e-3},
		{"capture-reference", "reference: 50 frames, mean ", math.NaN(), 0},
	} {
		out, err := run(strings.Fields(c.args)...)
		if err != nil || !strings.HasPrefix(out, c.want) || !strings.Contains(out, "not committed") {
			t.Errorf("%s: %q, %v; want it to start %q and say it was not committed", c.args, out, err, c.want)
			continue
		}
		var mean float64
		if _, err := fmt.Sscanf(strings.TrimPrefix(out, c.want), "%g", &mean); err != nil {
			t.Errorf("%s: %q: no mean after %q: %v", c.args, out, c.want, err)
		} else if !math.IsNaN(c.mean) && math.Abs(mean-c.mean) > c.tol {
			t.Errorf("%s: mean %g, want %g ± %g", c.args, mean, c.mean, c.tol)
		}
	}
	for _, c := range []struct{ args, want string }{
		{"capture-dark --frames 0", "capture-dark: --frames \"0\": want a whole number >= 1"},
		{"capture-flat --frames", "capture-flat takes [--frames N]"},
		{"capture-reference --frames 20000", "frames 20000: must be in [1, 10000]"},
	} {
		if _, err := run(strings.Fields(c.args)...); err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: %v, want %q", c.args, err, c.want)
		}
	}
}
