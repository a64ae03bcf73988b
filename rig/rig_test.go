package rig_test

import (
	"context"
	"errors"
	"testing"
	"time"

	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/rig"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// The small scenario in lockstep over unix sockets: the loop connects, calibrates
// and closes; after StopLoop the bench still serves its camera, and Close stops it.
func TestRigOverUnixSockets(t *testing.T) {
	scn, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	r, err := rig.Start(ctx, rig.Config{Scenario: scn, Bench: bench.Options{Lockstep: true}, Unix: true})
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	if _, err := r.WaitFrames(ctx, 10); err != nil {
		t.Fatal(err)
	}
	var phases []string
	info, err := r.Calibrate(ctx, &stillskyv1.CalibrateRequest{}, func(m *stillskyv1.CalibrateResponse) {
		if n := len(phases); n == 0 || phases[n-1] != m.GetPhase() {
			phases = append(phases, m.GetPhase())
		}
	})
	if err != nil {
		t.Fatal(err)
	}
	if info.GetModesKept() == 0 || phases[len(phases)-1] != "done" {
		t.Fatalf("reconstructor %v after phases %v: want modes kept and a last phase done", info, phases)
	}
	if _, err := r.Client.CloseLoop(ctx, &stillskyv1.CloseLoopRequest{}); err != nil {
		t.Fatal(err)
	}
	s, err := r.WaitFrames(ctx, 20)
	if err != nil {
		t.Fatal(err)
	}
	if s.GetState() != stillskyv1.LoopState_LOOP_STATE_CLOSED {
		t.Fatalf("state %v, want closed", s.GetState())
	}
	if err := r.StopLoop(); err != nil {
		t.Fatal(err)
	}
	if _, err := r.Bench.Describe(ctx, &stillskyv1.CameraServiceDescribeRequest{}); err != nil {
		t.Fatalf("bench after the loop stopped: %v", err)
	}
	if err := r.Close(); err != nil {
		t.Fatal(err)
	}
}

// Every wait ends with its context, saying how far it got.
func TestWaitFramesHonoursContext(t *testing.T) {
	scn, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	r, err := rig.Start(context.Background(), rig.Config{Scenario: scn, Bench: bench.Options{Lockstep: true}})
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	ctx, cancel := context.WithTimeout(context.Background(), 200*time.Millisecond)
	defer cancel()
	start := time.Now()
	if _, err := r.WaitFrames(ctx, 1<<40); !errors.Is(err, context.DeadlineExceeded) {
		t.Fatalf("WaitFrames: %v, want the context's deadline", err)
	}
	if d := time.Since(start); d > 5*time.Second {
		t.Errorf("WaitFrames returned %v after its context ended", d)
	}
}
