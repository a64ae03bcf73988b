package ctl_test

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	grpcstatus "google.golang.org/grpc/status"

	"stillsky/cmd/stillsky/internal/ctl"
	"stillsky/daemon"
	"stillsky/internal/recording"
	"stillsky/internal/rpc"
	"stillsky/internal/testtool"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/rig"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// closedRig starts the small scenario in lockstep, calibrated, with gain 0.3 and
// leak 0.02, loop closed.
func closedRig(t *testing.T) *rig.Rig {
	t.Helper()
	scn, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	r, err := rig.Start(ctx, rig.Config{Scenario: scn, Bench: bench.Options{Lockstep: true}})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { r.Close() })
	if _, err := r.WaitFrames(ctx, 1); err != nil {
		t.Fatal(err)
	}
	if _, err := rig.Calibrate(ctx, r.Client, &stillskyv1.CalibrateRequest{}, nil); err != nil {
		t.Fatal(err)
	}
	for _, call := range []func() error{
		func() error { _, err := r.Client.SetGain(ctx, &stillskyv1.SetGainRequest{Gain: 0.3}); return err },
		func() error { _, err := r.Client.SetLeak(ctx, &stillskyv1.SetLeakRequest{Leak: 0.02}); return err },
		func() error { _, err := r.Client.CloseLoop(ctx, &stillskyv1.CloseLoopRequest{}); return err },
	} {
		if err := call(); err != nil {
			t.Fatal(err)
		}
	}
	return r
}

// loopCarriesOn checks that the loop is still closed, untripped, and handling
// frames.
func loopCarriesOn(t *testing.T, r *rig.Rig, what string) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	s, err := r.WaitFrames(ctx, 50)
	if err != nil {
		t.Fatalf("after %s: %v", what, err)
	}
	if s.GetState() != stillskyv1.LoopState_LOOP_STATE_CLOSED || s.GetInterlockTrips() != 0 {
		t.Fatalf("after %s: state %v, %d interlock trips; want closed, none", what, s.GetState(), s.GetInterlockTrips())
	}
}

// recordScript checks a recording with astropy: the shapes and types of every
// column and matrix, the header keywords, and that consecutive closed-loop frames
// obey the leaky integrator c_k = (1 − ℓ) c_{k−1} + g R s_k with R read from the
// file's CONTROL extension, computed here in numpy.
const recordScript = `
import json, sys
import numpy as np
from astropy.io import fits
out = {}
with fits.open(sys.argv[1]) as hdul:
    hdul.verify('exception')
    p = hdul[0].header
    ns, na = p['SLOPECNT'], p['ACTCNT']
    d = hdul['FRAMES'].data
    out['names'] = [h.name for h in hdul]
    out['columns'] = {c: [d[c].dtype.kind + str(d[c].dtype.itemsize)] + list(d[c].shape) for c in d.columns.names}
    out['control'] = list(hdul['CONTROL'].data.shape)
    out['interact'] = list(hdul['INTERACT'].data.shape)
    out['actpos'] = list(hdul['ACTPOS'].data.shape)
    out['validsub'] = list(hdul['VALIDSUB'].data.shape)
    out['keys'] = {k: p[k] for k in ('GAIN', 'LEAK', 'FRATE', 'DELAY', 'NSUBAP', 'RECMETH', 'RECSHA')}
    r = hdul['CONTROL'].data.astype(np.float64)
    s, c = d['SLOPES'].astype(np.float64), d['COMMANDS'].astype(np.float64)
    f, st, sat = d['FRAME'].astype(np.int64), d['STATE'], d['SATURATE']
    pairs = np.flatnonzero((np.diff(f) == 1) & (st[1:] == 2) & (st[:-1] == 2) & (sat[1:] == 0)) + 1
    want = (1 - p['LEAK']) * c[pairs - 1] + p['GAIN'] * s[pairs] @ r.T
    out['pairs'] = len(pairs)
    out['integrator_error'] = float(np.abs(c[pairs] - want).max() / np.abs(c[pairs]).max())
    out['times_ordered'] = bool(np.all(d['READOUT'] <= d['RECEIVED']) and np.all(d['RECEIVED'] <= d['COMPUTED']) and np.all(d['COMPUTED'] <= d['SENT']))
json.dump(out, sys.stdout)
`

func python(t *testing.T) string {
	for _, p := range []string{"/usr/bin/python3", "python3"} {
		if bin, err := exec.LookPath(p); err == nil && exec.Command(bin, "-c", "import astropy.io.fits").Run() == nil {
			return bin
		}
	}
	testtool.Missing(t, "python3 cannot import astropy (Debian package python3-astropy)")
	return ""
}

// failingFile is a file on a disk that fills after limit bytes.
type failingFile struct {
	*os.File
	limit int64
	wrote int64
}

func (f *failingFile) Write(b []byte) (int, error) {
	if f.wrote+int64(len(b)) > f.limit {
		return 0, &os.PathError{Op: "write", Path: f.Name(), Err: syscall.ENOSPC}
	}
	f.wrote += int64(len(b))
	return f.File.Write(b)
}

func TestRecord(t *testing.T) {
	r := closedRig(t)
	ctx := context.Background()
	run := func(args ...string) (string, error) {
		var out bytes.Buffer
		err := ctl.Run(ctx, r.Conn, args, &out)
		return out.String(), err
	}
	const frames = 400
	path := filepath.Join(t.TempDir(), "run.fits")
	out, err := run("record", "--frames", "400", path)
	if err != nil || !strings.Contains(out, "recorded 400 frames") {
		t.Fatalf("ctl record: %v\n%s", err, out)
	}
	rec, err := recording.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if rec.Frames != frames || len(rec.Slopes) != frames*int(rec.Camera.SlopeCount) || rec.ReconstructorFile == nil {
		t.Fatalf("read back %d frames, %d slopes, reconstructor %v", rec.Frames, len(rec.Slopes), rec.ReconstructorFile != nil)
	}
	for i := 1; i < rec.Frames; i++ {
		// Lockstep: the loop handles every frame, in order.
		if rec.FrameNumbers[i] != rec.FrameNumbers[i-1]+1 {
			t.Fatalf("frame %d follows %d", rec.FrameNumbers[i], rec.FrameNumbers[i-1])
		}
	}
	if rec.Gain != 0.3 || rec.Leak != 0.02 {
		t.Errorf("gain %v leak %v, want 0.3 0.02", rec.Gain, rec.Leak)
	}

	t.Run("fitsverify", func(t *testing.T) {
		// fitsverify (HEASARC, Debian package fitsverify): FITS Standard conformance.
		bin := testtool.Require(t, "fitsverify", "fitsverify")
		out, err := exec.Command(bin, path).CombinedOutput()
		if err != nil || !bytes.Contains(out, []byte("found 0 warning(s) and 0 error(s)")) {
			t.Errorf("fitsverify: %v\n%s", err, out)
		}
		if i := bytes.Index(out, []byte("found ")); i >= 0 {
			t.Logf("fitsverify: %s", bytes.TrimSpace(out[i:]))
		}
	})

	t.Run("astropy", func(t *testing.T) {
		// astropy (Debian package python3-astropy) reads the file on its own.
		py := python(t)
		b, err := exec.Command(py, "-c", recordScript, path).Output()
		if err != nil {
			var ee *exec.ExitError
			if errors.As(err, &ee) {
				t.Fatalf("astropy: %v\n%s", err, ee.Stderr)
			}
			t.Fatal(err)
		}
		var got struct {
			Names                     []string
			Columns                   map[string][]any
			Control, Interact, Actpos []int
			Valid                     []int `json:"validsub"`
			Keys                      map[string]any
			Pairs                     int
			IntegratorError           float64 `json:"integrator_error"`
			TimesOrdered              bool    `json:"times_ordered"`
		}
		if err := json.Unmarshal(b, &got); err != nil {
			t.Fatal(err)
		}
		ns, na := int(rec.Camera.SlopeCount), int(rec.Mirror.ActuatorCount)
		want := map[string]string{
			"FRAME": "[i8 400]", "READOUT": "[i8 400]", "RECEIVED": "[i8 400]", "COMPUTED": "[i8 400]", "SENT": "[i8 400]",
			"STATE": "[u1 400]", "SATURATE": "[i4 400]", "WFRMS": "[f8 400]", "STREHL": "[f8 400]",
			"SLOPES": "[f4 400 " + strconv.Itoa(ns) + "]", "COMMANDS": "[f4 400 " + strconv.Itoa(na) + "]",
		}
		for c, w := range want {
			if g := fmt.Sprint(got.Columns[c]); g != w {
				t.Errorf("column %s: astropy %s, want %s", c, g, w)
			}
		}
		if fmt.Sprint(got.Control) != fmt.Sprint([]int{na, ns}) || fmt.Sprint(got.Interact) != fmt.Sprint([]int{ns, na}) || fmt.Sprint(got.Actpos) != fmt.Sprint([]int{na, 2}) {
			t.Errorf("astropy shapes: CONTROL %v, INTERACT %v, ACTPOS %v; want [%d %d], [%d %d], [%d 2]", got.Control, got.Interact, got.Actpos, na, ns, ns, na, na)
		}
		if fmt.Sprint(got.Valid) != fmt.Sprint([]int{ns / 2}) {
			t.Errorf("astropy VALIDSUB shape %v, want [%d]", got.Valid, ns/2)
		}
		t.Logf("astropy: HDUs %v; integrator error %.2g over %d frame pairs", got.Names, got.IntegratorError, got.Pairs)
		if got.Keys["GAIN"] != 0.3 || got.Keys["LEAK"] != 0.02 || got.Keys["RECMETH"] == "" || len(got.Keys["RECSHA"].(string)) != 16 {
			t.Errorf("astropy keywords %v", got.Keys)
		}
		if got.Pairs < 300 || !(got.IntegratorError < 1e-5) {
			t.Errorf("leaky integrator over %d consecutive closed-loop frames: error %.3g (relative), want < 1e-5", got.Pairs, got.IntegratorError)
		}
		if !got.TimesOrdered {
			t.Error("timestamps not ordered readout ≤ received ≤ computed ≤ sent")
		}
	})

	t.Run("bad input", func(t *testing.T) {
		for _, args := range [][]string{
			{"record", path},
			{"record", "--frames", "0", path},
			{"record", "--frames", "-3", path},
			{"record", "--frames", "ten", path},
			{"record", "--frames", "10"},
		} {
			if _, err := run(args...); err == nil || strings.Contains(err.Error(), "\n") {
				t.Errorf("ctl %v: error %v, want one line", args, err)
			}
		}
		// An unwritable path fails before the daemon is asked for anything.
		_, err := run("record", "--frames", "10", "/proc/version/x.fits")
		if err == nil || !strings.Contains(err.Error(), "x.fits") {
			t.Errorf("record to an unwritable path: %v", err)
		}
		if _, err := r.Client.RecordTelemetry(ctx, &stillskyv1.RecordTelemetryRequest{}); err != nil {
			t.Fatal(err)
		}
		s, err := r.Client.RecordTelemetry(ctx, &stillskyv1.RecordTelemetryRequest{FrameCount: 0})
		if err == nil {
			_, err = s.Recv()
		}
		if grpcstatus.Code(err) != codes.InvalidArgument {
			t.Errorf("record 0 frames: %v, want InvalidArgument", err)
		}
		loopCarriesOn(t, r, "refused recordings")
	})

	t.Run("full disk", func(t *testing.T) {
		f, err := os.Create(filepath.Join(t.TempDir(), "full.fits"))
		if err != nil {
			t.Fatal(err)
		}
		defer f.Close()
		_, err = ctl.RecordTo(ctx, r.Client, 100000, &failingFile{File: f, limit: 200 << 10})
		if !errors.Is(err, syscall.ENOSPC) {
			t.Fatalf("recording onto a full disk: %v, want ENOSPC", err)
		}
		loopCarriesOn(t, r, "a recording that hit a full disk")
	})

	t.Run("slow client", func(t *testing.T) {
		// A client that stops reading falls more than the daemon's ring behind:
		// its recording ends with DataLoss and the loop is not held up.
		cctx, cancel := context.WithCancel(ctx)
		defer cancel()
		s, err := r.Client.RecordTelemetry(cctx, &stillskyv1.RecordTelemetryRequest{FrameCount: 1_000_000})
		if err != nil {
			t.Fatal(err)
		}
		h, err := s.Recv()
		if err != nil {
			t.Fatal(err)
		}
		window := uint64(h.GetHeader().GetWindowFrames())
		if _, err := r.WaitFrames(ctx, 3*window); err != nil {
			t.Fatal(err)
		}
		for {
			if _, err = s.Recv(); err != nil {
				break
			}
		}
		if grpcstatus.Code(err) != codes.DataLoss {
			t.Errorf("a stalled recording ended with %v, want DataLoss", err)
		}
		loopCarriesOn(t, r, "a stalled recording")
	})
	t.Run("replay", func(t *testing.T) { testReplay(t, rec, path) })
	if err := ctl.Run(ctx, r.Conn, []string{"record", "--frames", "20", path}, io.Discard); err != nil {
		t.Errorf("a recording after the failures: %v", err)
	}
}

// testReplay serves the recording as devices: the camera sends the recorded
// slopes in order and over again, and a loop daemon that loads the recording's
// reconstructor closes its loop on them while the mirror takes its commands.
func testReplay(t *testing.T, rec *recording.Recording, path string) {
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	rp, err := bench.NewReplay(rec, filepath.Base(path), nil)
	if err != nil {
		t.Fatal(err)
	}
	l, err := bench.Listen(bench.Addrs{Camera: "127.0.0.1:0", Mirror: "127.0.0.1:0"})
	if err != nil {
		t.Fatal(err)
	}
	served := make(chan error, 1)
	go func() { served <- rp.Serve(ctx, l) }()
	defer func() {
		cancel()
		if err := <-served; err != nil {
			t.Errorf("replay: %v", err)
		}
	}()
	cam, mir := l.Camera.Addr().String(), l.Mirror.Addr().String()
	conn, err := rpc.Dial(cam)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	camera := stillskyv1.NewCameraServiceClient(conn)
	d, err := camera.Describe(ctx, &stillskyv1.CameraServiceDescribeRequest{})
	if err != nil {
		t.Fatal(err)
	}
	if d.GetSlopeCount() != rec.Camera.GetSlopeCount() || fmt.Sprint(d.GetValidSubapertures()) != fmt.Sprint(rec.Camera.GetValidSubapertures()) || d.GetLockstep() {
		t.Fatalf("replay describes %d slopes, lockstep %v", d.GetSlopeCount(), d.GetLockstep())
	}
	sctx, stop := context.WithCancel(ctx)
	frames, err := camera.StreamFrames(sctx, &stillskyv1.StreamFramesRequest{})
	if err != nil {
		t.Fatal(err)
	}
	ns := int(rec.Camera.GetSlopeCount())
	for k := 1; k <= rec.Frames+30; k++ {
		f, err := frames.Recv()
		if err != nil {
			t.Fatal(err)
		}
		i := (k - 1) % rec.Frames
		if f.GetFrameNumber() != uint64(k) || fmt.Sprint(f.GetSlopes()) != fmt.Sprint(rec.Slopes[i*ns:(i+1)*ns]) {
			t.Fatalf("replayed frame %d (number %d) differs from recorded frame %d", k, f.GetFrameNumber(), i)
		}
	}
	stop()

	// The replay's camera runs in this test's process: on a busy machine it may
	// pause longer than the stale-camera watchdog allows, which would hold the
	// loop (the interlock doing its job) and tell nothing about the replay.
	lr, err := rig.Start(ctx, rig.Config{Devices: &rig.Devices{Camera: cam, Mirror: mir},
		Loop: daemon.Config{Interlocks: daemon.Interlocks{StalePeriods: 1 << 20}}})
	if err != nil {
		t.Fatal(err)
	}
	defer lr.Close()
	if _, err := lr.WaitFrames(ctx, 1); err != nil {
		t.Fatal(err)
	}
	var out bytes.Buffer
	if err := ctl.Run(ctx, lr.Conn, []string{"load", path}, &out); err != nil {
		t.Fatalf("ctl load of the recording: %v", err)
	}
	if err := ctl.Run(ctx, lr.Conn, []string{"close"}, &out); err != nil {
		t.Fatal(err)
	}
	before := rp.Commands()
	s, err := lr.WaitFrames(ctx, 100)
	if err != nil {
		t.Fatal(err)
	}
	if s.GetState() != stillskyv1.LoopState_LOOP_STATE_CLOSED || rp.Commands()-before < 50 {
		t.Errorf("loop on the replay: state %v, %d commands taken by the mirror in 100 frames", s.GetState(), rp.Commands()-before)
	}
}
