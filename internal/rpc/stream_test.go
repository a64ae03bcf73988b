package rpc

import (
	"context"
	"errors"
	"fmt"
	"io"
	"path/filepath"
	"testing"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	stillskyv1 "stillsky/proto/stillsky/v1"
)

// checkingMirror is a mirror endpoint that decodes each command with the
// standard codec (the generated protobuf decoder, the reference) and refuses
// any whose values are not all its frame number.
type checkingMirror struct {
	stillskyv1.UnimplementedMirrorServiceServer
}

func (checkingMirror) StreamCommands(s grpc.BidiStreamingServer[stillskyv1.StreamCommandsRequest, stillskyv1.StreamCommandsResponse]) error {
	want := uint64(1)
	for {
		req, err := s.Recv()
		if err != nil {
			if errors.Is(err, io.EOF) {
				return nil
			}
			return err
		}
		if req.GetFrameNumber() != want {
			return status.Errorf(codes.InvalidArgument, "command %d arrived as frame %d", want, req.GetFrameNumber())
		}
		for i, v := range req.GetValues() {
			if v != float32(want) {
				return status.Errorf(codes.InvalidArgument, "command %d: value %d is %v", want, i, v)
			}
		}
		if err := s.Send(&stillskyv1.StreamCommandsResponse{FrameNumber: want}); err != nil {
			return err
		}
		want++
	}
}

// Commands sent back to back over a real device link, many more than there are
// send slots in flight at once, must each reach the mirror intact: a slot
// reused before gRPC has written it would show up as a wrong value.
func TestCommandsArriveIntact(t *testing.T) {
	addr := "unix:" + filepath.Join(t.TempDir(), "mirror.sock")
	lis, err := Listen(addr)
	if err != nil {
		t.Fatal(err)
	}
	srv, _ := NewServer(nil, DeviceServerOptions()...)
	stillskyv1.RegisterMirrorServiceServer(srv, checkingMirror{})
	go srv.Serve(lis)
	t.Cleanup(srv.Stop)
	conn, err := Dial(addr, DeviceDialOptions()...)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { conn.Close() })
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	stream, err := stillskyv1.NewMirrorServiceClient(conn).StreamCommands(ctx, FrameCodecOption())
	if err != nil {
		t.Fatal(err)
	}
	const n, actuators = 3000, 509
	acks := make(chan error, 1)
	go func() {
		ack := &stillskyv1.StreamCommandsResponse{}
		for i := uint64(1); i <= n; i++ {
			if err := stream.RecvMsg(ack); err != nil {
				acks <- fmt.Errorf("ack %d: %w", i, err)
				return
			}
			if ack.GetFrameNumber() != i {
				acks <- fmt.Errorf("ack %d for frame %d", i, ack.GetFrameNumber())
				return
			}
		}
		acks <- nil
	}()
	cmd := &stillskyv1.StreamCommandsRequest{Values: make([]float32, actuators)}
	for i := uint64(1); i <= n; i++ {
		cmd.FrameNumber = i
		for j := range cmd.Values {
			cmd.Values[j] = float32(i)
		}
		if err := stream.SendMsg(cmd); err != nil {
			break // the mirror ended the stream; its status comes with the acks
		}
	}
	if err := <-acks; err != nil {
		t.Fatal(err)
	}
	stream.CloseSend()
}
