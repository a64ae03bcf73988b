// Package ctl is the operator's client of the loop daemon's Control API, behind
// `stillsky ctl`: one verb per call, human-readable output, and errors the command
// prints on one line.
package ctl

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"slices"
	"strconv"
	"strings"
	"time"

	"golang.org/x/sys/unix"
	"google.golang.org/grpc"
	"google.golang.org/grpc/status"

	"stillsky/internal/atomicfile"
	"stillsky/internal/recording"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/rig"
)

// Usage lists the verbs.
const Usage = "status | open | close | hold | resume | gain G | leak L | modal-gains G1,G2,… | optimise-gains [--frames N] [--dry-run] | calibrate [--hadamard | --single-pokes] [--basis svd|kl|mirror] | save FILE | load FILE | capture-dark|capture-flat|capture-reference [--frames N] | " + RecordUsage

// Run performs one verb against the Control API on conn and writes the result to out.
func Run(ctx context.Context, conn grpc.ClientConnInterface, args []string, out io.Writer) error {
	if len(args) == 0 {
		return fmt.Errorf("missing verb: %s", Usage)
	}
	c := stillskyv1.NewControlServiceClient(conn)
	verb, rest := args[0], args[1:]
	want := func(n int) error {
		if len(rest) != n {
			return fmt.Errorf("%s takes %d argument(s), got %d", verb, n, len(rest))
		}
		return nil
	}
	var st *stillskyv1.GetStatusResponse
	var err error
	switch verb {
	case "status":
		if err = want(0); err == nil {
			st, err = c.GetStatus(ctx, &stillskyv1.GetStatusRequest{})
		}
	case "open":
		if err = want(0); err == nil {
			var r *stillskyv1.OpenLoopResponse
			r, err = c.OpenLoop(ctx, &stillskyv1.OpenLoopRequest{})
			st = r.GetStatus()
		}
	case "close":
		if err = want(0); err == nil {
			var r *stillskyv1.CloseLoopResponse
			r, err = c.CloseLoop(ctx, &stillskyv1.CloseLoopRequest{})
			st = r.GetStatus()
		}
	case "hold":
		if err = want(0); err == nil {
			var r *stillskyv1.HoldLoopResponse
			r, err = c.HoldLoop(ctx, &stillskyv1.HoldLoopRequest{})
			st = r.GetStatus()
		}
	case "resume":
		if err = want(0); err == nil {
			var r *stillskyv1.ResumeAutonomousResponse
			r, err = c.ResumeAutonomous(ctx, &stillskyv1.ResumeAutonomousRequest{})
			st = r.GetStatus()
		}
	case "gain", "leak":
		if err = want(1); err != nil {
			break
		}
		v, perr := strconv.ParseFloat(rest[0], 64)
		if perr != nil {
			return fmt.Errorf("%s %q: not a number", verb, rest[0])
		}
		if verb == "gain" {
			var r *stillskyv1.SetGainResponse
			r, err = c.SetGain(ctx, &stillskyv1.SetGainRequest{Gain: v})
			st = r.GetStatus()
		} else {
			var r *stillskyv1.SetLeakResponse
			r, err = c.SetLeak(ctx, &stillskyv1.SetLeakRequest{Leak: v})
			st = r.GetStatus()
		}
	case "modal-gains":
		if err = want(1); err != nil {
			break
		}
		var gains []float64
		for _, f := range strings.Split(rest[0], ",") {
			v, perr := strconv.ParseFloat(strings.TrimSpace(f), 64)
			if perr != nil {
				return fmt.Errorf("modal gain %q: not a number", f)
			}
			gains = append(gains, v)
		}
		var r *stillskyv1.SetModalGainsResponse
		r, err = c.SetModalGains(ctx, &stillskyv1.SetModalGainsRequest{Gains: gains})
		st = r.GetStatus()
	case "optimise-gains":
		req := &stillskyv1.OptimiseModalGainsRequest{}
		for i := 0; i < len(rest); i++ {
			switch rest[i] {
			case "--dry-run":
				req.DryRun = true
			case "--frames":
				if i+1 == len(rest) {
					return errors.New("optimise-gains: --frames needs a number")
				}
				i++
				n, perr := strconv.ParseUint(rest[i], 10, 32)
				if perr != nil {
					return fmt.Errorf("optimise-gains: --frames %q: not a frame count", rest[i])
				}
				req.Frames = uint32(n)
			default:
				return fmt.Errorf("optimise-gains: unknown option %q (--frames N, --dry-run)", rest[i])
			}
		}
		var r *stillskyv1.OptimiseModalGainsResponse
		r, err = c.OptimiseModalGains(ctx, req)
		if err == nil {
			verb := "applied"
			if req.DryRun {
				verb = "found (not applied)"
			}
			fmt.Fprintf(out, "modal gains %s for %d modes (relative to the loop gain): min %.3g, max %.3g; predicted modal residual %.3g → %.3g m² of mirror command\n",
				verb, len(r.GetGains()), slices.Min(r.GetGains()), slices.Max(r.GetGains()), r.GetPredictedResidualBefore(), r.GetPredictedResidualAfter())
			st = r.GetStatus()
		}
	case "calibrate":
		req := &stillskyv1.CalibrateRequest{}
		for i := 0; i < len(rest); i++ {
			switch a := rest[i]; a {
			case "--basis":
				if i+1 >= len(rest) || (rest[i+1] != "svd" && rest[i+1] != "kl" && rest[i+1] != "mirror") {
					return fmt.Errorf("calibrate: --basis wants svd, kl or mirror")
				}
				i++
				req.Basis = rest[i]
			case "--hadamard":
				req.Hadamard = true
			case "--single-pokes":
				req.SinglePokes = true
			default:
				return fmt.Errorf("calibrate: unknown option %q (only --hadamard, --single-pokes or --basis svd|kl|mirror)", a)
			}
		}
		if req.Hadamard && req.SinglePokes {
			return fmt.Errorf("calibrate: --hadamard and --single-pokes exclude each other")
		}
		return Calibrate(ctx, c, req, out)
	case "capture-dark", "capture-flat", "capture-reference":
		return capturePixels(ctx, c, verb, rest, out)
	case "save":
		if err = want(1); err == nil {
			err = save(ctx, c, rest[0])
			if err == nil {
				fmt.Fprintf(out, "reconstructor saved to %s\n", rest[0])
			}
		}
	case "load":
		if err = want(1); err == nil {
			var info *stillskyv1.ReconstructorInfo
			info, err = load(ctx, c, rest[0])
			if err == nil {
				fmt.Fprintf(out, "reconstructor loaded: %s\n", describeReconstructor(info))
			}
		}
	case "record":
		n, path, perr := parseRecord(rest)
		if perr != nil {
			return perr
		}
		return Record(ctx, c, n, path, out)
	default:
		return fmt.Errorf("unknown verb %q: %s", verb, Usage)
	}
	if err != nil {
		return oneLine(err)
	}
	if st != nil {
		WriteStatus(out, st)
	}
	return nil
}

// oneLine turns a gRPC error into "code: message", the code in snake case as in
// the gRPC specification (FAILED_PRECONDITION → failed_precondition).
func oneLine(err error) error {
	s, ok := status.FromError(err)
	if !ok {
		return err
	}
	var b strings.Builder
	for i, r := range s.Code().String() {
		if i > 0 && r >= 'A' && r <= 'Z' {
			b.WriteByte('_')
		}
		b.WriteRune(r)
	}
	return fmt.Errorf("%s: %s", strings.ToLower(b.String()), s.Message())
}

// Calibrate runs a calibration and shows its progress on out (see Progress).
func Calibrate(ctx context.Context, c stillskyv1.ControlServiceClient, req *stillskyv1.CalibrateRequest, out io.Writer) error {
	p := NewProgress(out)
	info, err := rig.Calibrate(ctx, c, req, p.Update)
	p.End()
	if err != nil {
		return oneLine(err)
	}
	fmt.Fprintf(out, "reconstructor: %s\n", describeReconstructor(info))
	return nil
}

// progressEvery is how often Progress prints a line when out is not a terminal.
const progressEvery = 3 * time.Second

// Progress shows a calibration's progress: on a terminal a bar redrawn in place,
// elsewhere (a log file, a pipe) one line when the phase changes and at most
// one every progressEvery in between, so that a log gets a few lines rather
// than hundreds of carriage returns.
type Progress struct {
	out      io.Writer
	terminal bool
	phase    string
	last     time.Time
	drawn    bool // a bar is on the terminal's current line
	eta      timeLeft
}

// NewProgress returns a Progress writing to out.
func NewProgress(out io.Writer) *Progress {
	return &Progress{out: out, terminal: isTerminal(out)}
}

// Update shows one progress message of the calibration stream.
func (p *Progress) Update(m *stillskyv1.CalibrateResponse) {
	if m.GetTotal() == 0 {
		return
	}
	done, total := uint64(m.GetDone()), uint64(m.GetTotal())
	pct := 100 * done / total
	now := time.Now()
	left := p.eta.update(m.GetPhase(), m.GetDone(), m.GetTotal(), now)
	if p.terminal {
		const width = 40
		n := int(width * done / total)
		fmt.Fprintf(p.out, "\rcalibrating [%s%s] %3d%% %-9s %-18s", strings.Repeat("#", n), strings.Repeat(".", width-n), pct, m.GetPhase(), left)
		p.drawn = true
		return
	}
	if m.GetPhase() != p.phase || now.Sub(p.last) >= progressEvery {
		what := fmt.Sprintf(" (%d of %d frames)", done, total)
		if m.GetPhase() != "pokes" {
			what = "" // the inversion counts its work in parts of the whole
		}
		if left != "" {
			left = ", " + left
		}
		fmt.Fprintf(p.out, "calibrating: %3d%%%s %s%s\n", pct, what, m.GetPhase(), left)
		p.phase, p.last = m.GetPhase(), now
	}
}

// End finishes the bar's line, if one was drawn.
func (p *Progress) End() {
	if p.drawn {
		fmt.Fprintln(p.out)
		p.drawn = false
	}
}

// isTerminal reports whether w is a terminal.
func isTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	if !ok {
		return false
	}
	_, err := unix.IoctlGetTermios(int(f.Fd()), unix.TCGETS)
	return err == nil
}

func describeReconstructor(r *stillskyv1.ReconstructorInfo) string {
	if r == nil {
		return "none"
	}
	basis := ""
	if b := r.GetBasis(); b != "" {
		basis = fmt.Sprintf(", %d %s modes", r.GetModeCount(), b)
	}
	return fmt.Sprintf("%s, %d modes kept, %d slopes × %d actuators, condition %.3g%s",
		r.GetMethod(), r.GetModesKept(), r.GetSlopeCount(), r.GetActuatorCount(), r.GetConditionNumber(), basis)
}

func save(ctx context.Context, c stillskyv1.ControlServiceClient, path string) error {
	stream, err := c.SaveReconstructor(ctx, &stillskyv1.SaveReconstructorRequest{})
	if err != nil {
		return err
	}
	// Receive everything before touching the file, so a failed transfer leaves any
	// existing file as it was.
	var chunks [][]byte
	for {
		r, err := stream.Recv()
		if err == io.EOF {
			break
		}
		if err != nil {
			return err
		}
		chunks = append(chunks, r.GetChunk())
	}
	return atomicfile.Write(path, func(w io.Writer) error {
		for _, b := range chunks {
			if _, err := w.Write(b); err != nil {
				return err
			}
		}
		return nil
	})
}

// load uploads the reconstructor file at path, or the reconstructor stored in a
// telemetry recording (stillsky ctl record).
func load(ctx context.Context, c stillskyv1.ControlServiceClient, path string) (*stillskyv1.ReconstructorInfo, error) {
	if rec, err := recording.ReadFile(path); err == nil {
		if rec.ReconstructorFile == nil {
			return nil, fmt.Errorf("%s: the recording holds no reconstructor (none was loaded when it was made)", path)
		}
		return Upload(ctx, c, bytes.NewReader(rec.ReconstructorFile))
	}
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	return Upload(ctx, c, f)
}

// Upload streams a reconstructor file to the daemon, which installs it.
func Upload(ctx context.Context, c stillskyv1.ControlServiceClient, r io.Reader) (*stillskyv1.ReconstructorInfo, error) {
	stream, err := c.LoadReconstructor(ctx)
	if err != nil {
		return nil, err
	}
	buf := make([]byte, 1<<20)
	for {
		n, rerr := r.Read(buf)
		if n > 0 {
			if err := stream.Send(&stillskyv1.LoadReconstructorRequest{Chunk: append([]byte(nil), buf[:n]...)}); err != nil {
				if errors.Is(err, io.EOF) {
					break // the server ended the stream; CloseAndRecv has its reason
				}
				return nil, err
			}
		}
		if rerr == io.EOF {
			break
		}
		if rerr != nil {
			return nil, rerr
		}
	}
	resp, err := stream.CloseAndRecv()
	if err != nil {
		return nil, err
	}
	return resp.GetReconstructor(), nil
}

// WriteStatus prints a status snapshot.
func WriteStatus(out io.Writer, s *stillskyv1.GetStatusResponse) {
	state := strings.ToLower(strings.TrimPrefix(s.GetState().String(), "LOOP_STATE_"))
	fmt.Fprintf(out, "state           %s\n", state)
	if s := s.GetSupervisorState(); s != "" {
		fmt.Fprintf(out, "supervisor      %s (unattended operation; after an operator's open, close or hold: ctl resume)\n", s)
	}
	fmt.Fprintf(out, "gain / leak     %.3g / %.3g\n", s.GetGain(), s.GetLeak())
	fmt.Fprintf(out, "devices         camera %s, mirror %s\n", upDown(s.GetCameraConnected()), upDown(s.GetMirrorConnected()))
	fmt.Fprintf(out, "geometry        %d slopes, %d actuators, %.0f Hz\n", s.GetSlopeCount(), s.GetActuatorCount(), s.GetFrameRateHz())
	fmt.Fprintf(out, "frames          %d received, %d dropped, %d rejected (last %d)\n", s.GetFrames(), s.GetFramesDropped(), s.GetFramesRejected(), s.GetLastFrame())
	fmt.Fprintf(out, "reconstructor   %s\n", describeReconstructor(s.GetReconstructor()))
	fmt.Fprintf(out, "residual        %.1f nm rms wavefront, %.3g µrad rms slopes\n", s.GetResidualWavefrontRmsM()*1e9, s.GetResidualSlopeRmsRad()*1e6)
	fmt.Fprintf(out, "strehl estimate %.3f at %.3g µm\n", s.GetStrehlEstimate(), s.GetScienceWavelengthM()*1e6)
	fmt.Fprintf(out, "saturated       %d actuators\n", s.GetSaturatedActuators())
	l := s.GetRtcLatency()
	fmt.Fprintf(out, "rtc latency     p50 %.1f µs, p99 %.1f µs, max %.1f µs\n", l.GetP50()*1e6, l.GetP99()*1e6, l.GetMax()*1e6)
	e := s.GetEndToEndLatency()
	fmt.Fprintf(out, "end-to-end      p50 %.1f µs, p99 %.1f µs, max %.1f µs\n", e.GetP50()*1e6, e.GetP99()*1e6, e.GetMax()*1e6)
	trip := s.GetLastInterlock()
	if trip == "" {
		trip = "none"
	}
	fmt.Fprintf(out, "interlocks      %d trips (last: %s)\n", s.GetInterlockTrips(), trip)
	if t := s.GetTipTilt(); t != nil {
		fmt.Fprintf(out, "tip-tilt        devices %s; %d frames, %d commands; residual %.3g µrad rms; command (%.3g, %.3g) µrad of ±%.3g; %d saturated frames; gain %.3g, offload %.3g\n",
			upDown(t.GetConnected()), t.GetFrames(), t.GetCommands(), t.GetResidualRmsRad()*1e6, t.GetCommandXRad()*1e6, t.GetCommandYRad()*1e6,
			t.GetStrokeRad()*1e6, t.GetSaturatedFrames(), t.GetGain(), t.GetOffloadGain())
	}
}

func upDown(b bool) string {
	if b {
		return "connected"
	}
	return "disconnected"
}

// timeLeft estimates the time left in a phase of a calibration from the rate
// of its progress since the phase began.
type timeLeft struct {
	phase string
	t0    time.Time
	done0 uint32
}

// update takes a progress message received at now and returns "about 1m20s
// left", or "" until the rate can be measured (a second into the phase).
func (e *timeLeft) update(phase string, done, total uint32, now time.Time) string {
	if phase != e.phase || done < e.done0 {
		e.phase, e.t0, e.done0 = phase, now, done
	}
	el := now.Sub(e.t0)
	if done >= total || el < time.Second || done == e.done0 {
		return ""
	}
	left := time.Duration(float64(el) * float64(total-done) / float64(done-e.done0))
	return "about " + left.Round(time.Second).String() + " left"
}

// capturePixels runs a capture-dark, capture-flat or capture-reference verb:
// the daemon switches a pixel camera to its shutter, flat lamp or calibration
// source, averages the frames and commits the result.
func capturePixels(ctx context.Context, c stillskyv1.ControlServiceClient, verb string, args []string, out io.Writer) error {
	kind := map[string]stillskyv1.PixelCalibrationKind{
		"capture-dark":      stillskyv1.PixelCalibrationKind_PIXEL_CALIBRATION_KIND_DARK,
		"capture-flat":      stillskyv1.PixelCalibrationKind_PIXEL_CALIBRATION_KIND_FLAT,
		"capture-reference": stillskyv1.PixelCalibrationKind_PIXEL_CALIBRATION_KIND_REFERENCE,
	}[verb]
	req := &stillskyv1.CapturePixelCalibrationRequest{Kind: kind}
	switch {
	case len(args) == 0:
	case len(args) == 2 && args[0] == "--frames":
		n, err := strconv.ParseUint(args[1], 10, 32)
		if err != nil || n < 1 {
			return fmt.Errorf("%s: --frames %q: want a whole number >= 1", verb, args[1])
		}
		req.Frames = uint32(n)
	default:
		return fmt.Errorf("%s takes [--frames N], got %q", verb, strings.Join(args, " "))
	}
	r, err := c.CapturePixelCalibration(ctx, req)
	if err != nil {
		return err
	}
	file := r.GetFile()
	if file == "" {
		file = "not committed: the daemon has no state directory"
	}
	unit := map[stillskyv1.PixelCalibrationKind]string{
		stillskyv1.PixelCalibrationKind_PIXEL_CALIBRATION_KIND_DARK:      "ADU",
		stillskyv1.PixelCalibrationKind_PIXEL_CALIBRATION_KIND_FLAT:      "of the mean response",
		stillskyv1.PixelCalibrationKind_PIXEL_CALIBRATION_KIND_REFERENCE: "pixels",
	}[kind]
	fmt.Fprintf(out, "%s: %d frames, mean %.4g rms %.4g %s (%s)\n", strings.TrimPrefix(verb, "capture-"), r.GetFrames(), r.GetMean(), r.GetRms(), unit, file)
	return nil
}
