package daemon

import (
	"errors"
	"testing"

	stillskyv1 "stillsky/proto/stillsky/v1"
)

// feed is a camera stream that hands out the frame numbers it is sent, then
// an error once it is closed.
type feed chan uint64

func (f feed) RecvMsg(m any) error {
	n, ok := <-f
	if !ok {
		return errors.New("stream closed")
	}
	fr := m.(*stillskyv1.StreamFramesResponse)
	fr.FrameNumber = n
	fr.Slopes = append(fr.Slopes[:0], float32(n))
	return nil
}

// The spinning real-time thread's poller hands over every frame in order,
// whether it comes while the real-time goroutine polls (a spin of 1 ms) or
// after it has blocked (no spin), with each frame's own message intact until
// handed back, allocates nothing per frame, and passes the stream's error on.
func TestPollerHandsOverEveryFrame(t *testing.T) {
	for _, spin := range []int64{1e6, 1} {
		frames := make(feed, 1)
		p := newPoller(frames, &stillskyv1.StreamFramesResponse{Slopes: make([]float32, 0, 1)}, spin)
		n := uint64(0)
		step := func() {
			n++
			frames <- n
			f, err := p.next()
			if err != nil || f.GetFrameNumber() != n || len(f.Slopes) != 1 || f.Slopes[0] != float32(n) {
				t.Fatalf("spin %d ns: frame %d: got %v, %v", spin, n, f, err)
			}
			p.done(f)
		}
		for range 10 {
			step()
		}
		if a := testing.AllocsPerRun(200, step); a != 0 {
			t.Errorf("spin %d ns: %.2f allocations per frame", spin, a)
		}
		close(frames)
		if _, err := p.next(); err == nil {
			t.Errorf("spin %d ns: the stream's error was not passed on", spin)
		}
		p.stop()
	}
}
