package bench

import (
	"context"
	"errors"
	"math"
	"sync"
	"sync/atomic"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"stillsky/internal/monoclock"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// pendingRing holds lockstep commands in flight; it must exceed any delay.
const pendingRing = 64

type pendingCommand struct {
	frame  uint64
	values []float32
}

// historyRing holds the newest free-run commands with their arrival times.
const historyRing = 16

// commandLog is what the mirror stream hands the simulation. Free-running, a
// frame sees the command in place at the readout before it: the stream logs each
// command with its arrival time, and the simulation picks from the log, however
// late it runs. Lockstep, the simulation waits for the newest command's frame
// number, woken through arrived.
type commandLog struct {
	mu       sync.Mutex
	history  [historyRing]timedCommand
	received uint64 // commands logged; the next goes to received%historyRing

	lastFrame atomic.Uint64 // frame number of the newest command
	arrived   chan struct{}
	busy      atomic.Bool // a client drives the mirror
}

// maxAckBatch is the most commands one acknowledgement covers (protocol
// version 2); a client's larger ack_batch counts as this.
const maxAckBatch = 1024

// mirrorProtocol is the StreamCommands protocol version the bench speaks.
const mirrorProtocol = 2

type timedCommand struct {
	at     int64 // CLOCK_MONOTONIC ns of arrival
	values []float32
}

// RegisterMirror adds the Mirror service to g.
func (b *Server) RegisterMirror(g *grpc.Server) {
	stillskyv1.RegisterMirrorServiceServer(g, mirrorService{b: b})
}

// mirrorService is the bench's Mirror service; it is a separate type because both
// services have a Describe method.
type mirrorService struct {
	stillskyv1.UnimplementedMirrorServiceServer
	b *Server
}

// Describe returns the actuator layout and stroke.
func (m mirrorService) Describe(context.Context, *stillskyv1.MirrorServiceDescribeRequest) (*stillskyv1.MirrorServiceDescribeResponse, error) {
	return m.b.describeMirror(), nil
}

// StreamCommands applies and acknowledges each command, one by one or in the
// batches the client asks for.
func (m mirrorService) StreamCommands(stream grpc.BidiStreamingServer[stillskyv1.StreamCommandsRequest, stillskyv1.StreamCommandsResponse]) error {
	return m.b.streamCommands(stream)
}

// commandAt copies into cmd the newest logged command that arrived at or
// before t (the mirror's rest shape, zero, before any).
func (b *Server) commandAt(t int64, cmd []float32) {
	b.mir.mu.Lock()
	defer b.mir.mu.Unlock()
	for j := b.mir.received; j > 0 && j+historyRing > b.mir.received; j-- {
		if e := &b.mir.history[(j-1)%historyRing]; e.at <= t {
			copy(cmd, e.values)
			return
		}
	}
	if b.mir.received == 0 {
		clear(cmd)
		return
	}
	// Every logged command is newer than t (a client flooding the mirror):
	// the oldest kept is the nearest.
	copy(cmd, b.mir.history[b.mir.received%historyRing].values)
}

// logCommand records a free-run command that arrived at time at.
func (b *Server) logCommand(at int64, v []float32) {
	b.mir.mu.Lock()
	e := &b.mir.history[b.mir.received%historyRing]
	e.at = at
	copy(e.values, v)
	b.mir.received++
	b.mir.mu.Unlock()
}

func (b *Server) describeMirror() *stillskyv1.MirrorServiceDescribeResponse {
	m := b.sys.Mirror()
	pos := m.Positions()
	flat := make([]float64, 0, 2*len(pos))
	for _, p := range pos {
		flat = append(flat, p[0], p[1])
	}
	return &stillskyv1.MirrorServiceDescribeResponse{
		ActuatorCount:   uint32(m.NumValid()),
		ActuatorsAcross: uint32(b.scn.DM.Actuators),
		PositionsM:      flat,
		PitchM:          b.scn.Telescope.Diameter / float64(b.scn.DM.Actuators-1),
		StrokeM:         m.Stroke(),
		CommandUnit:     "m",
		Coupling:        b.scn.DM.Coupling,
		ProtocolVersion: mirrorProtocol,
		MirrorKind:      stillskyv1.MirrorKind_MIRROR_KIND_DEFORMABLE,
	}
}

func (b *Server) streamCommands(stream grpc.BidiStreamingServer[stillskyv1.StreamCommandsRequest, stillskyv1.StreamCommandsResponse]) error {
	if !b.mir.busy.CompareAndSwap(false, true) {
		return status.Error(codes.ResourceExhausted, "mirror: another client drives the mirror")
	}
	defer b.mir.busy.Store(false)
	n := len(b.cmd)
	stroke := float32(b.sys.Mirror().Stroke())
	req := &stillskyv1.StreamCommandsRequest{}
	acks := newAckBatcher()
	for {
		if err := stream.RecvMsg(req); err != nil {
			if errors.Is(err, context.Canceled) || status.Code(err) == codes.Canceled {
				return nil
			}
			return err
		}
		received := monoclock.Now()
		v := req.GetValues()
		clipped, err := checkCommand(req.GetFrameNumber(), v, n, stroke)
		if err != nil {
			b.metrics.commandsRejected.Inc()
			return err
		}
		if f := req.GetFrameNumber(); b.opt.Lockstep && f != 0 {
			b.mu.Lock()
			p := &b.pending[f%pendingRing]
			p.frame = f
			copy(p.values, v)
			b.mu.Unlock()
		} else if b.opt.Lockstep {
			b.mu.Lock()
			copy(b.cmd, v)
			b.sys.SetCommand(b.cmd)
			b.mu.Unlock()
		} else {
			b.logCommand(received, v)
		}
		if f := req.GetFrameNumber(); f > b.mir.lastFrame.Load() {
			b.mir.lastFrame.Store(f)
		}
		select {
		case b.mir.arrived <- struct{}{}:
		default:
		}
		b.metrics.commands.Inc()
		if err := acks.add(stream, req, received, clipped); err != nil {
			return err
		}
	}
}

// ackBatcher acknowledges the commands of one mirror stream, each at once or
// in the batches the client asks for (ack_batch, protocol version 2): a batch
// collects in the response's earlier_* lists, and its newest command goes in
// the version 1 fields.
type ackBatcher struct {
	ack *stillskyv1.StreamCommandsResponse
}

func newAckBatcher() ackBatcher {
	return ackBatcher{ack: &stillskyv1.StreamCommandsResponse{
		EarlierFrameNumbers: make([]uint64, 0, maxAckBatch),
		EarlierReceivedNs:   make([]int64, 0, maxAckBatch),
		EarlierClipped:      make([]uint32, 0, maxAckBatch),
	}}
}

// add acknowledges command req, received at received (CLOCK_MONOTONIC ns)
// with clipped values beyond the stroke: it joins the batch, which is sent
// once it holds the req.ack_batch commands asked for.
func (a ackBatcher) add(stream grpc.ServerStream, req *stillskyv1.StreamCommandsRequest, received int64, clipped uint32) error {
	ack := a.ack
	if batch := min(req.GetAckBatch(), maxAckBatch); len(ack.EarlierFrameNumbers)+1 < int(batch) {
		ack.EarlierFrameNumbers = append(ack.EarlierFrameNumbers, req.GetFrameNumber())
		ack.EarlierReceivedNs = append(ack.EarlierReceivedNs, received)
		ack.EarlierClipped = append(ack.EarlierClipped, clipped)
		return nil
	}
	ack.FrameNumber, ack.ReceivedNs, ack.Clipped = req.GetFrameNumber(), received, clipped
	if err := stream.SendMsg(ack); err != nil {
		return err
	}
	ack.EarlierFrameNumbers = ack.EarlierFrameNumbers[:0]
	ack.EarlierReceivedNs = ack.EarlierReceivedNs[:0]
	ack.EarlierClipped = ack.EarlierClipped[:0]
	return nil
}

// checkCommand refuses a command of the wrong length or with a non-finite value
// (InvalidArgument, which ends the mirror stream), and counts the values beyond
// the stroke, which the mirror clips.
func checkCommand(frame uint64, v []float32, n int, stroke float32) (uint32, error) {
	if len(v) != n {
		return 0, status.Errorf(codes.InvalidArgument, "mirror: command for frame %d has %d values, want %d", frame, len(v), n)
	}
	clipped := uint32(0)
	for i, x := range v {
		if math.IsNaN(float64(x)) || math.IsInf(float64(x), 0) {
			return 0, status.Errorf(codes.InvalidArgument, "mirror: command for frame %d: value %d is %v", frame, i, x)
		}
		if x > stroke || x < -stroke {
			clipped++
		}
	}
	return clipped, nil
}
