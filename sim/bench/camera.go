package bench

import (
	"context"
	"fmt"
	"runtime"
	"sync/atomic"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"stillsky/internal/monoclock"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// ringSize is the number of frames buffered between the bench's clock and the
// camera stream; a consumer that falls further behind loses frames.
const ringSize = 8

// frameRing hands frames from the bench's clock to the camera stream. Only the
// producer writes slots; the stream reads the slot whose sequence number it
// takes from ready.
type frameRing struct {
	slots   [ringSize]frameSlot
	scratch frameSlot   // a frame nobody will read
	ready   chan uint64 // sequence numbers of filled slots
	busy    atomic.Bool // a consumer holds the stream
	paused  atomic.Bool // acquisition stopped: frames are made but not sent
	written uint64      // slots filled so far; the next goes to written%ringSize
}

type frameSlot struct {
	number uint64
	due    int64 // free-run: the readout tick, when the frame may leave
	slopes []float32
	flux   []float32 // photo-electrons per valid subaperture
	pixels []byte    // pixel mode: the detector frame, 16-bit little-endian
}

// RegisterCamera adds the Camera service to g. Camera and mirror may share one
// server or each have its own listener, as separate devices would.
func (b *Server) RegisterCamera(g *grpc.Server) { stillskyv1.RegisterCameraServiceServer(g, b) }

// nextSlot returns the slot the next frame goes to and whether it will be
// handed to the camera stream: not when no consumer is connected or
// acquisition is paused, nor when the consumer has fallen a ring behind (the
// frame is lost and counted).
func (b *Server) nextSlot() (*frameSlot, bool) {
	// Slots are filled in sequence, whatever frames were lost. Only the producer
	// writes them, and len(b.cam.ready) only shrinks concurrently: a free place in the
	// channel means the consumer holds at most the slot ringSize−1 writes back,
	// never the next one.
	if !b.cam.busy.Load() || b.cam.paused.Load() {
		return &b.cam.scratch, false
	}
	if len(b.cam.ready) == cap(b.cam.ready) {
		b.metrics.framesLost.Inc()
		return &b.cam.scratch, false
	}
	return &b.cam.slots[b.cam.written%ringSize], true
}

// Describe returns the sensor geometry.
func (b *Server) Describe(context.Context, *stillskyv1.CameraServiceDescribeRequest) (*stillskyv1.CameraServiceDescribeResponse, error) {
	wfs := b.sys.Sensor()
	valid := wfs.Valid()
	idx := make([]uint32, 0, wfs.NumValid())
	for i, v := range valid {
		if v {
			idx = append(idx, uint32(i))
		}
	}
	return &stillskyv1.CameraServiceDescribeResponse{
		Subapertures:      uint32(b.scn.WFS.Subapertures),
		ValidSubapertures: idx,
		SlopeCount:        uint32(b.sys.NumSlopes()),
		FrameRateHz:       b.scn.Loop.FrameRate,
		SubapertureSizeM:  b.scn.Telescope.Diameter / float64(b.scn.WFS.Subapertures),
		PupilDiameterM:    b.scn.Telescope.Diameter,
		WavelengthM:       b.scn.GuideStar.Wavelength,
		SlopeUnit:         "rad",
		Lockstep:          b.opt.Lockstep,
		DelayFrames:       uint32(b.opt.DelayFrames),
		Description:       b.description(),
		ZenithDeg:         b.scn.Atmosphere.ZenithDeg,
		Obstruction:       b.scn.Telescope.Obstruction,
		SensorKind:        stillskyv1.SensorKind_SENSOR_KIND_SHACK_HARTMANN,
		StarMagnitude:     b.starMagnitude(),
		Pixels:            b.pixelGeometry(),
		RetinalBeacon:     b.retinalBeacon(),
	}, nil
}

// retinalBeacon is Describe's retinal_beacon field: the eye scenario's beacon
// power, exposure time and limit; nil when the sensor looks at the sky.
func (b *Server) retinalBeacon() *stillskyv1.RetinalBeacon {
	e := b.scn.Eye
	if e == nil {
		return nil
	}
	return &stillskyv1.RetinalBeacon{PowerW: e.BeaconPower, ExposureS: e.BeaconExposure, ExposureLimitJ: e.ExposureLimit}
}

// starMagnitude is the guide star's magnitude, 0 for a laser beacon.
func (b *Server) starMagnitude() float64 {
	if b.scn.LaserGuideStar != nil {
		return 0
	}
	return b.scn.GuideStar.Magnitude
}

// pixelGeometry is Describe's pixels field: nil for a slope camera.
func (b *Server) pixelGeometry() *stillskyv1.PixelGeometry {
	if b.px == nil {
		return nil
	}
	return b.px.geometry(b.scn.WFS.Pixels, b.px.sky.Config().Sigma)
}

// description names the scenario, and the pre-rendered camera when there is one.
func (b *Server) description() string {
	d := b.scn.Name + ": " + b.scn.Description
	if b.frames != nil {
		d += fmt.Sprintf(" (pre-rendered camera: %d frames of sensor noise on the sky)", b.frames.Len())
	}
	return d
}

// StreamFrames streams the frames to one consumer at a time.
func (b *Server) StreamFrames(req *stillskyv1.StreamFramesRequest, stream grpc.ServerStreamingServer[stillskyv1.StreamFramesResponse]) error {
	rows, err := b.chunkRows(req.GetChunks())
	if err != nil {
		return err
	}
	if !b.cam.busy.CompareAndSwap(false, true) {
		return status.Error(codes.ResourceExhausted, "camera: another client holds the frame stream")
	}
	defer b.cam.busy.Store(false)
	// Frames queued for a previous consumer are stale.
	for len(b.cam.ready) > 0 {
		<-b.cam.ready
	}
	msg := &stillskyv1.StreamFramesResponse{}
	ctx := stream.Context()
	for {
		select {
		case <-ctx.Done():
			return nil
		case seq := <-b.cam.ready:
			slot := &b.cam.slots[seq%ringSize]
			// Free-running, the frame is read out at its tick, and that is its
			// stamp even when this goroutine gets the CPU late: the delay of a
			// late send is the link's, and the loop sees it. Lockstep frames are
			// read out when produced.
			start := slot.due
			if start != 0 {
				waitUntil(start)
			} else {
				start = monoclock.Now()
			}
			msg.FrameNumber = slot.number
			msg.ChunkCount = uint32(len(rows))
			for c, r := range rows {
				msg.ChunkIndex = uint32(c)
				msg.Offset = uint32(r.slopes[0])
				if b.px != nil {
					w := 2 * b.px.side
					msg.FirstRow, msg.RowCount = uint32(r.rows[0]), uint32(r.rows[1]-r.rows[0])
					msg.Pixels = slot.pixels[r.rows[0]*w : r.rows[1]*w]
				} else {
					msg.Slopes = slot.slopes[r.slopes[0]:r.slopes[1]]
				}
				msg.FluxElectrons = sum32(slot.flux[r.slopes[0]/2 : r.slopes[1]/2])
				msg.ReadoutEndNs = start + int64(b.opt.ReadoutTime)*int64(c)/int64(len(rows))
				if c > 0 && b.opt.ReadoutTime > 0 {
					waitUntil(msg.ReadoutEndNs)
				}
				if err := stream.Send(msg); err != nil {
					return err
				}
			}
			// Send only queues the frame for the transport's writer goroutine;
			// let it run now on this thread rather than after the next wait,
			// which may be a system call that keeps the thread's processor.
			runtime.Gosched()
		}
	}
}

// SetSource switches between the sky and the calibration source.
func (b *Server) SetSource(_ context.Context, req *stillskyv1.SetSourceRequest) (*stillskyv1.SetSourceResponse, error) {
	var sky bool
	switch req.GetSource() {
	case stillskyv1.Source_SOURCE_SKY:
		sky = true
	case stillskyv1.Source_SOURCE_CALIBRATION:
	case stillskyv1.Source_SOURCE_DARK, stillskyv1.Source_SOURCE_FLAT:
		if b.px == nil {
			return nil, status.Errorf(codes.Unimplemented, "camera: source %v: a slope camera has no shutter or flat lamp", req.GetSource())
		}
	default:
		return nil, status.Errorf(codes.InvalidArgument, "camera: source %v: want SOURCE_SKY, SOURCE_CALIBRATION, SOURCE_DARK or SOURCE_FLAT", req.GetSource())
	}
	b.gate.mu.Lock() // between two frames of a gated bench
	b.mu.Lock()
	b.sys.SetTurbulence(sky)
	b.sys.SetNoise(sky && b.scn.WFS.Noise && b.px == nil) // pixels: the detector's noise
	b.calibrationSource.Store(!sky)
	if b.px != nil {
		b.px.source.Store(int32(req.GetSource()))
	}
	b.mu.Unlock()
	b.sky.Store(sky)
	b.gate.mu.Unlock()
	b.wakeGate()
	b.log.Info("source selected", "source", req.GetSource().String())
	return &stillskyv1.SetSourceResponse{Source: req.GetSource()}, nil
}

// SetAcquisition pauses or resumes the frame stream: paused, the clock runs on
// and frames are made as usual, but none goes to the stream.
func (b *Server) SetAcquisition(_ context.Context, req *stillskyv1.SetAcquisitionRequest) (*stillskyv1.SetAcquisitionResponse, error) {
	b.cam.paused.Store(req.GetPaused())
	return &stillskyv1.SetAcquisitionResponse{Paused: req.GetPaused()}, nil
}

// chunkRange is one chunk: the slope indices [start, end) and, for pixel
// frames, the detector rows [start, end) it covers.
type chunkRange struct{ slopes, rows [2]int }

// chunkRows splits the frame into n groups of whole subaperture rows, in
// readout order.
func (b *Server) chunkRows(n uint32) ([]chunkRange, error) {
	nsub := b.scn.WFS.Subapertures
	p := 0
	if b.px != nil {
		p = b.px.pixels
	}
	if n <= 1 {
		return []chunkRange{{[2]int{0, b.sys.NumSlopes()}, [2]int{0, nsub * p}}}, nil
	}
	if int(n) > nsub {
		return nil, status.Errorf(codes.InvalidArgument, "camera: %d chunks: must be at most the %d subaperture rows", n, nsub)
	}
	// Slopes before each subaperture row.
	valid := b.sys.Sensor().Valid()
	rowStart := make([]int, nsub+1)
	for r := 0; r < nsub; r++ {
		cnt := 0
		for c := 0; c < nsub; c++ {
			if valid[r*nsub+c] {
				cnt += 2
			}
		}
		rowStart[r+1] = rowStart[r] + cnt
	}
	out := make([]chunkRange, 0, n)
	for c := 0; c < int(n); c++ {
		r0, r1 := c*nsub/int(n), (c+1)*nsub/int(n)
		if rowStart[r1] == rowStart[r0] {
			return nil, status.Errorf(codes.InvalidArgument, "camera: %d chunks: chunk %d has no valid subaperture", n, c)
		}
		out = append(out, chunkRange{[2]int{rowStart[r0], rowStart[r1]}, [2]int{r0 * p, r1 * p}})
	}
	return out, nil
}

// sum32 returns the sum of v, accumulated in float64.
func sum32(v []float32) float32 {
	var s float64
	for _, x := range v {
		s += float64(x)
	}
	return float32(s)
}
