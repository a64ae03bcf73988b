package demo_test

import (
	"bytes"
	"context"
	"errors"
	"strings"
	"sync"
	"testing"

	"stillsky/cmd/stillsky/internal/demo"
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
