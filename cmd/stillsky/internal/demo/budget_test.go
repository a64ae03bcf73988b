package demo

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"testing"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
)

// TestBudgetEnded checks that a phase's budget ends the phase normally
// whichever way the deadline shows (the context's error, or the status of the
// gRPC call in flight when gRPC's timer fires first), and that any other error,
// or the run's own context ending, still ends the run.
func TestBudgetEnded(t *testing.T) {
	live := context.Background()
	gone, cancel := context.WithCancel(live)
	cancel()
	for _, c := range []struct {
		name string
		ctx  context.Context
		err  error
		ok   bool
	}{
		{"context deadline", live, context.DeadlineExceeded, true},
		{"wrapped deadline", live, fmt.Errorf("phase: %w", context.DeadlineExceeded), true},
		{"gRPC deadline status", live, status.Error(codes.DeadlineExceeded, "context deadline exceeded"), true},
		{"no error", live, nil, true},
		{"other gRPC error", live, status.Error(codes.Unavailable, "gone"), false},
		{"run interrupted", gone, context.DeadlineExceeded, false},
	} {
		var out bytes.Buffer
		err := budgetEnded(c.ctx, c.err, &out)
		if (err == nil) != c.ok {
			t.Errorf("%s: %v, want ok %v", c.name, err, c.ok)
		}
		if c.ok && c.err != nil && out.Len() == 0 {
			t.Errorf("%s: the end of the budget was not said", c.name)
		}
		if !c.ok && !errors.Is(err, c.err) {
			t.Errorf("%s: error %v, want %v", c.name, err, c.err)
		}
	}
}
