// Package recording writes and reads the telemetry recording file that
// `stillsky ctl record` makes from the Control API's RecordTelemetry stream and
// that the replay camera and the report read: multi-extension FITS (FITS Standard
// 4.0), self-contained, so that a recording can be studied or replayed without the
// daemon that made it.
//
//	primary    no data; keywords RECVERS (format version, 1), DATE (start, UTC),
//	           the sensor (NSUBAP, SLOPECNT, SUBAPSZ, PUPILD, WFSWAVE, FRATE, LOCKSTEP,
//	           DELAY, CAMERA, ZENITH, OBSTRUCT), the mirror (ACTCNT, ACTACROS, ACTPITCH, STROKE,
//	           COUPLING), the loop (GAIN, LEAK, SCIWAVE, WINDOW) and the reconstructor's
//	           identity (RECON, RECMETH, RECMODES, RECCOND, RECDATE, RECSHA)
//	VALIDSUB   int32, the row-major indices of the valid subapertures in slope order
//	ACTPOS     float64, 2 × actuators: the actuator positions on the pupil, metres
//	MODGAINS   float64, the modal gain multipliers, when set
//	CONTROL, SINGVAL, MODES, MODALINV, INTERACT
//	           the reconstructor file as the daemon saves it (its primary HDU, the
//	           control matrix, renamed CONTROL), when a reconstructor is loaded
//	FRAMES     binary table, one row per frame: FRAME, READOUT, RECEIVED, COMPUTED,
//	           SENT (CLOCK_MONOTONIC ns), STATE (the Control API's LoopState number),
//	           SATURATE, WFRMS (m), STREHL, SLOPES (rad), COMMANDS (m)
//
// Extensions after FRAMES (estimates computed from the frames, for example) are
// kept as they are.
//
// The package imports only internal/fits and the protocol.
package recording

import (
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"time"

	"stillsky/internal/fits"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// Version is the format version written in RECVERS.
const Version = 1

const (
	keyVersion = "RECVERS"
	extFrames  = "FRAMES"
	extValid   = "VALIDSUB"
	extActPos  = "ACTPOS"
	extModal   = "MODGAINS"
	extControl = "CONTROL"
	fitsDate   = "2006-01-02T15:04:05.000000000"
)

// reconstructorExts are the extension names of the reconstructor file other than
// its primary HDU.
var reconstructorExts = map[string]bool{"SINGVAL": true, "MODES": true, "MODALINV": true, "INTERACT": true}

// ErrNotRecording is wrapped by the errors that refuse a file for its content: a
// FITS file that is not a recording, or one whose parts disagree.
var ErrNotRecording = errors.New("not a stillsky telemetry recording")

// Writer writes one recording: Create writes everything before the frames, Append
// adds frames, EndFrames ends the table and Close appends any further extensions.
type Writer struct {
	w      io.Writer
	tw     *fits.TableWriter
	ns, na int
	ended  bool
}

func columns(ns, na int) []fits.Column {
	return []fits.Column{
		{Name: "FRAME", Type: 'K', Repeat: 1},
		{Name: "READOUT", Type: 'K', Repeat: 1, Unit: "ns"},
		{Name: "RECEIVED", Type: 'K', Repeat: 1, Unit: "ns"},
		{Name: "COMPUTED", Type: 'K', Repeat: 1, Unit: "ns"},
		{Name: "SENT", Type: 'K', Repeat: 1, Unit: "ns"},
		{Name: "STATE", Type: 'B', Repeat: 1},
		{Name: "SATURATE", Type: 'J', Repeat: 1},
		{Name: "WFRMS", Type: 'D', Repeat: 1, Unit: "m"},
		{Name: "STREHL", Type: 'D', Repeat: 1},
		{Name: "SLOPES", Type: 'E', Repeat: ns, Unit: "rad"},
		{Name: "COMMANDS", Type: 'E', Repeat: na, Unit: "m"},
	}
}

// Create writes the primary HDU, the geometry and the reconstructor file (nil
// for none) to w and starts the FRAMES table for up to frames rows. For fewer
// rows, w must be an io.WriteSeeker (a file).
func Create(w io.Writer, h *stillskyv1.RecordingHeader, file []byte, frames int) (*Writer, error) {
	cam, mir := h.GetCamera(), h.GetMirror()
	ns, na := int(cam.GetSlopeCount()), int(mir.GetActuatorCount())
	if ns < 1 || na < 1 || len(cam.GetValidSubapertures())*2 != ns || len(mir.GetPositionsM()) != 2*na {
		return nil, fmt.Errorf("recording: header describes %d slopes of %d valid subapertures and %d actuators at %d coordinates",
			ns, len(cam.GetValidSubapertures()), na, len(mir.GetPositionsM()))
	}
	p := &fits.HDU{Bitpix: -32}
	k := &p.Header
	k.Set(keyVersion, Version, "stillsky telemetry recording format version")
	k.Set("DATE", time.Unix(0, h.GetStartedUnixNs()).UTC().Format(fitsDate), "recording start (UTC)")
	k.Set("NSUBAP", cam.GetSubapertures(), "subapertures across the pupil")
	k.Set("SLOPECNT", ns, "slopes per frame (x, y per valid subaperture)")
	k.Set("SUBAPSZ", cam.GetSubapertureSizeM(), "[m] subaperture side on the pupil")
	k.Set("PUPILD", cam.GetPupilDiameterM(), "[m] pupil diameter")
	k.Set("WFSWAVE", cam.GetWavelengthM(), "[m] sensing wavelength")
	k.Set("FRATE", cam.GetFrameRateHz(), "[Hz] camera frame rate")
	k.Set("LOCKSTEP", cam.GetLockstep(), "camera waits for each command")
	k.Set("DELAY", cam.GetDelayFrames(), "[frames] loop delay the camera models")
	k.Set("CAMERA", clip(printable(cam.GetDescription()), 68), "camera description")
	k.Set("ZENITH", cam.GetZenithDeg(), "[deg] zenith angle of the line of sight")
	k.Set("OBSTRUCT", cam.GetObstruction(), "central obstruction / pupil diameter")
	k.Set("ACTCNT", na, "driven actuators")
	k.Set("ACTACROS", mir.GetActuatorsAcross(), "actuators across the grid")
	k.Set("ACTPITCH", mir.GetPitchM(), "[m] actuator pitch on the pupil")
	k.Set("STROKE", mir.GetStrokeM(), "[m] command limit")
	k.Set("COUPLING", mir.GetCoupling(), "influence function coupling")
	k.Set("GAIN", h.GetGain(), "integrator gain at the start")
	k.Set("LEAK", h.GetLeak(), "integrator leak at the start")
	k.Set("SCIWAVE", h.GetScienceWavelengthM(), "[m] science wavelength of the estimates")
	k.Set("WINDOW", h.GetWindowFrames(), "[frames] the daemon's telemetry ring")
	k.Set("RECON", len(file) > 0, "a reconstructor was loaded")
	var rhdus []*fits.HDU
	if len(file) > 0 {
		var err error
		if rhdus, err = fits.Read(bytes.NewReader(file)); err != nil {
			return nil, fmt.Errorf("recording: reconstructor file from the daemon: %w", err)
		}
		info := h.GetReconstructor()
		sum := sha256.Sum256(file)
		k.Set("RECMETH", info.GetMethod(), "reconstructor method")
		k.Set("RECMODES", info.GetModesKept(), "reconstructor modes kept")
		k.Set("RECCOND", info.GetConditionNumber(), "reconstructor condition number")
		k.Set("RECDATE", time.Unix(info.GetCreatedUnix(), 0).UTC().Format(fitsDate), "reconstructor creation (UTC)")
		k.Set("RECSHA", hex.EncodeToString(sum[:8]), "SHA-256 of the reconstructor file, first 8 bytes")
		named(rhdus[0], extControl)
	}
	valid := make([]int32, len(cam.GetValidSubapertures()))
	for i, v := range cam.GetValidSubapertures() {
		valid[i] = int32(v)
	}
	hdus := []*fits.HDU{p,
		named(&fits.HDU{Bitpix: 32, Axes: []int{len(valid)}, Data: valid}, extValid),
		named(&fits.HDU{Bitpix: -64, Axes: []int{2, na}, Data: append([]float64(nil), mir.GetPositionsM()...)}, extActPos),
	}
	if g := h.GetModalGains(); len(g) > 0 {
		hdus = append(hdus, named(&fits.HDU{Bitpix: -64, Axes: []int{len(g)}, Data: append([]float64(nil), g...)}, extModal))
	}
	hdus = append(hdus, rhdus...)
	if err := fits.Write(w, hdus...); err != nil {
		return nil, fmt.Errorf("recording: %w", err)
	}
	var th fits.Header
	th.Set("EXTNAME", extFrames, "one row per frame")
	th.Set("COMMENT", nil, "READOUT, RECEIVED, COMPUTED, SENT: CLOCK_MONOTONIC ns (readout: the camera's host)")
	th.Set("COMMENT", nil, "STATE: 1 open, 2 closed, 3 hold, 4 calibrating, 5 tripped")
	tw, err := fits.NewTableWriter(w, th, columns(ns, na), frames)
	if err != nil {
		return nil, fmt.Errorf("recording: %w", err)
	}
	return &Writer{w: w, tw: tw, ns: ns, na: na}, nil
}

func named(h *fits.HDU, name string) *fits.HDU {
	h.Header.Set("EXTNAME", name, "")
	return h
}

func printable(s string) string {
	b := []byte(s)
	for i, c := range b {
		if c < 0x20 || c > 0x7e {
			b[i] = '?'
		}
	}
	return string(b)
}

func clip(s string, n int) string {
	if len(s) > n {
		return s[:n]
	}
	return s
}

// Frames returns the number of frames appended so far.
func (w *Writer) Frames() int { return w.tw.Rows() }

// Append writes a batch of frames.
func (w *Writer) Append(b *stillskyv1.RecordedFrames) error {
	n := len(b.GetFrameNumbers())
	if len(b.GetReadoutEndNs()) != n || len(b.GetReceivedNs()) != n || len(b.GetComputedNs()) != n || len(b.GetSentNs()) != n ||
		len(b.GetStates()) != n || len(b.GetSaturatedActuators()) != n || len(b.GetResidualWavefrontRmsM()) != n ||
		len(b.GetStrehlEstimate()) != n || len(b.GetSlopes()) != n*w.ns || len(b.GetCommands()) != n*w.na {
		return fmt.Errorf("recording: a batch of %d frames with fields of other lengths", n)
	}
	for i := 0; i < n; i++ {
		err := w.tw.WriteRow(int64(b.FrameNumbers[i]), b.ReadoutEndNs[i], b.ReceivedNs[i], b.ComputedNs[i], b.SentNs[i],
			uint8(b.States[i]), int32(b.SaturatedActuators[i]), b.ResidualWavefrontRmsM[i], b.StrehlEstimate[i],
			b.Slopes[i*w.ns:(i+1)*w.ns], b.Commands[i*w.na:(i+1)*w.na])
		if err != nil {
			return fmt.Errorf("recording: %w", err)
		}
	}
	return nil
}

// EndFrames ends the FRAMES table; the file is then a complete recording.
func (w *Writer) EndFrames() error {
	if w.ended {
		return nil
	}
	w.ended = true
	if err := w.tw.Close(); err != nil {
		return fmt.Errorf("recording: %w", err)
	}
	return nil
}

// Close ends the FRAMES table, if EndFrames has not, and appends the extensions
// given.
func (w *Writer) Close(after ...*fits.HDU) error {
	if err := w.EndFrames(); err != nil {
		return err
	}
	if len(after) > 0 {
		if err := fits.AppendExtensions(w.w, after...); err != nil {
			return fmt.Errorf("recording: %w", err)
		}
	}
	return nil
}

// Recording is a recording read back.
type Recording struct {
	// Header holds the primary HDU's keywords.
	Header fits.Header
	// Camera and Mirror are the devices' descriptions, rebuilt from the file.
	Camera *stillskyv1.CameraServiceDescribeResponse
	Mirror *stillskyv1.MirrorServiceDescribeResponse
	// Gain, Leak and ModalGains (nil: all 1) as the recording began;
	// ScienceWavelength of the estimates, metres.
	Gain, Leak, ScienceWavelength float64
	ModalGains                    []float64
	Started                       time.Time
	// ReconstructorFile is the reconstructor as the daemon saved it (nil when
	// none was loaded): what `stillsky ctl load` and the controller package read.
	ReconstructorFile []byte
	// Frames is the number of frames; the per-frame slices have that length,
	// Slopes and Commands Frames × SlopeCount and Frames × ActuatorCount.
	Frames                            int
	FrameNumbers                      []int64
	Readout, Received, Computed, Sent []int64
	States                            []uint8
	Saturated                         []int32
	WavefrontRMS, Strehl              []float64
	Slopes, Commands                  []float32
	// After holds the extensions that follow the frames.
	After []*fits.HDU
}

// ReadFile reads and checks the recording at path.
func ReadFile(path string) (*Recording, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	hdus, err := fits.Read(f)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	r, err := FromHDUs(hdus)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	return r, nil
}

func bad(format string, args ...any) error {
	return fmt.Errorf("%w: "+format, append([]any{ErrNotRecording}, args...)...)
}

// FromHDUs checks and decodes the HDUs of a recording.
func FromHDUs(hdus []*fits.HDU) (*Recording, error) {
	if len(hdus) == 0 {
		return nil, bad("no HDU")
	}
	p := hdus[0].Header
	v, ok := p.Int(keyVersion)
	if !ok {
		return nil, bad("no %s keyword", keyVersion)
	}
	if v != Version {
		return nil, bad("%s = %d: this build reads version %d", keyVersion, v, Version)
	}
	r := &Recording{Header: p}
	var err error
	num := func(key string) float64 {
		x, ok := p.Float(key)
		if (!ok || math.IsNaN(x) || math.IsInf(x, 0) || x < 0) && err == nil {
			err = bad("keyword %s: missing or not a finite number >= 0", key)
		}
		return x
	}
	count := func(key string) int {
		x, ok := p.Int(key)
		if (!ok || x < 0 || x > math.MaxInt32) && err == nil {
			err = bad("keyword %s: missing or not a count", key)
		}
		return int(x)
	}
	lockstep, _ := p.Get("LOCKSTEP")
	desc, _ := p.String("CAMERA")
	r.Camera = &stillskyv1.CameraServiceDescribeResponse{
		Subapertures:     uint32(count("NSUBAP")),
		SlopeCount:       uint32(count("SLOPECNT")),
		FrameRateHz:      num("FRATE"),
		SubapertureSizeM: num("SUBAPSZ"),
		PupilDiameterM:   num("PUPILD"),
		WavelengthM:      num("WFSWAVE"),
		SlopeUnit:        "rad",
		Lockstep:         lockstep == true,
		DelayFrames:      uint32(count("DELAY")),
		Description:      desc,
		ZenithDeg:        num("ZENITH"),
		Obstruction:      num("OBSTRUCT"),
	}
	r.Mirror = &stillskyv1.MirrorServiceDescribeResponse{
		ActuatorCount:   uint32(count("ACTCNT")),
		ActuatorsAcross: uint32(count("ACTACROS")),
		PitchM:          num("ACTPITCH"),
		StrokeM:         num("STROKE"),
		CommandUnit:     "m",
		Coupling:        num("COUPLING"),
	}
	r.Gain, r.Leak, r.ScienceWavelength = num("GAIN"), num("LEAK"), num("SCIWAVE")
	if err != nil {
		return nil, err
	}
	if s, ok := p.String("DATE"); ok {
		if r.Started, err = time.Parse(fitsDate, s); err != nil {
			return nil, bad("keyword DATE %q: want %s", s, fitsDate)
		}
	}
	if !(r.Camera.FrameRateHz > 0) {
		return nil, bad("FRATE %g: must be > 0", r.Camera.FrameRateHz)
	}
	ns, na := int(r.Camera.SlopeCount), int(r.Mirror.ActuatorCount)
	var rec []*fits.HDU
	var frames *fits.HDU
	for i, h := range hdus[1:] {
		name, _ := h.Header.String("EXTNAME")
		if frames != nil {
			r.After = append(r.After, h)
			continue
		}
		switch {
		case name == extValid:
			d, ok := h.Data.([]int32)
			if !ok || len(d)*2 != ns {
				return nil, bad("%s: want %d int32 indices for %d slopes", name, ns/2, ns)
			}
			nsub := int64(r.Camera.Subapertures)
			for _, x := range d {
				if x < 0 || int64(x) >= nsub*nsub {
					return nil, bad("%s: index %d outside the %d×%d grid", name, x, nsub, nsub)
				}
				r.Camera.ValidSubapertures = append(r.Camera.ValidSubapertures, uint32(x))
			}
		case name == extActPos:
			d, ok := h.Data.([]float64)
			if !ok || len(h.Axes) != 2 || h.Axes[0] != 2 || h.Axes[1] != na {
				return nil, bad("%s: want a 2 × %d float64 image", name, na)
			}
			r.Mirror.PositionsM = d
		case name == extModal:
			d, ok := h.Data.([]float64)
			if !ok {
				return nil, bad("%s: want float64 values", name)
			}
			r.ModalGains = d
		case name == extControl:
			c := *h
			c.Header = fits.Header{}
			for _, card := range h.Header.Cards {
				if card.Key != "EXTNAME" {
					c.Header.Cards = append(c.Header.Cards, card)
				}
			}
			rec = append([]*fits.HDU{&c}, rec...)
		case reconstructorExts[name]:
			rec = append(rec, h)
		case name == extFrames:
			if h.Table == nil {
				return nil, bad("extension %d: %s is not a binary table", i+1, name)
			}
			frames = h
		default:
			return nil, bad("extension %d: EXTNAME %q unknown before %s", i+1, name, extFrames)
		}
	}
	if frames == nil {
		return nil, bad("no %s table", extFrames)
	}
	if r.Camera.ValidSubapertures == nil || r.Mirror.PositionsM == nil {
		return nil, bad("%s or %s missing", extValid, extActPos)
	}
	if len(rec) > 0 {
		if _, ok := rec[0].Header.Get("EXTNAME"); ok || rec[0].Data == nil {
			return nil, bad("reconstructor extensions without %s", extControl)
		}
		var buf bytes.Buffer
		if err := fits.Write(&buf, rec...); err != nil {
			return nil, bad("reconstructor: %v", err)
		}
		r.ReconstructorFile = buf.Bytes()
	}
	if err := r.readFrames(frames.Table, ns, na); err != nil {
		return nil, err
	}
	return r, nil
}

func (r *Recording) readFrames(t *fits.Table, ns, na int) error {
	r.Frames = t.Rows
	var err error
	ints := func(name string) []int64 {
		v, _, e := fits.Values[int64](t, name)
		if e != nil && err == nil {
			err = e
		}
		return v
	}
	floats := func(name string) []float64 {
		v, _, e := fits.Values[float64](t, name)
		if e != nil && err == nil {
			err = e
		}
		return v
	}
	r.FrameNumbers, r.Readout, r.Received, r.Computed, r.Sent = ints("FRAME"), ints("READOUT"), ints("RECEIVED"), ints("COMPUTED"), ints("SENT")
	r.WavefrontRMS, r.Strehl = floats("WFRMS"), floats("STREHL")
	if err != nil {
		return bad("%s: %v", extFrames, err)
	}
	if r.States, _, err = fits.Values[uint8](t, "STATE"); err != nil {
		return bad("%s: %v", extFrames, err)
	}
	if r.Saturated, _, err = fits.Values[int32](t, "SATURATE"); err != nil {
		return bad("%s: %v", extFrames, err)
	}
	var rs, rc int
	if r.Slopes, rs, err = fits.Values[float32](t, "SLOPES"); err != nil {
		return bad("%s: %v", extFrames, err)
	}
	if r.Commands, rc, err = fits.Values[float32](t, "COMMANDS"); err != nil {
		return bad("%s: %v", extFrames, err)
	}
	if rs != ns || rc != na {
		return bad("%s: %d slopes and %d commands a frame; the header says %d and %d", extFrames, rs, rc, ns, na)
	}
	return nil
}
