package daemon

import (
	"bytes"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"stillsky/controller"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// maxRecordFrames bounds one recording (a day at 1 kHz is 86,400,000 frames).
const maxRecordFrames = 100_000_000

// recordBatch is the most frames one RecordedFrames message carries, and
// maxBatchBytes about the most bytes (gRPC's default limit on a received
// message is 4 MiB).
const (
	recordBatch   = 64
	maxBatchBytes = 1 << 20
)

// recordPoll is how often the recording looks for new frames in the ring: a
// fraction of the time the smallest ring spans at any rate the loop keeps.
const recordPoll = 500 * time.Microsecond

// RecordTelemetry streams a recording: the header, then every frame from the
// next one on, read from the telemetry ring by this goroutine, never by the
// real-time one.
func (s *controlServer) RecordTelemetry(req *stillskyv1.RecordTelemetryRequest, stream grpc.ServerStreamingServer[stillskyv1.RecordTelemetryResponse]) error {
	n := req.GetFrameCount()
	if n == 0 || n > maxRecordFrames {
		return status.Errorf(codes.InvalidArgument, "record %d frames: must be in [1, %d]", n, maxRecordFrames)
	}
	d := s.d
	b := d.u.telemetry.buf.Load()
	desc := d.describes.Load()
	if !d.cameraUp.Load() || !d.mirrorUp.Load() || b == nil || desc == nil {
		return status.Error(codes.FailedPrecondition, "cannot record: devices not connected")
	}
	head, file, err := d.recordingHeader(desc, len(b.slots))
	if err != nil {
		return err
	}
	if err := stream.Send(&stillskyv1.RecordTelemetryResponse{Content: &stillskyv1.RecordTelemetryResponse_Header{Header: head}}); err != nil {
		return err
	}
	for len(file) > 0 {
		k := min(len(file), saveChunk)
		if err := stream.Send(&stillskyv1.RecordTelemetryResponse{Content: &stillskyv1.RecordTelemetryResponse_ReconstructorChunk{ReconstructorChunk: file[:k]}}); err != nil {
			return err
		}
		file = file[k:]
	}
	// The frames start after the preamble, which may take a while to send.
	next := b.written.Load() + 1
	x := b.sample()
	perBatch := max(1, min(recordBatch, maxBatchBytes/(4*(len(x.slopes)+len(x.cmd))+64)))
	d.log.Info("recording telemetry", "frames", n)
	batch := &stillskyv1.RecordedFrames{}
	msg := &stillskyv1.RecordTelemetryResponse{Content: &stillskyv1.RecordTelemetryResponse_Frames{Frames: batch}}
	tick := time.NewTicker(recordPoll)
	defer tick.Stop()
	ctx := stream.Context()
	for sent := uint64(0); sent < n; {
		resetBatch(batch)
		for len(batch.FrameNumbers) < perBatch && sent+uint64(len(batch.FrameNumbers)) < n {
			r := b.read(next, x)
			if r == readNotYet {
				break
			}
			if r == readOverrun {
				d.log.Warn("recording lost", "frames_recorded", sent, "window_frames", len(b.slots))
				return status.Errorf(codes.DataLoss, "recording fell more than %d frames behind the loop after %d frames: the client reads too slowly", len(b.slots), sent)
			}
			appendSample(batch, x)
			next++
		}
		if k := len(batch.FrameNumbers); k > 0 {
			if err := stream.Send(msg); err != nil {
				return err
			}
			sent += uint64(k)
			continue
		}
		if d.u.telemetry.buf.Load() != b || !d.cameraUp.Load() {
			return status.Errorf(codes.Aborted, "the device session ended after %d of %d frames", sent, n)
		}
		select {
		case <-ctx.Done():
			return status.FromContextError(ctx.Err()).Err()
		case <-tick.C:
		}
	}
	return nil
}

// recordingHeader describes the devices and the loop as they stand now, and
// returns the reconstructor file (nil when none is loaded).
func (d *Daemon) recordingHeader(desc *describes, window int) (*stillskyv1.RecordingHeader, []byte, error) {
	d.paramsMu.Lock()
	gain, leak := d.gain, d.leak
	d.paramsMu.Unlock()
	h := &stillskyv1.RecordingHeader{
		Camera:             desc.cam,
		Mirror:             desc.mir,
		Gain:               gain,
		Leak:               leak,
		ScienceWavelengthM: d.cfg.ScienceWavelength,
		WindowFrames:       uint32(window),
		StartedUnixNs:      time.Now().UnixNano(),
	}
	if p := d.u.params(); p != nil {
		h.ModalGains = p.Config().ModalGains
		r := p.Reconstructor()
		h.Reconstructor = reconstructorInfo(r)
		var buf bytes.Buffer
		if err := controller.WriteReconstructor(&buf, r); err != nil {
			return nil, nil, status.Errorf(codes.Internal, "encoding reconstructor: %v", err)
		}
		h.ReconstructorFileBytes = uint64(buf.Len())
		return h, buf.Bytes(), nil
	}
	return h, nil, nil
}

func resetBatch(b *stillskyv1.RecordedFrames) {
	b.FrameNumbers = b.FrameNumbers[:0]
	b.ReadoutEndNs = b.ReadoutEndNs[:0]
	b.ReceivedNs = b.ReceivedNs[:0]
	b.ComputedNs = b.ComputedNs[:0]
	b.SentNs = b.SentNs[:0]
	b.States = b.States[:0]
	b.SaturatedActuators = b.SaturatedActuators[:0]
	b.ResidualWavefrontRmsM = b.ResidualWavefrontRmsM[:0]
	b.StrehlEstimate = b.StrehlEstimate[:0]
	b.Slopes = b.Slopes[:0]
	b.Commands = b.Commands[:0]
}

func appendSample(b *stillskyv1.RecordedFrames, x *telemetrySample) {
	b.FrameNumbers = append(b.FrameNumbers, x.frame)
	b.ReadoutEndNs = append(b.ReadoutEndNs, x.readout)
	b.ReceivedNs = append(b.ReceivedNs, x.received)
	b.ComputedNs = append(b.ComputedNs, x.computed)
	b.SentNs = append(b.SentNs, x.sent)
	b.States = append(b.States, x.state.proto())
	b.SaturatedActuators = append(b.SaturatedActuators, uint32(x.saturated))
	b.ResidualWavefrontRmsM = append(b.ResidualWavefrontRmsM, x.wfRMS)
	b.StrehlEstimate = append(b.StrehlEstimate, x.strehl)
	b.Slopes = append(b.Slopes, x.slopes...)
	b.Commands = append(b.Commands, x.cmd...)
}
