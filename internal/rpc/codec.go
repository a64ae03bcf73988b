package rpc

import (
	"fmt"
	"math"

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
// nothing special, but it decodes slope frames into the caller's message reusing
// its slope slice — the generated decoder always allocates a fresh one — and
// encodes commands into pooled buffers. Other messages go through the standard
// codec.
type FrameCodec struct{}

// FrameCodecOption selects FrameCodec for a call.
func FrameCodecOption() grpc.CallOption { return grpc.ForceCodecV2(FrameCodec{}) }

var standard = encoding.GetCodecV2("proto")

// Name is "proto": the bytes on the wire are standard protobuf.
func (FrameCodec) Name() string { return "proto" }

// Marshal encodes v; commands go into a pooled buffer without an intermediate copy.
func (FrameCodec) Marshal(v any) (mem.BufferSlice, error) {
	m, ok := v.(*stillskyv1.StreamCommandsRequest)
	if !ok {
		return standard.Marshal(v)
	}
	size := proto.Size(m)
	pool := mem.DefaultBufferPool()
	buf := pool.Get(size)
	out, err := proto.MarshalOptions{}.MarshalAppend((*buf)[:0], m)
	if err != nil {
		pool.Put(buf)
		return nil, err
	}
	*buf = out
	return mem.BufferSlice{mem.NewBuffer(buf, pool)}, nil
}

// Unmarshal decodes data into v; slope frames reuse v's slope slice.
func (FrameCodec) Unmarshal(data mem.BufferSlice, v any) error {
	f, ok := v.(*stillskyv1.StreamFramesResponse)
	if !ok {
		return standard.Unmarshal(data, v)
	}
	if len(data) == 1 {
		return DecodeFrame(data[0].ReadOnlyData(), f)
	}
	buf := data.MaterializeToBuffer(mem.DefaultBufferPool())
	defer buf.Free()
	return DecodeFrame(buf.ReadOnlyData(), f)
}

// DecodeFrame decodes the protobuf encoding of a StreamFramesResponse into f,
// overwriting every field and appending the slopes into f.Slopes[:0], so that a
// frame no larger than the previous one allocates nothing. Unknown fields are
// skipped, as the standard decoder would.
func DecodeFrame(b []byte, f *stillskyv1.StreamFramesResponse) error {
	f.FrameNumber, f.ReadoutEndNs, f.Offset, f.ChunkIndex, f.ChunkCount = 0, 0, 0, 0, 0
	slopes := f.Slopes[:0]
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
	f.Slopes = slopes
	return nil
}
