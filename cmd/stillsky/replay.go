package main

import (
	"context"
	"fmt"
	"log/slog"
	"path/filepath"
	"time"

	"stillsky/internal/recording"
	"stillsky/internal/rpc"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/sim/bench"
)

// runReplay serves a recording as the camera and mirror (stillsky sim --replay).
func runReplay(path, camera, mirror, loop string, log *slog.Logger) error {
	rec, err := recording.ReadFile(path)
	if err != nil {
		return err
	}
	if loop != "" {
		if err := checkLoopGeometry(rec, path, loop); err != nil {
			return err
		}
	}
	r, err := bench.NewReplay(rec, filepath.Base(path), log)
	if err != nil {
		return err
	}
	addrs := bench.Addrs{Camera: camera, Mirror: mirror}
	if addrs.Mirror == addrs.Camera {
		addrs.Mirror = ""
	}
	l, err := bench.Listen(addrs)
	if err != nil {
		return err
	}
	ctx, stop := signalContext()
	defer stop()
	return r.Serve(ctx, l)
}

// checkLoopGeometry refuses a recording whose slope or actuator count differs
// from those of the loop daemon at addr (a daemon that has not yet met its
// devices has no geometry to compare).
func checkLoopGeometry(rec *recording.Recording, path, addr string) error {
	conn, err := rpc.Dial(addr)
	if err != nil {
		return err
	}
	defer conn.Close()
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	s, err := stillskyv1.NewControlServiceClient(conn).GetStatus(ctx, &stillskyv1.GetStatusRequest{})
	if err != nil {
		return fmt.Errorf("--loop %s: %v", addr, err)
	}
	ns, na := rec.Camera.GetSlopeCount(), rec.Mirror.GetActuatorCount()
	if s.GetSlopeCount() != 0 && (s.GetSlopeCount() != ns || s.GetActuatorCount() != na) {
		return fmt.Errorf("%s: %d slopes × %d actuators, but the loop at %s runs %d × %d", path, ns, na, addr, s.GetSlopeCount(), s.GetActuatorCount())
	}
	return nil
}
