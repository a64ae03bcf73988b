package daemon

import stillskyv1 "stillsky/proto/stillsky/v1"

// verdict is what the assembler made of one message of the camera stream.
type verdict uint8

const (
	// chunkPartial: accepted; the frame awaits more chunks.
	chunkPartial verdict = iota
	// frameComplete: accepted, and the frame is whole in assembler.slopes.
	frameComplete
	// chunkIgnored: a later chunk of a frame already refused (and counted).
	chunkIgnored
	// The message is refused, and so is the frame it belongs to.
	refusedLength    // wrong offset or length, or the frame ended short
	refusedNonFinite // a NaN or an Inf
	refusedDuplicate // the number of the previous frame again
	refusedOrder     // a number below the previous frame's, or a chunk of a frame whose start never came
	// Pixel frames (pixels.go):
	refusedPixelCount  // a chunk's pixel bytes are not 2 × its rows × the detector's width
	refusedChunkLayout // rows not continuing the last chunk, not whole windows, past the detector, or a frame ending short
	refusedDeadRow     // a window row of a valid subaperture reads 0 throughout (a dead readout line)
	refusedSaturated   // a valid window has a pixel at the saturation level: its centroid is biased
	refusedHotPixel    // a valid window's brightest pixel towers over its neighbours (a hot pixel or a cosmic ray)
)

// refused reports whether v refuses its message.
func (v verdict) refused() bool { return v >= refusedLength }

// assembly is the outcome of one message.
type assembly struct {
	verdict verdict
	// abandoned: the message began a new frame while the previous one still
	// awaited chunks; that frame is refused too (for its length), one more
	// refusal to count.
	abandoned bool
	// from and to are the slope indices [from, to) the message filled, when
	// accepted; from == 0 for the first message of a frame.
	from, to int
	// pixels: every row of a pixel frame arrived and was decoded (in
	// pixelFrames.frame), even if the frame is then refused for a defect.
	pixels bool
	// dropped, for a complete frame, is the number of frames lost since the
	// previous one: a gap in the camera's frame numbers.
	dropped uint64
}

// assembler puts frames together from the camera's messages — a whole frame, or
// the chunks of one in order — and validates them: the frame numbers only
// increase, each message continues where the last one ended, a frame ends exactly
// at its length, and every value is finite. It is a pure value: no clock, no
// metrics, no allocation; the caller counts its verdicts.
type assembler struct {
	slopes []float32 // the frame, as far as it is assembled
	// flux is the guide-star flux of the frame, summed over its chunks so far
	// (photo-electrons; 0 from a camera that does not report it).
	flux float64
	// next is the slope index the next chunk must start at: 0 between frames,
	// -1 for the rest of a refused frame.
	next int
	// last is the newest frame number consumed (completed or refused): the
	// reference for duplicates, order and gaps. frame is the number of the
	// frame being assembled.
	last, frame uint64
	// px, for a pixel camera, centroids its chunks into slopes; nil for a
	// slope camera.
	px *pixelFrames
}

func newAssembler(slopes int) assembler { return assembler{slopes: make([]float32, slopes)} }

// add takes one message.
func (a *assembler) add(f *stillskyv1.StreamFramesResponse) assembly {
	var r assembly
	num := f.GetFrameNumber()
	if f.GetChunkIndex() == 0 {
		if a.next > 0 {
			// The previous frame never got its last chunk: refused, and its number
			// consumed so it is not also counted as a gap.
			r.abandoned = true
			a.last = a.frame
		}
		if a.last != 0 {
			switch {
			case num == a.last:
				r.verdict = refusedDuplicate
				return r
			case num < a.last:
				r.verdict = refusedOrder
				return r
			}
		}
		a.next, a.frame = 0, num
	} else if a.next < 0 && num == a.frame {
		r.verdict = chunkIgnored
		return r
	} else if a.next <= 0 || num != a.frame {
		// A chunk of a frame whose start never came. A frame in progress is
		// abandoned with it, one refusal for the pair; both numbers are
		// consumed, so neither is also a gap.
		a.next = -1
		a.last = max(a.last, a.frame, num)
		a.frame = num
		r.verdict = refusedOrder
		return r
	}
	if a.px != nil {
		return a.addPixels(f, r, num)
	}
	s := f.GetSlopes()
	off := int(f.GetOffset())
	if off != a.next || len(s) == 0 || len(s) > len(a.slopes)-off {
		return a.refuse(r, num, refusedLength)
	}
	for _, v := range s {
		if v-v != 0 { // NaN or ±Inf
			return a.refuse(r, num, refusedNonFinite)
		}
	}
	copy(a.slopes[off:], s)
	if off == 0 {
		a.flux = 0
	}
	a.flux += float64(f.GetFluxElectrons())
	a.next = off + len(s)
	r.from, r.to = off, a.next
	if a.next < len(a.slopes) {
		if f.GetChunkIndex()+1 >= f.GetChunkCount() {
			// The frame's last (or only) message, and still short.
			return a.refuse(r, num, refusedLength)
		}
		r.verdict = chunkPartial
		return r
	}
	a.next = 0
	if gap := num - a.last; a.last != 0 && gap > 1 {
		r.dropped = gap - 1
	}
	a.last = num
	r.verdict = frameComplete
	return r
}

// refuse marks frame num as received but refused: the rest of its chunks are
// ignored, and its number is not a gap when the next frame comes.
func (a *assembler) refuse(r assembly, num uint64, v verdict) assembly {
	a.next = -1
	a.last = num
	r.verdict, r.from, r.to = v, 0, 0
	return r
}
