package bench_test

import (
	"slices"
	"testing"

	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// TestMirrorAckBatches checks the mirror's acknowledgements over a real gRPC
// stream, as the protocol in mirror.proto describes them: without ack_batch
// (a version 1 client) one per command; with ack_batch 4 one per four commands,
// the newest in the version 1 fields and the three before it, oldest first, in
// the earlier_* lists; a command with ack_batch 1 flushes the batch at once.
// Every command is acknowledged exactly once, in order, with receive times that
// never go back.
func TestMirrorAckBatches(t *testing.T) {
	s, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	b, err := bench.NewServer(s, bench.Options{Lockstep: true})
	if err != nil {
		t.Fatal(err)
	}
	ctx, conn := serve(t, b)
	client := stillskyv1.NewMirrorServiceClient(conn)
	desc, err := client.Describe(ctx, &stillskyv1.MirrorServiceDescribeRequest{})
	if err != nil {
		t.Fatal(err)
	}
	if v := desc.GetProtocolVersion(); v != 2 {
		t.Fatalf("protocol version %d, want 2", v)
	}
	stream, err := client.StreamCommands(ctx)
	if err != nil {
		t.Fatal(err)
	}
	values := make([]float32, desc.GetActuatorCount())
	send := func(frame uint64, batch uint32) {
		t.Helper()
		if err := stream.Send(&stillskyv1.StreamCommandsRequest{FrameNumber: frame, Values: values, AckBatch: batch}); err != nil {
			t.Fatal(err)
		}
	}
	var last int64
	recv := func(want ...uint64) {
		t.Helper()
		ack, err := stream.Recv()
		if err != nil {
			t.Fatal(err)
		}
		got := append(slices.Clone(ack.GetEarlierFrameNumbers()), ack.GetFrameNumber())
		if !slices.Equal(got, want) {
			t.Fatalf("acknowledged frames %v, want %v", got, want)
		}
		if n := len(ack.GetEarlierFrameNumbers()); len(ack.GetEarlierReceivedNs()) != n || len(ack.GetEarlierClipped()) != n {
			t.Fatalf("earlier lists of lengths %d, %d, %d", n, len(ack.GetEarlierReceivedNs()), len(ack.GetEarlierClipped()))
		}
		for _, at := range append(slices.Clone(ack.GetEarlierReceivedNs()), ack.GetReceivedNs()) {
			if at < last {
				t.Fatalf("receive time %d before the previous %d", at, last)
			}
			last = at
		}
	}
	send(1, 0) // version 1
	recv(1)
	for f := uint64(2); f <= 9; f++ {
		send(f, 4)
	}
	recv(2, 3, 4, 5)
	recv(6, 7, 8, 9)
	send(10, 4)
	send(11, 4)
	send(12, 1) // flushes 10 and 11 with it
	recv(10, 11, 12)
	send(13, 1)
	recv(13)
}
