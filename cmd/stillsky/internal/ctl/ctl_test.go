package ctl_test

import (
	"bytes"
	"context"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"google.golang.org/grpc/codes"
	grpcstatus "google.golang.org/grpc/status"

	"stillsky/cmd/stillsky/internal/ctl"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/rig"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

func nan() float64 { return math.NaN() }

// TestControlRequests drives the ctl verbs against a running daemon and checks that
// invalid requests get InvalidArgument (or FailedPrecondition) with a message and
// leave the state unchanged.
func TestControlRequests(t *testing.T) {
	scn, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	r, err := rig.Start(ctx, rig.Config{Scenario: scn, Bench: bench.Options{Lockstep: true}})
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	if _, err := r.WaitFrames(ctx, 1); err != nil {
		t.Fatal(err)
	}
	status := func() *stillskyv1.GetStatusResponse {
		t.Helper()
		s, err := r.Status(ctx)
		if err != nil {
			t.Fatal(err)
		}
		return s
	}
	run := func(args ...string) (string, error) {
		var out bytes.Buffer
		err := ctl.Run(ctx, r.Conn, args, &out)
		return out.String(), err
	}
	// Closing before any calibration is refused: there is no reconstructor.
	if _, err := r.Client.CloseLoop(ctx, &stillskyv1.CloseLoopRequest{}); grpcstatus.Code(err) != codes.FailedPrecondition {
		t.Fatalf("close before calibration: %v, want FailedPrecondition", err)
	}
	if _, err := run("close"); err == nil || !strings.Contains(err.Error(), "failed_precondition") {
		t.Fatalf("ctl close before calibration: %v", err)
	}
	if out, err := run("calibrate"); err != nil || !strings.Contains(out, "reconstructor:") {
		t.Fatalf("ctl calibrate: %v\n%s", err, out)
	}
	if out, err := run("close"); err != nil || !strings.Contains(out, "state           closed") {
		t.Fatalf("ctl close: %v\n%s", err, out)
	}
	if _, err := r.WaitFrames(ctx, 20); err != nil {
		t.Fatal(err)
	}
	if out, err := run("gain", "0.3"); err != nil || !strings.Contains(out, "0.3 / ") {
		t.Fatalf("ctl gain 0.3: %v\n%s", err, out)
	}
	if out, err := run("leak", "0.02"); err != nil || !strings.Contains(out, "/ 0.02") {
		t.Fatalf("ctl leak 0.02: %v\n%s", err, out)
	}
	if out, err := run("optimise-gains", "--frames", "512", "--dry-run"); err != nil || !strings.Contains(out, "modal gains found (not applied) for") {
		t.Fatalf("ctl optimise-gains --dry-run: %v\n%s", err, out)
	}
	if _, err := run("optimise-gains", "--frames", "many"); err == nil || !strings.Contains(err.Error(), "not a frame count") {
		t.Fatalf("ctl optimise-gains --frames many: %v", err)
	}
	before := status()
	for _, c := range []struct {
		name string
		call func() error
		code codes.Code
	}{
		{"gain 2", func() error { _, err := r.Client.SetGain(ctx, &stillskyv1.SetGainRequest{Gain: 2}); return err }, codes.InvalidArgument},
		{"gain -0.1", func() error { _, err := r.Client.SetGain(ctx, &stillskyv1.SetGainRequest{Gain: -0.1}); return err }, codes.InvalidArgument},
		{"gain NaN", func() error { _, err := r.Client.SetGain(ctx, &stillskyv1.SetGainRequest{Gain: nan()}); return err }, codes.InvalidArgument},
		{"leak 1", func() error { _, err := r.Client.SetLeak(ctx, &stillskyv1.SetLeakRequest{Leak: 1}); return err }, codes.InvalidArgument},
		{"leak -1", func() error { _, err := r.Client.SetLeak(ctx, &stillskyv1.SetLeakRequest{Leak: -1}); return err }, codes.InvalidArgument},
		{"modal gains wrong length", func() error {
			_, err := r.Client.SetModalGains(ctx, &stillskyv1.SetModalGainsRequest{Gains: []float64{1, 1}})
			return err
		}, codes.InvalidArgument},
		{"optimise-gains on 10 frames", func() error {
			_, err := r.Client.OptimiseModalGains(ctx, &stillskyv1.OptimiseModalGainsRequest{Frames: 10})
			return err
		}, codes.InvalidArgument},
		{"telemetry decimation 0", func() error {
			s, err := r.Client.StreamTelemetry(ctx, &stillskyv1.StreamTelemetryRequest{})
			if err != nil {
				return err
			}
			_, err = s.Recv()
			return err
		}, codes.InvalidArgument},
		{"calibrate while closed", func() error {
			s, err := r.Client.Calibrate(ctx, &stillskyv1.CalibrateRequest{})
			if err != nil {
				return err
			}
			_, err = s.Recv()
			return err
		}, codes.FailedPrecondition},
		{"corrupt reconstructor", func() error {
			s, err := r.Client.LoadReconstructor(ctx)
			if err != nil {
				return err
			}
			s.Send(&stillskyv1.LoadReconstructorRequest{Chunk: []byte("SIMPLE  =                    T / not really")})
			_, err = s.CloseAndRecv()
			return err
		}, codes.InvalidArgument},
	} {
		t.Run(c.name, func(t *testing.T) {
			err := c.call()
			if grpcstatus.Code(err) != c.code || grpcstatus.Convert(err).Message() == "" {
				t.Errorf("%v, want %v with a message", err, c.code)
			}
		})
	}
	after := status()
	if after.GetGain() != before.GetGain() || after.GetLeak() != before.GetLeak() || after.GetState() != before.GetState() ||
		after.GetReconstructor().GetCreatedUnix() != before.GetReconstructor().GetCreatedUnix() {
		t.Errorf("invalid requests changed the state: before %v/%v/%v, after %v/%v/%v",
			before.GetGain(), before.GetLeak(), before.GetState(), after.GetGain(), after.GetLeak(), after.GetState())
	}
	if _, err := run("gain", "abc"); err == nil {
		t.Error("ctl gain abc accepted")
	}
	if _, err := run("calibrate", "--hadamard", "--single-pokes"); err == nil {
		t.Error("ctl calibrate accepted both --hadamard and --single-pokes")
	}
	if _, err := run("frobnicate"); err == nil {
		t.Error("ctl accepted an unknown verb")
	}

	// Save, then load the saved file back.
	file := filepath.Join(t.TempDir(), "rec.fits")
	if out, err := run("save", file); err != nil {
		t.Fatalf("ctl save: %v\n%s", err, out)
	}
	if out, err := run("load", file); err != nil || !strings.Contains(out, "reconstructor loaded") {
		t.Fatalf("ctl load: %v\n%s", err, out)
	}
	if out, err := run("hold"); err != nil || !strings.Contains(out, "state           hold") {
		t.Fatalf("ctl hold: %v\n%s", err, out)
	}
	if out, err := run("open"); err != nil || !strings.Contains(out, "state           open") {
		t.Fatalf("ctl open: %v\n%s", err, out)
	}
	if out, err := run("status"); err != nil || !strings.Contains(out, "frames") || strings.Contains(out, "supervisor") {
		t.Fatalf("ctl status: %v\n%s", err, out)
	}
	// This loop runs without --autonomous: resume is refused on one line.
	if _, err := run("resume"); err == nil || !strings.Contains(err.Error(), "--autonomous") {
		t.Errorf("ctl resume without the supervisor: %v", err)
	}
}

// Off a terminal (here a file, as a log would be), progress is a line at each
// change of phase and at most one every few seconds in between: no carriage
// returns, and a thousand updates of one phase make one line.
func TestProgressOffTerminal(t *testing.T) {
	f, err := os.Create(filepath.Join(t.TempDir(), "log"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	p := ctl.NewProgress(f)
	for i := range 1000 {
		p.Update(&stillskyv1.CalibrateResponse{Phase: "pokes", Done: uint32(i), Total: 1000})
	}
	p.Update(&stillskyv1.CalibrateResponse{Phase: "inverting", Done: 1000, Total: 1000})
	p.Update(&stillskyv1.CalibrateResponse{Phase: "done", Done: 1000, Total: 1000})
	p.End()
	b, err := os.ReadFile(f.Name())
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSuffix(string(b), "\n"), "\n")
	if strings.Contains(string(b), "\r") || len(lines) != 3 ||
		!strings.Contains(lines[0], "0%") || !strings.HasSuffix(lines[1], "inverting") || !strings.HasSuffix(lines[2], "done") {
		t.Errorf("progress off a terminal:\n%q\nwant three lines (pokes from 0%%, inverting, done) and no carriage return", b)
	}
}
