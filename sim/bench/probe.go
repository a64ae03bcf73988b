package bench

import (
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	stillskyv1 "stillsky/proto/stillsky/v1"
)

// maxEchoValues bounds the pong a probe client may ask for.
const maxEchoValues = 1_000_000

// probeService answers pings with pongs of the requested size. The bench
// serves it beside the camera, so that a latency benchmark measures the
// transport floor between the same two processes, over the same kind of
// connection, with the simulator as busy as it is in the closed loop.
type probeService struct {
	stillskyv1.UnimplementedTransportProbeServiceServer
}

// RegisterProbe registers the transport probe (TransportProbeService) on g.
func RegisterProbe(g *grpc.Server) { stillskyv1.RegisterTransportProbeServiceServer(g, probeService{}) }

func (probeService) Echo(stream grpc.BidiStreamingServer[stillskyv1.EchoRequest, stillskyv1.EchoResponse]) error {
	req := &stillskyv1.EchoRequest{}
	resp := &stillskyv1.EchoResponse{}
	for {
		if err := stream.RecvMsg(req); err != nil {
			return nil
		}
		n := int(req.GetReplyValues())
		if n > maxEchoValues {
			return status.Errorf(codes.InvalidArgument, "probe: reply of %d values: at most %d", n, maxEchoValues)
		}
		if cap(resp.Values) < n {
			resp.Values = make([]float32, n)
		}
		resp.Values = resp.Values[:n]
		if err := stream.Send(resp); err != nil {
			return err
		}
	}
}
