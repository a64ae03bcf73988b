package bench

import (
	"context"
	"errors"
	"fmt"
	"net"
	"net/http"
	"time"

	"github.com/prometheus/client_golang/prometheus/promhttp"
	"google.golang.org/grpc"

	"stillsky/internal/rpc"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// Addrs are where the bench serves its devices. Mirror "" serves the mirror on the
// camera's server (one gRPC server with both services); Metrics "" disables the
// HTTP endpoint.
//
// TipTilt, if set, serves the tip-tilt sensor's Camera and the tip-tilt
// mirror's Mirror on a server of their own (scenarios with a tip_tilt
// section; Listen cannot know, Serve refuses it for a scenario without one).
type Addrs struct {
	Camera, Mirror, Metrics string
	TipTilt                 string
}

// Listeners are the bench's open sockets, so callers can learn ports chosen by the
// system (":0").
type Listeners struct {
	Camera, Mirror, Metrics net.Listener
	TipTilt                 net.Listener
}

// Listen opens the bench's sockets.
func Listen(a Addrs) (*Listeners, error) {
	var l Listeners
	var err error
	closeAll := func() {
		for _, x := range []net.Listener{l.Camera, l.Mirror, l.Metrics, l.TipTilt} {
			if x != nil {
				x.Close()
			}
		}
	}
	if l.Camera, err = rpc.Listen(a.Camera); err != nil {
		return nil, fmt.Errorf("bench: camera listener: %w", err)
	}
	if a.Mirror != "" {
		if l.Mirror, err = rpc.Listen(a.Mirror); err != nil {
			closeAll()
			return nil, fmt.Errorf("bench: mirror listener: %w", err)
		}
	}
	if a.TipTilt != "" {
		if l.TipTilt, err = rpc.Listen(a.TipTilt); err != nil {
			closeAll()
			return nil, fmt.Errorf("bench: tip-tilt listener: %w", err)
		}
	}
	if a.Metrics != "" {
		if l.Metrics, err = rpc.Listen(a.Metrics); err != nil {
			closeAll()
			return nil, fmt.Errorf("bench: metrics listener: %w", err)
		}
	}
	return &l, nil
}

// Serve runs the bench's clock and serves its devices and metrics on l until ctx
// ends.
func (b *Server) Serve(ctx context.Context, l *Listeners, extra ...func(*http.ServeMux)) error {
	camSvc := stillskyv1.CameraService_ServiceDesc.ServiceName
	mirSvc := stillskyv1.MirrorService_ServiceDesc.ServiceName
	probeSvc := stillskyv1.TransportProbeService_ServiceDesc.ServiceName
	var servers []*grpc.Server
	errc := make(chan error, 5)
	if l.TipTilt != nil {
		gt, _ := rpc.NewServer([]string{camSvc, mirSvc}, rpc.DeviceServerOptions()...)
		if !b.RegisterTipTilt(gt) {
			return fmt.Errorf("bench: scenario %s has no tip_tilt section: nothing to serve at the tip-tilt address", b.scn.Name)
		}
		servers = append(servers, gt)
		go func() { errc <- gt.Serve(l.TipTilt) }()
	}
	if l.Mirror == nil {
		g, _ := rpc.NewServer([]string{camSvc, mirSvc, probeSvc}, rpc.DeviceServerOptions()...)
		b.RegisterCamera(g)
		b.RegisterMirror(g)
		RegisterProbe(g)
		servers = append(servers, g)
		go func() { errc <- g.Serve(l.Camera) }()
	} else {
		gc, _ := rpc.NewServer([]string{camSvc, probeSvc}, rpc.DeviceServerOptions()...)
		b.RegisterCamera(gc)
		RegisterProbe(gc)
		gm, _ := rpc.NewServer([]string{mirSvc}, rpc.DeviceServerOptions()...)
		b.RegisterMirror(gm)
		servers = append(servers, gc, gm)
		go func() { errc <- gc.Serve(l.Camera) }()
		go func() { errc <- gm.Serve(l.Mirror) }()
	}
	var hs *http.Server
	if l.Metrics != nil {
		mux := http.NewServeMux()
		mux.Handle("/metrics", promhttp.HandlerFor(b.Registry(), promhttp.HandlerOpts{Registry: b.Registry()}))
		for _, f := range extra {
			f(mux)
		}
		hs = &http.Server{Handler: mux, ReadHeaderTimeout: 5 * time.Second}
		go func() {
			if err := hs.Serve(l.Metrics); !errors.Is(err, http.ErrServerClosed) {
				errc <- err
			}
		}()
	}
	b.log.Info("bench serving", "scenario", b.scn.Name, "camera", l.Camera.Addr().String(),
		"lockstep", b.opt.Lockstep, "delay_frames", b.opt.DelayFrames)
	rctx, cancel := context.WithCancel(ctx)
	defer cancel()
	go func() { errc <- b.Run(rctx) }()
	var err error
	select {
	case <-ctx.Done():
	case err = <-errc:
	}
	cancel()
	for _, g := range servers {
		g.Stop()
	}
	if hs != nil {
		shut, c := context.WithTimeout(context.Background(), 2*time.Second)
		defer c()
		hs.Shutdown(shut)
	}
	if errors.Is(err, context.Canceled) {
		err = nil
	}
	return err
}
