package main

import (
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"stillsky/internal/recording"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/rig"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// tinyRecording writes a valid recording of a 2×2-subaperture sensor (3 valid,
// 6 slopes) and 4 actuators, 10 frames, without a reconstructor.
func tinyRecording(t *testing.T, path string) {
	t.Helper()
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	h := &stillskyv1.RecordingHeader{
		Camera: &stillskyv1.CameraServiceDescribeResponse{Subapertures: 2, ValidSubapertures: []uint32{0, 1, 3}, SlopeCount: 6,
			FrameRateHz: 500, SubapertureSizeM: 0.5, PupilDiameterM: 1, WavelengthM: 700e-9, DelayFrames: 2, Description: "tiny"},
		Mirror: &stillskyv1.MirrorServiceDescribeResponse{ActuatorCount: 4, ActuatorsAcross: 2, PositionsM: []float64{0, 0, 1, 0, 0, 1, 1, 1},
			PitchM: 1, StrokeM: 1e-6},
		Gain: 0.4, Leak: 0.01, ScienceWavelengthM: 1.65e-6, WindowFrames: 64,
	}
	w, err := recording.Create(f, h, nil, 10)
	if err != nil {
		t.Fatal(err)
	}
	b := &stillskyv1.RecordedFrames{}
	for i := range 10 {
		b.FrameNumbers = append(b.FrameNumbers, uint64(i+1))
		b.ReadoutEndNs = append(b.ReadoutEndNs, int64(i)*2e6)
		b.ReceivedNs = append(b.ReceivedNs, int64(i)*2e6+1000)
		b.ComputedNs = append(b.ComputedNs, int64(i)*2e6+2000)
		b.SentNs = append(b.SentNs, int64(i)*2e6+3000)
		b.States = append(b.States, stillskyv1.LoopState_LOOP_STATE_OPEN)
		b.SaturatedActuators = append(b.SaturatedActuators, 0)
		b.ResidualWavefrontRmsM = append(b.ResidualWavefrontRmsM, 1e-7)
		b.StrehlEstimate = append(b.StrehlEstimate, 0.5)
		b.Slopes = append(b.Slopes, make([]float32, 6)...)
		b.Commands = append(b.Commands, make([]float32, 4)...)
	}
	if err := w.Append(b); err != nil {
		t.Fatal(err)
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
}

// Missing, truncated and foreign files, flags that do not apply and a geometry
// other than the running loop's are refused with one line and a non-zero exit.
func TestReplayBadInput(t *testing.T) {
	dir := t.TempDir()
	tiny := filepath.Join(dir, "tiny.fits")
	tinyRecording(t, tiny)
	whole, _ := os.ReadFile(tiny)
	truncated := filepath.Join(dir, "truncated.fits")
	os.WriteFile(truncated, whole[:len(whole)-3000], 0o644)
	foreign := filepath.Join(dir, "screen.fits")
	if _, code := runMain(t, "screen", "--scenario", "small", "--count", "1", "--out", foreign); code != 0 {
		t.Fatal("stillsky screen failed")
	}
	notFITS := filepath.Join(dir, "notes.fits")
	os.WriteFile(notFITS, []byte("these are not the frames you are looking for\n"), 0o644)

	scn, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	r, err := rig.Start(context.Background(), rig.Config{Scenario: scn, Bench: bench.Options{Lockstep: true}})
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	if _, err := r.WaitFrames(context.Background(), 1); err != nil {
		t.Fatal(err)
	}
	sock := "unix:" + filepath.Join(dir, "cam.sock")
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"sim", "--replay", filepath.Join(dir, "none.fits")}, "no such file"},
		{[]string{"sim", "--replay", truncated}, "truncated"},
		{[]string{"sim", "--replay", foreign}, "not a stillsky telemetry recording"},
		{[]string{"sim", "--replay", notFITS}, "fits:"},
		{[]string{"sim", "--replay", tiny, "--lockstep"}, "--lockstep: not for --replay"},
		{[]string{"sim", "--replay", tiny, "--scenario", "large"}, "--scenario: not for --replay"},
		{[]string{"sim", "--loop", r.ControlAddr}, "needs --replay"},
		{[]string{"sim", "--replay", tiny, "--camera", sock, "--mirror", sock, "--loop", r.ControlAddr}, "6 slopes × 4 actuators, but the loop"},
		{[]string{"latency", "--replay", tiny, "--in-process"}, "holds no reconstructor"},
		{[]string{"latency", "--replay", foreign}, "not a stillsky telemetry recording"},
		{[]string{"latency", "--replay", tiny, "--scenario", "small"}, "do not apply"},
	} {
		stderr, code := runMain(t, c.args...)
		if code == 0 || !strings.Contains(stderr, c.want) || strings.Count(strings.TrimSpace(stderr), "\n") > 0 {
			t.Errorf("%v: exit %d, stderr %q; want a non-zero exit and one line with %q", c.args, code, stderr, c.want)
		}
	}
	// The loop was not disturbed.
	if s, err := r.WaitFrames(context.Background(), 10); err != nil || s.GetInterlockTrips() != 0 {
		t.Errorf("the running loop after the refusals: %v, %d trips", err, s.GetInterlockTrips())
	}
}
