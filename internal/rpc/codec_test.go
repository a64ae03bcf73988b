package rpc

import (
	"bytes"
	"math/rand/v2"
	"testing"

	"google.golang.org/grpc/mem"
	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

	stillskyv1 "stillsky/proto/stillsky/v1"
)

// DecodeFrame must agree with the generated protobuf decoder, the reference.
func TestDecodeFrameMatchesProto(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for trial := 0; trial < 200; trial++ {
		in := &stillskyv1.StreamFramesResponse{
			FrameNumber:  rng.Uint64(),
			ReadoutEndNs: rng.Int64() - rng.Int64(),
			Offset:       rng.Uint32() % 4096,
			ChunkIndex:   rng.Uint32() % 8,
			ChunkCount:   rng.Uint32() % 9,
		}
		if trial%2 == 0 {
			in.FluxElectrons = float32(rng.ExpFloat64() * 2000)
		}
		for range rng.IntN(50) {
			in.Slopes = append(in.Slopes, float32(rng.NormFloat64()))
		}
		if trial%4 == 1 { // a pixel chunk (frame format 2)
			in.FirstRow, in.RowCount = rng.Uint32()%512, 1+rng.Uint32()%64
			in.Pixels = make([]byte, 2*rng.IntN(300))
			for i := range in.Pixels {
				in.Pixels[i] = byte(rng.Uint32())
			}
		}
		b, err := proto.Marshal(in)
		if err != nil {
			t.Fatal(err)
		}
		if trial%3 == 0 { // an unknown field, as a newer camera might send
			b = protowire.AppendTag(b, 99, protowire.BytesType)
			b = protowire.AppendBytes(b, []byte("future"))
		}
		want := &stillskyv1.StreamFramesResponse{}
		if err := proto.Unmarshal(b, want); err != nil {
			t.Fatal(err)
		}
		got := &stillskyv1.StreamFramesResponse{FrameNumber: 7, ChunkIndex: 3, FluxElectrons: 5, Slopes: make([]float32, 64),
			FirstRow: 9, RowCount: 9, Pixels: []byte{1, 2, 3}}
		if err := DecodeFrame(b, got); err != nil {
			t.Fatal(err)
		}
		want.ProtoReflect().SetUnknown(nil)
		if !proto.Equal(got, want) {
			t.Fatalf("trial %d: decoded %v, want %v", trial, got, want)
		}
	}
}

func TestDecodeFrameRefusesGarbage(t *testing.T) {
	f := &stillskyv1.StreamFramesResponse{}
	for _, b := range [][]byte{{0x32, 0x05, 1, 2, 3, 4, 5}, {0x08}, {0xff, 0xff, 0xff}} {
		if err := DecodeFrame(b, f); err == nil {
			t.Errorf("DecodeFrame(%x) accepted malformed input", b)
		}
	}
}

func TestDecodeFrameReusesSlopes(t *testing.T) {
	in := &stillskyv1.StreamFramesResponse{FrameNumber: 1, Slopes: make([]float32, 1000)}
	b, _ := proto.Marshal(in)
	f := &stillskyv1.StreamFramesResponse{Slopes: make([]float32, 0, 1000)}
	data := mem.BufferSlice{mem.SliceBuffer(b)}
	allocs := testing.AllocsPerRun(100, func() {
		if err := (FrameCodec{}).Unmarshal(data, f); err != nil {
			t.Fatal(err)
		}
	})
	if allocs != 0 {
		t.Fatalf("%v allocations per decoded frame, want 0", allocs)
	}
}

func FuzzDecodeFrame(f *testing.F) {
	seed, _ := proto.Marshal(&stillskyv1.StreamFramesResponse{FrameNumber: 5, Slopes: []float32{1, 2, 3}})
	f.Add(seed)
	f.Add([]byte{})
	f.Fuzz(func(t *testing.T, b []byte) {
		var want stillskyv1.StreamFramesResponse
		werr := proto.Unmarshal(b, &want)
		var got stillskyv1.StreamFramesResponse
		gerr := DecodeFrame(b, &got)
		if werr == nil && gerr != nil {
			t.Fatalf("standard decoder accepts %x, DecodeFrame refuses: %v", b, gerr)
		}
		if werr == nil && gerr == nil {
			want.ProtoReflect().SetUnknown(nil)
			if !proto.Equal(&got, &want) {
				t.Fatalf("decoded %v, want %v", &got, &want)
			}
		}
	})
}

// Commands encoded by FrameCodec must be byte for byte what the generated
// protobuf encoder writes (the reference), whether they go into a send slot or,
// with every slot in flight, into the shared pool.
func TestMarshalCommandMatchesProto(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	var held []mem.BufferSlice
	for trial := range 3 * sendSlots {
		in := &stillskyv1.StreamCommandsRequest{FrameNumber: rng.Uint64()}
		for range rng.IntN(600) {
			in.Values = append(in.Values, float32(rng.NormFloat64()))
		}
		want, err := proto.Marshal(in)
		if err != nil {
			t.Fatal(err)
		}
		got, err := FrameCodec{}.Marshal(in)
		if err != nil {
			t.Fatal(err)
		}
		if !bytes.Equal(got.Materialize(), want) {
			t.Fatalf("trial %d: encoded %x, want %x", trial, got.Materialize(), want)
		}
		held = append(held, got) // in flight: more than sendSlots at once
	}
	// A message still held must not have been overwritten by a later one.
	rng = rand.New(rand.NewPCG(5, 6))
	for trial, got := range held {
		in := &stillskyv1.StreamCommandsRequest{FrameNumber: rng.Uint64()}
		for range rng.IntN(600) {
			in.Values = append(in.Values, float32(rng.NormFloat64()))
		}
		want, _ := proto.Marshal(in)
		if !bytes.Equal(got.Materialize(), want) {
			t.Fatalf("held message %d changed while in flight", trial)
		}
		got.Free()
	}
}

// A command encoded and released as gRPC does it — the sender's and the
// connection writer's references, freed in either order — allocates nothing.
func TestMarshalCommandAllocatesNothing(t *testing.T) {
	in := &stillskyv1.StreamCommandsRequest{FrameNumber: 1, Values: make([]float32, 509)}
	allocs := testing.AllocsPerRun(200, func() {
		b, err := FrameCodec{}.Marshal(in)
		if err != nil {
			t.Fatal(err)
		}
		b.Ref()
		b.Free()
		b.Free()
	})
	if allocs != 0 {
		t.Fatalf("%v allocations per encoded command, want 0", allocs)
	}
}

// DecodeAck must agree with the generated protobuf decoder, the reference, on
// single acknowledgements and batches, packed (as Go encodes them) and
// unpacked (as proto3 decoders must also accept), and reuse its slices.
func TestDecodeAckMatchesProto(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	got := &stillskyv1.StreamCommandsResponse{EarlierFrameNumbers: make([]uint64, 0, 64),
		EarlierReceivedNs: make([]int64, 0, 64), EarlierClipped: make([]uint32, 0, 64)}
	for trial := 0; trial < 200; trial++ {
		in := &stillskyv1.StreamCommandsResponse{FrameNumber: rng.Uint64(), ReceivedNs: rng.Int64(), Clipped: rng.Uint32() % 900}
		for range rng.IntN(50) {
			in.EarlierFrameNumbers = append(in.EarlierFrameNumbers, rng.Uint64())
			in.EarlierReceivedNs = append(in.EarlierReceivedNs, rng.Int64()-rng.Int64())
			in.EarlierClipped = append(in.EarlierClipped, rng.Uint32())
		}
		b, err := proto.Marshal(in)
		if err != nil {
			t.Fatal(err)
		}
		if trial%2 == 1 { // the same lists unpacked, field by field
			b = b[:0]
			b = protowire.AppendTag(b, 1, protowire.VarintType)
			b = protowire.AppendVarint(b, in.FrameNumber)
			for i := range in.EarlierFrameNumbers {
				b = protowire.AppendTag(b, 4, protowire.VarintType)
				b = protowire.AppendVarint(b, in.EarlierFrameNumbers[i])
				b = protowire.AppendTag(b, 6, protowire.VarintType)
				b = protowire.AppendVarint(b, uint64(in.EarlierClipped[i]))
				b = protowire.AppendTag(b, 5, protowire.VarintType)
				b = protowire.AppendVarint(b, uint64(in.EarlierReceivedNs[i]))
			}
			b = protowire.AppendTag(b, 2, protowire.VarintType)
			b = protowire.AppendVarint(b, uint64(in.ReceivedNs))
			b = protowire.AppendTag(b, 3, protowire.VarintType)
			b = protowire.AppendVarint(b, uint64(in.Clipped))
			b = protowire.AppendTag(b, 99, protowire.BytesType) // as a newer mirror might send
			b = protowire.AppendBytes(b, []byte("future"))
		}
		want := &stillskyv1.StreamCommandsResponse{}
		if err := proto.Unmarshal(b, want); err != nil {
			t.Fatal(err)
		}
		want.ProtoReflect().SetUnknown(nil)
		if err := DecodeAck(b, got); err != nil {
			t.Fatal(err)
		}
		if len(want.EarlierFrameNumbers) == 0 { // proto.Equal tells nil from empty
			want.EarlierFrameNumbers, want.EarlierReceivedNs, want.EarlierClipped = got.EarlierFrameNumbers, got.EarlierReceivedNs, got.EarlierClipped
		}
		if !proto.Equal(got, want) {
			t.Fatalf("trial %d: decoded %v, want %v", trial, got, want)
		}
	}
	b, _ := proto.Marshal(&stillskyv1.StreamCommandsResponse{FrameNumber: 9, EarlierFrameNumbers: []uint64{7, 8}, EarlierReceivedNs: []int64{1, 2}, EarlierClipped: []uint32{0, 0}})
	if n := testing.AllocsPerRun(100, func() { _ = DecodeAck(b, got) }); n != 0 {
		t.Errorf("DecodeAck allocated %.1f times per batch into reused lists", n)
	}
	bad, _ := proto.Marshal(&stillskyv1.StreamCommandsResponse{EarlierFrameNumbers: []uint64{7, 8}, EarlierReceivedNs: []int64{1}})
	for _, b := range [][]byte{bad, {0x08}, {0x22, 0x05, 1}, {0xff, 0xff, 0xff}} {
		if err := DecodeAck(b, got); err == nil {
			t.Errorf("DecodeAck(%x) accepted malformed input", b)
		}
	}
}
