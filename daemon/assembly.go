package daemon

import (
	"github.com/prometheus/client_golang/prometheus"

	stillskyv1 "stillsky/proto/stillsky/v1"
)

// assemble validates a frame message (a whole frame or one chunk) and copies its
// slopes into the frame buffer; with pipelined reconstruction it also multiplies
// the chunk's columns at once. It reports whether the frame is complete, and false
// in ok when the message was rejected (and counted).
func (rt *realtime) assemble(f *stillskyv1.StreamFramesResponse) (complete, ok bool) {
	num := f.GetFrameNumber()
	first := f.GetChunkIndex() == 0
	if first {
		if rt.next > 0 {
			// The previous frame never got its last chunk: refused, and its number
			// consumed so it is not also counted as a gap.
			rt.reject(rt.d.m.rejLength)
			rt.lastNum = rt.assembling
		}
		if rt.lastNum != 0 {
			switch {
			case num == rt.lastNum:
				return false, rt.reject(rt.d.m.rejDup)
			case num < rt.lastNum:
				return false, rt.reject(rt.d.m.rejOrder)
			}
		}
		rt.next, rt.assembling = 0, num
		rt.pipe = nil
		if loop := rt.d.loopPtr.Load(); f.GetChunkCount() > 1 && loop != nil && rt.state == stateClosed &&
			loopState(rt.d.want.Load()) == stateClosed {
			rt.pipe = loop
		}
	} else if rt.next < 0 && num == rt.assembling {
		// The rest of a frame already refused (and counted).
		return false, false
	} else if rt.next <= 0 || num != rt.assembling {
		// A chunk of a frame whose start never came. A frame in progress is
		// abandoned with it, one refusal for the pair; both numbers are
		// consumed, so neither is also a gap.
		rt.next = -1
		rt.lastNum = max(rt.lastNum, rt.assembling, num)
		rt.assembling = num
		return false, rt.reject(rt.d.m.rejOrder)
	}
	s := f.GetSlopes()
	off := int(f.GetOffset())
	if off != rt.next || len(s) == 0 || len(s) > len(rt.slopes)-off {
		rt.refuseFrame(num)
		return false, rt.reject(rt.d.m.rejLength)
	}
	for _, v := range s {
		if v-v != 0 {
			rt.refuseFrame(num)
			return false, rt.reject(rt.d.m.rejNonFinite)
		}
	}
	copy(rt.slopes[off:], s)
	rt.next = off + len(s)
	if rt.pipe != nil {
		rt.pipe.StepChunk(rt.slopes, off, rt.next)
	}
	if rt.next < len(rt.slopes) {
		if f.GetChunkIndex()+1 >= f.GetChunkCount() {
			// The frame's last (or only) message, and still short.
			rt.refuseFrame(num)
			return false, rt.reject(rt.d.m.rejLength)
		}
		return false, true
	}
	rt.next = 0
	return true, true
}

// refuseFrame marks frame num as received but refused: the rest of its chunks are
// ignored, and its number is not a gap (dropped) when the next frame comes.
func (rt *realtime) refuseFrame(num uint64) {
	rt.next = -1
	rt.lastNum = num
}

// reject counts a refused frame; it returns false for the caller's ok.
func (rt *realtime) reject(c prometheus.Counter) bool {
	c.Inc()
	rt.d.stats.rejected.Add(1)
	return false
}
