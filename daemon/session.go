package daemon

import (
	"context"
	"fmt"
	"time"

	"google.golang.org/grpc"

	"stillsky/internal/rpc"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// session connects to both devices, learns the geometry and runs the real-time
// loop until a device fails or ctx ends.
func (d *Daemon) session(ctx context.Context) error {
	camConn, err := rpc.Dial(d.cfg.CameraAddr, rpc.DeviceDialOptions()...)
	if err != nil {
		return err
	}
	defer camConn.Close()
	mirConn, err := rpc.Dial(d.cfg.MirrorAddr, rpc.DeviceDialOptions()...)
	if err != nil {
		return err
	}
	defer mirConn.Close()
	cam := stillskyv1.NewCameraServiceClient(camConn)
	mir := stillskyv1.NewMirrorServiceClient(mirConn)
	d.camera.Store(&cam)
	defer d.camera.Store(nil)

	camDesc, err := cam.Describe(ctx, &stillskyv1.CameraServiceDescribeRequest{}, grpc.WaitForReady(true))
	if err != nil {
		return fmt.Errorf("camera describe: %w", err)
	}
	if err := checkDeviceBeacon(camDesc.GetRetinalBeacon(), d.cfg.Beacon); err != nil {
		d.log.Error("camera refused: its retinal beacon", "err", err)
		return fmt.Errorf("camera describe: %w", err)
	}
	if rb := camDesc.GetRetinalBeacon(); rb != nil {
		d.log.Info("retinal beacon declared by the camera", "power_w", rb.GetPowerW(), "exposure_s", rb.GetExposureS(),
			"exposure_j", rb.GetPowerW()*rb.GetExposureS(), "exposure_limit_j", rb.GetExposureLimitJ())
	}
	mirDesc, err := mir.Describe(ctx, &stillskyv1.MirrorServiceDescribeRequest{}, grpc.WaitForReady(true))
	if err != nil {
		return fmt.Errorf("mirror describe: %w", err)
	}
	g := &geometry{
		slopes:      int(camDesc.GetSlopeCount()),
		actuators:   int(mirDesc.GetActuatorCount()),
		frameRate:   camDesc.GetFrameRateHz(),
		stroke:      mirDesc.GetStrokeM(),
		delayFrames: int(camDesc.GetDelayFrames()),
		lockstep:    camDesc.GetLockstep(),
		positions:   mirDesc.GetPositionsM(),
		across:      int(mirDesc.GetActuatorsAcross()),
		pitch:       mirDesc.GetPitchM(),
		coupling:    mirDesc.GetCoupling(),
	}
	if g.pixels, err = newPixelGeometry(camDesc); err != nil {
		return err
	}
	if g.slopes < 1 || g.actuators < 1 || !(g.frameRate > 0) || !(g.stroke > 0) {
		return fmt.Errorf("devices describe an unusable geometry: %d slopes, %d actuators, %g Hz, stroke %g m", g.slopes, g.actuators, g.frameRate, g.stroke)
	}
	if old := d.geometry(); old != nil && (old.slopes != g.slopes || old.actuators != g.actuators) {
		return fmt.Errorf("devices changed geometry from %d×%d to %d×%d: restart the daemon", old.slopes, old.actuators, g.slopes, g.actuators)
	}
	d.geomMu.Lock()
	d.geom = g
	d.geomMu.Unlock()
	d.describes.Store(&describes{cam: camDesc, mir: mirDesc})
	d.m.framePeriod.Set(1 / g.frameRate)
	d.m.actuators.Set(float64(g.actuators))
	d.log.Info("devices described", "slopes", g.slopes, "actuators", g.actuators, "frame_rate_hz", g.frameRate,
		"stroke_m", g.stroke, "lockstep", g.lockstep, "camera", camDesc.GetDescription(), "mirror_protocol", mirDesc.GetProtocolVersion())
	d.restoreOnce(g)
	if pg := g.pixels; pg != nil {
		if c := d.u.pixCal.Load(); c == nil || !sameLayout(c.Layout(), pg.layout) {
			c, err := d.restorePixels(pg)
			if err != nil {
				return err
			}
			d.u.pixCal.Store(c)
		}
	}

	sctx, cancel := context.WithCancel(ctx)
	defer cancel()
	frames, err := cam.StreamFrames(sctx, &stillskyv1.StreamFramesRequest{Chunks: uint32(d.cfg.Chunks)}, rpc.FrameCodecOption())
	if err != nil {
		return fmt.Errorf("camera stream: %w", err)
	}
	cmds, err := mir.StreamCommands(sctx, rpc.FrameCodecOption())
	if err != nil {
		return fmt.Errorf("mirror stream: %w", err)
	}
	d.cameraUp.Store(true)
	d.mirrorUp.Store(true)
	defer d.cameraUp.Store(false)
	defer d.mirrorUp.Store(false)

	rt := newRealtime(d.u, g)
	watchDone := make(chan struct{})
	defer close(watchDone)
	period := time.Duration(float64(time.Second) / g.frameRate)
	stale := time.Duration(d.cfg.Interlocks.StalePeriods) * period
	if g.lockstep {
		// A lockstep device paces frames by the loop, not by a clock: only a long
		// silence means it is stuck.
		stale = max(stale, time.Second)
	}
	go d.u.watchdog(watchDone, period, stale)
	ackErr := make(chan error, 1)
	go func() { ackErr <- rt.acks(cmds) }()
	err = rt.run(ctx, d.cfg.Realtime, frames, cmds)
	cancel()
	<-ackErr
	d.u.devicesLost()
	return err
}
