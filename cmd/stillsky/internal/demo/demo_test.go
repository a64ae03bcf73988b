package demo_test

import (
	"bytes"
	"context"
	"errors"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"sync"
	"testing"

	"stillsky/cmd/stillsky/internal/demo"
	"stillsky/sim/scenario"
)

// watch is the demo's output, safe to read while the demo writes it; it calls
// on once the output contains mark.
type watch struct {
	mu   sync.Mutex
	buf  bytes.Buffer
	mark string
	on   func()
}

func (w *watch) Write(p []byte) (int, error) {
	w.mu.Lock()
	defer w.mu.Unlock()
	w.buf.Write(p)
	if w.on != nil && strings.Contains(w.buf.String(), w.mark) {
		w.on()
		w.on = nil
	}
	return len(p), nil
}

// Ending the context in the closed phase (as Ctrl-C does) stops the demo, which
// prints and returns the summary of what ran, with ErrInterrupted.
func TestRunInterrupted(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	out := &watch{mark: "closed loop:", on: cancel}
	sum, err := demo.Run(ctx, demo.Config{Scenario: "small", Lockstep: true, FramesOpen: 200, FramesClosed: 1 << 30, Out: out})
	if !errors.Is(err, demo.ErrInterrupted) {
		t.Fatalf("Run: %v, want ErrInterrupted", err)
	}
	if sum == nil || !sum.Interrupted || sum.FramesOpen != 200 || sum.FramesClosed >= 1<<30 || sum.FinalLoopState == "" {
		t.Fatalf("summary %+v: want interrupted, 200 open frames, fewer closed frames than asked, a final state", sum)
	}
	out.mu.Lock()
	defer out.mu.Unlock()
	if !strings.Contains(out.buf.String(), "summary of the interrupted run") {
		t.Errorf("output lacks the summary of the interrupted run:\n%s", out.buf.String())
	}
}

// A free-running bench asked for 100,000 frames a second cannot deliver them
// on any machine this runs on: the demo says so, names the rate it got, runs
// lockstep instead and still calibrates, closes and reports the raw contrast.
func TestNotRealTimeFallsBackToLockstep(t *testing.T) {
	sc, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	sc.Loop.FrameRate = 1e5
	y, err := sc.YAML()
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "fast.yaml")
	if err := os.WriteFile(path, y, 0o600); err != nil {
		t.Fatal(err)
	}
	var out bytes.Buffer
	sum, err := demo.Run(context.Background(), demo.Config{Scenario: path, FramesOpen: 100, FramesClosed: 300, Out: &out})
	if err != nil {
		t.Fatalf("Run: %v\n%s", err, out.String())
	}
	if !sum.Lockstep || !strings.Contains(sum.NotRealTime, "of the bench's 100000 frames/s") {
		t.Errorf("summary: lockstep %v, not real time %q; want lockstep and the rate the bench managed", sum.Lockstep, sum.NotRealTime)
	}
	if !strings.Contains(out.String(), "not real time: the loop received") || !strings.Contains(out.String(), "Running lockstep instead") {
		t.Errorf("output does not say the run is not real time:\n%s", out.String())
	}
	if sum.FinalLoopState != "closed" || len(sum.ContrastClosed) == 0 || !strings.Contains(out.String(), "raw contrast at 2 λ/D") {
		t.Errorf("final state %q, contrast %v; output:\n%s", sum.FinalLoopState, sum.ContrastClosed, out.String())
	}
}

// A lockstep run is frame-exact: the gated bench ends each phase on a known
// sky frame and the loop closes between two known frames, so two runs of the
// same scenario (and seed) give the same true figures bit for bit. What the
// machine's timing shapes (latencies, the loop's own turbulence analysis) is
// not compared.
func TestLockstepRunIsReproducible(t *testing.T) {
	run := func() *demo.Summary {
		t.Helper()
		sum, err := demo.Run(context.Background(), demo.Config{Scenario: "small", Lockstep: true, FramesOpen: 120, FramesClosed: 300})
		if err != nil {
			t.Fatalf("Run: %v", err)
		}
		return sum
	}
	a, b := run(), run()
	if a.FramesOpen != 120 || a.FramesClosed != 300 || a.FinalLoopState != "closed" {
		t.Fatalf("first run: %d open, %d closed frames, final state %q: want 120, 300, closed", a.FramesOpen, a.FramesClosed, a.FinalLoopState)
	}
	for _, c := range []struct {
		name string
		x, y float64
	}{
		{"strehl_open", a.StrehlOpen, b.StrehlOpen},
		{"strehl_closed", a.StrehlClosed, b.StrehlClosed},
		{"residual_rms_nm_open", a.ResidualRMSNmOpen, b.ResidualRMSNmOpen},
		{"residual_rms_nm_closed", a.ResidualRMSNmClosed, b.ResidualRMSNmClosed},
		{"strehl_estimate_closed", a.StrehlEstimateClosed, b.StrehlEstimateClosed},
	} {
		t.Run(c.name, func(t *testing.T) {
			if math.Float64bits(c.x) != math.Float64bits(c.y) {
				t.Errorf("%s: %v then %v: want the same bits", c.name, c.x, c.y)
			}
		})
	}
	if !slices.Equal(a.StrehlClosedBlocks.Blocks, b.StrehlClosedBlocks.Blocks) || a.InterlockTrips != b.InterlockTrips {
		t.Errorf("closed blocks %v then %v, trips %d then %d: want the same", a.StrehlClosedBlocks.Blocks, b.StrehlClosedBlocks.Blocks, a.InterlockTrips, b.InterlockTrips)
	}
}
