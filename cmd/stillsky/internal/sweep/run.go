package sweep

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"sync"
	"time"

	"stillsky/cmd/stillsky/internal/demo"
	"stillsky/internal/atomicfile"
)

// Result is one point's outcome, as written to its JSON file.
type Result struct {
	// Sweep is the spec's name, Index the point's and Points the sweep's size.
	Sweep  string `json:"sweep"`
	Index  int    `json:"index"`
	Points int    `json:"points"`
	// Settings are the values that vary across the sweep.
	Settings []Setting `json:"settings"`
	// DelayFrames is the loop delay of the point's scenario.
	DelayFrames int `json:"delay_frames"`
	// Summary is the demo's summary of the run (nil when it failed).
	Summary *demo.Summary `json:"summary,omitempty"`
	// Error says why the run failed ("" when it did not).
	Error string `json:"error,omitempty"`
	// Seconds is the run's wall-clock time.
	Seconds float64 `json:"seconds"`
}

// FileName is the name of point i's result file in a results directory.
func FileName(i int) string { return fmt.Sprintf("point-%05d.json", i) }

// RunPoint runs point i of s: a lockstep run of the demo on the point's scenario
// and gain, with no output. A failed run is a Result with Error set.
func RunPoint(ctx context.Context, s *Spec, i int) Result {
	p := s.Points[i]
	r := Result{Sweep: s.Name, Index: i, Points: len(s.Points), Settings: p.Settings, DelayFrames: p.DelayFrames}
	start := time.Now()
	sum, err := runDemo(ctx, s, p)
	r.Seconds = time.Since(start).Seconds()
	if err != nil {
		r.Error = err.Error()
		return r
	}
	r.Summary = sum
	return r
}

func runDemo(ctx context.Context, s *Spec, p Point) (*demo.Summary, error) {
	// The demo loads its scenario by name or path: this point's goes through a
	// file of its own.
	f, err := os.CreateTemp("", "stillsky-sweep-*.yaml")
	if err != nil {
		return nil, err
	}
	defer os.Remove(f.Name())
	_, err = f.Write(p.Scenario)
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return nil, err
	}
	return demo.Run(ctx, demo.Config{
		Scenario:     f.Name(),
		FramesOpen:   s.FramesOpen,
		FramesClosed: s.FramesClosed,
		Gain:         p.Gain,
		Lockstep:     true,
	})
}

// Write stores r in dir as FileName(r.Index), atomically.
func (r *Result) Write(dir string) error {
	b, err := json.MarshalIndent(r, "", "  ")
	if err != nil {
		return err
	}
	return atomicfile.Write(filepath.Join(dir, FileName(r.Index)), func(w io.Writer) error {
		_, err := w.Write(append(b, '\n'))
		return err
	})
}

// RunLocal runs every point of s on this machine, jobs at a time, writes each
// result into dir as it finishes, and returns the results in index order. A
// failed point does not stop the others; progress lines go to log (one per
// point). It returns an error only when a result cannot be written or ctx ends.
func RunLocal(ctx context.Context, s *Spec, dir string, jobs int, log io.Writer) ([]Result, error) {
	if jobs < 1 {
		return nil, fmt.Errorf("sweep: jobs %d: must be >= 1", jobs)
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, err
	}
	results := make([]Result, len(s.Points))
	next := make(chan int)
	var (
		wg       sync.WaitGroup
		mu       sync.Mutex
		done     int
		writeErr error
	)
	for range min(jobs, len(s.Points)) {
		wg.Go(func() {
			for i := range next {
				r := RunPoint(ctx, s, i)
				err := r.Write(dir)
				mu.Lock()
				results[i] = r
				done++
				if err != nil && writeErr == nil {
					writeErr = err
				}
				fmt.Fprintf(log, "[%d/%d] %s\n", done, len(s.Points), r.line())
				mu.Unlock()
			}
		})
	}
feed:
	for i := range s.Points {
		select {
		case next <- i:
		case <-ctx.Done():
			break feed
		}
	}
	close(next)
	wg.Wait()
	if err := ctx.Err(); err != nil {
		return results, err
	}
	return results, writeErr
}

// line describes the result on one line.
func (r *Result) line() string {
	head := fmt.Sprintf("point %d (%s)", r.Index, Describe(r.Settings))
	if r.Error != "" {
		return head + ": failed: " + r.Error
	}
	s := r.Summary
	return fmt.Sprintf("%s: Strehl %.3f open, %.3f closed; %d interlock trips; %.1f s", head, s.StrehlOpen, s.StrehlClosed, s.InterlockTrips, r.Seconds)
}
