package ctl_test

import (
	"bytes"
	"context"
	"path/filepath"
	"strings"
	"testing"

	"stillsky/cmd/stillsky/internal/ctl"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/rig"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// TestCalibrateModalBasis calibrates the small scenario in each modal basis
// through `ctl calibrate --basis B` — Karhunen–Loève modes, and the mirror's
// own modes — then checks that the reconstructor says so, that modal gains of
// its mode count are accepted and one more is refused, that the loop closes on
// it, that optimise-gains finds one gain per mode and predicts no worse a
// residual, and that the basis survives a save and a load.
func TestCalibrateModalBasis(t *testing.T) {
	scn, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	for _, basis := range []string{"kl", "mirror"} {
		t.Run(basis, func(t *testing.T) {
			ctx := context.Background()
			r, err := rig.Start(ctx, rig.Config{Scenario: scn, Bench: bench.Options{Lockstep: true}})
			if err != nil {
				t.Fatal(err)
			}
			defer r.Close()
			if _, err := r.WaitFrames(ctx, 1); err != nil {
				t.Fatal(err)
			}
			run := func(args ...string) (string, error) {
				var out bytes.Buffer
				err := ctl.Run(ctx, r.Conn, args, &out)
				return out.String(), err
			}
			if out, err := run("calibrate", "--basis", basis); err != nil || !strings.Contains(out, basis+" modes") {
				t.Fatalf("ctl calibrate --basis %s: %v\n%s", basis, err, out)
			}
			if _, err := run("calibrate", "--basis", "zernike"); err == nil {
				t.Error("ctl calibrate --basis zernike accepted")
			}
			st, err := r.Status(ctx)
			if err != nil {
				t.Fatal(err)
			}
			info := st.GetReconstructor()
			n := int(info.GetModeCount())
			if info.GetBasis() != basis || n < 2 || n >= int(info.GetActuatorCount()) {
				t.Fatalf("reconstructor basis %q with %d modes of %d actuators; want %s, fewer modes than actuators", info.GetBasis(), n, info.GetActuatorCount(), basis)
			}
			gains := make([]float64, n)
			for i := range gains {
				gains[i] = 1
			}
			gains[0] = 0.5
			if _, err := r.Client.SetModalGains(ctx, &stillskyv1.SetModalGainsRequest{Gains: gains}); err != nil {
				t.Fatalf("modal gains for %d %s modes: %v", n, basis, err)
			}
			if _, err := r.Client.SetModalGains(ctx, &stillskyv1.SetModalGainsRequest{Gains: append(gains, 1)}); err == nil {
				t.Errorf("modal gains for %d modes accepted with %d %s modes", n+1, n, basis)
			}
			if _, err := r.Client.CloseLoop(ctx, &stillskyv1.CloseLoopRequest{}); err != nil {
				t.Fatal(err)
			}
			loopCarriesOn(t, r, "closing on "+basis+" modes")
			og, err := r.Client.OptimiseModalGains(ctx, &stillskyv1.OptimiseModalGainsRequest{Frames: 512, DryRun: true})
			if err != nil {
				t.Fatalf("optimise-gains on %s modes: %v", basis, err)
			}
			if len(og.GetGains()) != n || !(og.GetPredictedResidualAfter() <= og.GetPredictedResidualBefore()) {
				t.Errorf("optimise-gains: %d gains for %d %s modes, predicted residual %g → %g", len(og.GetGains()), n, basis, og.GetPredictedResidualBefore(), og.GetPredictedResidualAfter())
			}
			if _, err := r.Client.OpenLoop(ctx, &stillskyv1.OpenLoopRequest{}); err != nil {
				t.Fatal(err)
			}
			file := filepath.Join(t.TempDir(), basis+".fits")
			if out, err := run("save", file); err != nil {
				t.Fatalf("ctl save: %v\n%s", err, out)
			}
			if out, err := run("load", file); err != nil || !strings.Contains(out, basis+" modes") {
				t.Fatalf("ctl load: %v\n%s", err, out)
			}
		})
	}
}
