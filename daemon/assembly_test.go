package daemon

import (
	"math"
	"testing"

	stillskyv1 "stillsky/proto/stillsky/v1"
)

// msg is one camera message of a table row: frame number, chunk index and count,
// offset and number of slopes; nan puts a NaN in it.
type msg struct {
	num             uint64
	index, count    uint32
	offset, n       int
	nan             bool
	verdict         verdict
	abandoned       bool
	from, to        int
	dropped         uint64
	wantFrameSlopes bool // the frame is whole: check every slope arrived in place
}

func (m msg) frame() *stillskyv1.StreamFramesResponse {
	s := make([]float32, m.n)
	for i := range s {
		// The slope's index in the frame, so that a misplaced copy shows.
		s[i] = float32(m.offset + i + 1)
	}
	if m.nan && m.n > 0 {
		s[m.n/2] = float32(math.NaN())
	}
	return &stillskyv1.StreamFramesResponse{FrameNumber: m.num, ChunkIndex: m.index, ChunkCount: m.count, Offset: uint32(m.offset), Slopes: s}
}

// whole is an accepted whole frame of 6 slopes.
func whole(num, dropped uint64) msg {
	return msg{num: num, count: 1, n: 6, verdict: frameComplete, to: 6, dropped: dropped, wantFrameSlopes: true}
}

func TestAssembler(t *testing.T) {
	const slopes = 6
	for _, tc := range []struct {
		name string
		msgs []msg
	}{
		{"whole frames in order", []msg{whole(1, 0), whole(2, 0), whole(3, 0)}},
		{"a gap in the numbers counts the frames lost", []msg{whole(1, 0), whole(4, 2)}},
		{"the first frame has no gap, whatever its number", []msg{whole(40, 0)}},
		{"duplicate", []msg{whole(1, 0), {num: 1, count: 1, n: 6, verdict: refusedDuplicate}, whole(2, 0)}},
		{"going back", []msg{whole(5, 0), {num: 3, count: 1, n: 6, verdict: refusedOrder}, whole(6, 0)}},
		{"short frame", []msg{{num: 1, count: 1, n: 4, verdict: refusedLength}, whole(2, 0)}},
		{"long frame", []msg{{num: 1, count: 1, n: 7, verdict: refusedLength}}},
		{"empty frame", []msg{{num: 1, count: 1, verdict: refusedLength}}},
		{"non-finite value; the refused number is no gap", []msg{whole(1, 0), {num: 2, count: 1, n: 6, nan: true, verdict: refusedNonFinite}, whole(3, 0)}},
		{"chunks in order", []msg{
			{num: 1, index: 0, count: 3, n: 2, verdict: chunkPartial, to: 2},
			{num: 1, index: 1, count: 3, offset: 2, n: 2, verdict: chunkPartial, from: 2, to: 4},
			{num: 1, index: 2, count: 3, offset: 4, n: 2, verdict: frameComplete, from: 4, to: 6, wantFrameSlopes: true},
		}},
		{"chunk at the wrong offset", []msg{
			{num: 1, count: 2, n: 3, verdict: chunkPartial, to: 3},
			{num: 1, index: 1, count: 2, offset: 4, n: 2, verdict: refusedLength},
			whole(2, 0),
		}},
		{"the rest of a refused frame is ignored", []msg{
			{num: 1, count: 2, n: 3, nan: true, verdict: refusedNonFinite},
			{num: 1, index: 1, count: 2, offset: 3, n: 3, verdict: chunkIgnored},
			whole(2, 0),
		}},
		{"a chunk whose frame never started", []msg{
			{num: 1, index: 1, count: 2, offset: 3, n: 3, verdict: refusedOrder},
			whole(2, 0),
		}},
		{"the last chunk leaves the frame short", []msg{
			{num: 1, count: 2, n: 2, verdict: chunkPartial, to: 2},
			{num: 1, index: 1, count: 2, offset: 2, n: 2, verdict: refusedLength},
		}},
		{"a new frame abandons an incomplete one", []msg{
			{num: 1, count: 2, n: 3, verdict: chunkPartial, to: 3},
			{num: 2, count: 2, n: 3, verdict: chunkPartial, abandoned: true, to: 3},
			{num: 2, index: 1, count: 2, offset: 3, n: 3, verdict: frameComplete, from: 3, to: 6, wantFrameSlopes: true},
		}},
		{"a frame lost after an abandoned one is a gap", []msg{
			{num: 1, count: 2, n: 3, verdict: chunkPartial, to: 3},
			{num: 3, count: 1, n: 6, verdict: frameComplete, abandoned: true, to: 6, dropped: 1},
		}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			a := newAssembler(slopes)
			for i, m := range tc.msgs {
				got := a.add(m.frame())
				want := assembly{verdict: m.verdict, abandoned: m.abandoned, from: m.from, to: m.to, dropped: m.dropped}
				if got != want {
					t.Fatalf("message %d (frame %d, chunk %d/%d at %d, %d slopes): got %+v, want %+v", i, m.num, m.index, m.count, m.offset, m.n, got, want)
				}
				if m.wantFrameSlopes {
					for j, v := range a.slopes {
						if v != float32(j+1) {
							t.Fatalf("message %d: slope %d = %g, want %d", i, j, v, j+1)
						}
					}
				}
			}
		})
	}
}

// TestAssemblerSumsFlux checks that a frame's guide-star flux is the sum of
// its chunks' and starts again with each frame.
func TestAssemblerSumsFlux(t *testing.T) {
	a := newAssembler(6)
	chunk := func(num uint64, index uint32, flux float32) verdict {
		m := msg{num: num, index: index, count: 3, offset: 2 * int(index), n: 2}.frame()
		m.FluxElectrons = flux
		return a.add(m).verdict
	}
	for num := uint64(1); num <= 2; num++ {
		base := float32(100 * num)
		for i := range uint32(3) {
			v := chunk(num, i, base+float32(i))
			if want := (i == 2); (v == frameComplete) != want {
				t.Fatalf("frame %d chunk %d: verdict %v", num, i, v)
			}
		}
		if want := 3*float64(base) + 3; a.flux != want {
			t.Errorf("frame %d: flux %g, want %g (the sum of its chunks)", num, a.flux, want)
		}
	}
}
