package rpc

import (
	"fmt"
	"math"
	"sync/atomic"

	"google.golang.org/grpc"
	"google.golang.org/grpc/encoding"
	_ "google.golang.org/grpc/encoding/proto" // registers the standard codec we fall back on
	"google.golang.org/grpc/mem"
	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

	stillskyv1 "stillsky/proto/stillsky/v1"
)

// FrameCodec is the wire codec of the loop's real-time streams. It speaks the
// standard protobuf encoding (content subtype "proto"), so the devices need
// nothing special, but it decodes slope frames and mirror acknowledgements into
// the caller's message reusing its slices — the generated decoder always
// allocates fresh ones — and
// encodes commands into buffers it owns (see sendSlot). Other messages go
// through the standard codec.
type FrameCodec struct{}

// FrameCodecOption selects FrameCodec for a call.
func FrameCodecOption() grpc.CallOption { return grpc.ForceCodecV2(FrameCodec{}) }

var standard = encoding.GetCodecV2("proto")

// Name is "proto": the bytes on the wire are standard protobuf.
func (FrameCodec) Name() string { return "proto" }

// Marshal encodes v; a command goes into a free send slot, or into a buffer of
// the shared pool when every slot is in flight.
func (FrameCodec) Marshal(v any) (mem.BufferSlice, error) {
	m, ok := v.(*stillskyv1.StreamCommandsRequest)
	if !ok {
		return standard.Marshal(v)
	}
	size := proto.Size(m)
	enc := proto.MarshalOptions{UseCachedSize: true}
	if s := freeSlot(); s != nil {
		s.grow(size)
		out, err := enc.MarshalAppend(s.data[:0], m)
		if err != nil {
			s.busy.Store(false)
			return nil, err
		}
		s.data = out
		s.buf[0] = mem.NewBuffer(&s.data, s)
		return s.buf[:], nil
	}
	pool := mem.DefaultBufferPool()
	buf := pool.Get(size)
	out, err := enc.MarshalAppend((*buf)[:0], m)
	if err != nil {
		pool.Put(buf)
		return nil, err
	}
	*buf = out
	return mem.BufferSlice{mem.NewBuffer(buf, pool)}, nil
}

// sendSlot holds one encoded command while gRPC's transport owns it. gRPC
// counts references to the buffers a codec returns and hands a buffer back to
// its pool once the last holder (the sender and the connection's writer) lets
// go; a slot is its own pool, so that hand-back marks it free. Reusing the
// slot's bytes and its one-element BufferSlice is what makes a steady loop's
// send allocate nothing in this codec: a fresh BufferSlice per message is a
// heap object, and mem.NewBuffer wraps a buffer of 1 KiB capacity or less in a
// plain slice (another) and never returns it, so a slot keeps its capacity
// above that.
type sendSlot struct {
	busy atomic.Bool
	data []byte
	buf  [1]mem.Buffer
}

// sendSlots is how many commands may be in flight before Marshal falls back to
// the shared pool: a loop has one or two (the one being written and the next);
// a stalled mirror link piles up more, and those cost an allocation each, as
// would a slot whose buffer gRPC never handed back (it frees them on every path
// we know of, closed streams included).
const sendSlots = 16

var (
	slots    [sendSlots]sendSlot
	nextSlot atomic.Uint32
)

// freeSlot claims a free slot, or returns nil when all are in flight.
func freeSlot() *sendSlot {
	start := nextSlot.Add(1)
	for i := range uint32(sendSlots) {
		s := &slots[(start+i)%sendSlots]
		if s.busy.CompareAndSwap(false, true) {
			return s
		}
	}
	return nil
}

// grow makes room for n bytes, with a capacity above gRPC's pooling threshold
// so that mem.NewBuffer counts references and calls Put.
func (s *sendSlot) grow(n int) {
	c := cap(s.data)
	if c >= n && !mem.IsBelowBufferPoolingThreshold(c) {
		return
	}
	c = max(n, 4<<10)
	for mem.IsBelowBufferPoolingThreshold(c) {
		c *= 2
	}
	s.data = make([]byte, 0, c)
}

// Get serves from the shared pool; gRPC only ever calls Put on a buffer's pool.
func (s *sendSlot) Get(n int) *[]byte { return mem.DefaultBufferPool().Get(n) }

// Put frees the slot when handed its own bytes.
func (s *sendSlot) Put(b *[]byte) {
	if b != &s.data {
		mem.DefaultBufferPool().Put(b)
		return
	}
	s.busy.Store(false)
}

// Unmarshal decodes data into v; slope frames and mirror acknowledgements
// reuse v's slices.
func (FrameCodec) Unmarshal(data mem.BufferSlice, v any) error {
	switch v.(type) {
	case *stillskyv1.StreamFramesResponse, *stillskyv1.StreamCommandsResponse:
	default:
		return standard.Unmarshal(data, v)
	}
	var b []byte
	if len(data) == 1 {
		b = data[0].ReadOnlyData()
	} else {
		buf := data.MaterializeToBuffer(mem.DefaultBufferPool())
		defer buf.Free()
		b = buf.ReadOnlyData()
	}
	if f, ok := v.(*stillskyv1.StreamFramesResponse); ok {
		return DecodeFrame(b, f)
	}
	return DecodeAck(b, v.(*stillskyv1.StreamCommandsResponse))
}

// DecodeAck decodes the protobuf encoding of a StreamCommandsResponse into a,
// overwriting every field and appending the earlier_* lists into a's slices
// cut to length 0, so that a batch no longer than the previous one allocates
// nothing. Packed and unpacked lists are both accepted, and unknown fields
// skipped, as the standard decoder does.
func DecodeAck(b []byte, a *stillskyv1.StreamCommandsResponse) error {
	a.FrameNumber, a.ReceivedNs, a.Clipped = 0, 0, 0
	nums, ats, clipped := a.EarlierFrameNumbers[:0], a.EarlierReceivedNs[:0], a.EarlierClipped[:0]
	set := func(num protowire.Number, v uint64) {
		switch num {
		case 1:
			a.FrameNumber = v
		case 2:
			a.ReceivedNs = int64(v)
		case 3:
			a.Clipped = uint32(v)
		case 4:
			nums = append(nums, v)
		case 5:
			ats = append(ats, int64(v))
		case 6:
			clipped = append(clipped, uint32(v))
		}
	}
	for len(b) > 0 {
		num, typ, n := protowire.ConsumeTag(b)
		if n < 0 {
			return fmt.Errorf("mirror acknowledgement: bad tag: %w", protowire.ParseError(n))
		}
		b = b[n:]
		switch {
		case num >= 1 && num <= 6 && typ == protowire.VarintType:
			v, n := protowire.ConsumeVarint(b)
			if n < 0 {
				return fmt.Errorf("mirror acknowledgement: bad field %d: %w", num, protowire.ParseError(n))
			}
			b = b[n:]
			set(num, v)
		case num >= 4 && num <= 6 && typ == protowire.BytesType: // a packed list
			p, n := protowire.ConsumeBytes(b)
			if n < 0 {
				return fmt.Errorf("mirror acknowledgement: bad field %d: %w", num, protowire.ParseError(n))
			}
			b = b[n:]
			for len(p) > 0 {
				v, m := protowire.ConsumeVarint(p)
				if m < 0 {
					return fmt.Errorf("mirror acknowledgement: bad field %d: %w", num, protowire.ParseError(m))
				}
				p = p[m:]
				set(num, v)
			}
		default:
			n = protowire.ConsumeFieldValue(num, typ, b)
			if n < 0 {
				return fmt.Errorf("mirror acknowledgement: bad field %d: %w", num, protowire.ParseError(n))
			}
			b = b[n:]
		}
	}
	if len(ats) != len(nums) || len(clipped) != len(nums) {
		return fmt.Errorf("mirror acknowledgement: earlier lists of lengths %d, %d, %d: want equal", len(nums), len(ats), len(clipped))
	}
	a.EarlierFrameNumbers, a.EarlierReceivedNs, a.EarlierClipped = nums, ats, clipped
	return nil
}

// DecodeFrame decodes the protobuf encoding of a StreamFramesResponse into f,
// overwriting every field and appending the slopes into f.Slopes[:0] (a pixel
// frame's bytes into f.Pixels[:0]), so that a frame no larger than the
// previous one allocates nothing. Unknown fields are
// skipped, as the standard decoder would.
func DecodeFrame(b []byte, f *stillskyv1.StreamFramesResponse) error {
	f.FrameNumber, f.ReadoutEndNs, f.Offset, f.ChunkIndex, f.ChunkCount, f.FluxElectrons = 0, 0, 0, 0, 0, 0
	f.FirstRow, f.RowCount = 0, 0
	slopes, pixels := f.Slopes[:0], f.Pixels[:0]
	for len(b) > 0 {
		num, typ, n := protowire.ConsumeTag(b)
		if n < 0 {
			return fmt.Errorf("slope frame: bad tag: %w", protowire.ParseError(n))
		}
		b = b[n:]
		switch {
		case num == 6 && typ == protowire.BytesType:
			p, n := protowire.ConsumeBytes(b)
			if n < 0 || len(p)%4 != 0 {
				return fmt.Errorf("slope frame: bad packed slopes")
			}
			b = b[n:]
			for ; len(p) > 0; p = p[4:] {
				v, _ := protowire.ConsumeFixed32(p)
				slopes = append(slopes, math.Float32frombits(v))
			}
			continue
		case num == 6 && typ == protowire.Fixed32Type:
			v, n := protowire.ConsumeFixed32(b)
			if n < 0 {
				return fmt.Errorf("slope frame: bad slope: %w", protowire.ParseError(n))
			}
			b = b[n:]
			slopes = append(slopes, math.Float32frombits(v))
			continue
		case num == 8 && typ == protowire.BytesType:
			p, n := protowire.ConsumeBytes(b)
			if n < 0 {
				return fmt.Errorf("pixel frame: bad pixels: %w", protowire.ParseError(n))
			}
			b = b[n:]
			pixels = append(pixels, p...) // copied: the transport's buffer is freed after the decode
			continue
		case (num == 9 || num == 10) && typ == protowire.VarintType:
			v, n := protowire.ConsumeVarint(b)
			if n < 0 {
				return fmt.Errorf("pixel frame: bad field %d: %w", num, protowire.ParseError(n))
			}
			b = b[n:]
			if num == 9 {
				f.FirstRow = uint32(v)
			} else {
				f.RowCount = uint32(v)
			}
			continue
		case num == 7 && typ == protowire.Fixed32Type:
			v, n := protowire.ConsumeFixed32(b)
			if n < 0 {
				return fmt.Errorf("slope frame: bad flux: %w", protowire.ParseError(n))
			}
			b = b[n:]
			f.FluxElectrons = math.Float32frombits(v)
			continue
		case num >= 1 && num <= 5 && typ == protowire.VarintType:
			v, n := protowire.ConsumeVarint(b)
			if n < 0 {
				return fmt.Errorf("slope frame: bad field %d: %w", num, protowire.ParseError(n))
			}
			b = b[n:]
			switch num {
			case 1:
				f.FrameNumber = v
			case 2:
				f.ReadoutEndNs = int64(v)
			case 3:
				f.Offset = uint32(v)
			case 4:
				f.ChunkIndex = uint32(v)
			case 5:
				f.ChunkCount = uint32(v)
			}
			continue
		}
		n = protowire.ConsumeFieldValue(num, typ, b)
		if n < 0 {
			return fmt.Errorf("slope frame: bad field %d: %w", num, protowire.ParseError(n))
		}
		b = b[n:]
	}
	f.Slopes, f.Pixels = slopes, pixels
	return nil
}
