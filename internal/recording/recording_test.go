package recording

import (
	"bytes"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"stillsky/internal/fits"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

func header() *stillskyv1.RecordingHeader {
	return &stillskyv1.RecordingHeader{
		Camera: &stillskyv1.CameraServiceDescribeResponse{Subapertures: 2, ValidSubapertures: []uint32{0, 1, 3}, SlopeCount: 6,
			FrameRateHz: 500, SubapertureSizeM: 0.5, PupilDiameterM: 1, WavelengthM: 700e-9, DelayFrames: 2, Lockstep: true,
			Description: "a made-up sensor", ZenithDeg: 30, Obstruction: 0.1},
		Mirror: &stillskyv1.MirrorServiceDescribeResponse{ActuatorCount: 4, ActuatorsAcross: 2, PositionsM: []float64{0, 0, 1, 0, 0, 1, 1, 1},
			PitchM: 1, StrokeM: 1e-6, Coupling: 0.2},
		Gain: 0.4, Leak: 0.01, ModalGains: []float64{1, 0.5}, ScienceWavelengthM: 1.65e-6, WindowFrames: 64, StartedUnixNs: 1.7e18,
	}
}

func batch(from, n int) *stillskyv1.RecordedFrames {
	b := &stillskyv1.RecordedFrames{}
	for i := from; i < from+n; i++ {
		b.FrameNumbers = append(b.FrameNumbers, uint64(i+1))
		b.ReadoutEndNs = append(b.ReadoutEndNs, int64(i)*2e6)
		b.ReceivedNs = append(b.ReceivedNs, int64(i)*2e6+100)
		b.ComputedNs = append(b.ComputedNs, int64(i)*2e6+200)
		b.SentNs = append(b.SentNs, int64(i)*2e6+300)
		b.States = append(b.States, stillskyv1.LoopState_LOOP_STATE_CLOSED)
		b.SaturatedActuators = append(b.SaturatedActuators, uint32(i%3))
		b.ResidualWavefrontRmsM = append(b.ResidualWavefrontRmsM, float64(i)*1e-9)
		b.StrehlEstimate = append(b.StrehlEstimate, 0.5)
		for k := range 6 {
			b.Slopes = append(b.Slopes, float32(i*10+k))
		}
		for k := range 4 {
			b.Commands = append(b.Commands, float32(-i*10-k))
		}
	}
	return b
}

// write makes a recording of frames frames (announcing announce) with an
// extension after them.
func write(t *testing.T, frames, announce int) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), "rec.fits")
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	w, err := Create(f, header(), nil, announce)
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; i < frames; i += 4 {
		if err := w.Append(batch(i, min(4, frames-i))); err != nil {
			t.Fatal(err)
		}
	}
	after := &fits.HDU{Bitpix: -32}
	after.Header.Set("EXTNAME", "TURBULENCE", "")
	after.Header.Set("R0", 0.12, "")
	if err := w.Close(after); err != nil {
		t.Fatal(err)
	}
	return path
}

func TestRoundTrip(t *testing.T) {
	r, err := ReadFile(write(t, 10, 16))
	if err != nil {
		t.Fatal(err)
	}
	h := header()
	if r.Frames != 10 || r.Gain != 0.4 || r.Leak != 0.01 || len(r.ModalGains) != 2 || r.Started.UnixNano() != 1.7e18 {
		t.Errorf("read %d frames, gain %v, leak %v, modal gains %v, start %v", r.Frames, r.Gain, r.Leak, r.ModalGains, r.Started)
	}
	c, m := r.Camera, r.Mirror
	if c.GetSubapertures() != 2 || c.GetSlopeCount() != 6 || c.GetFrameRateHz() != 500 || !c.GetLockstep() || c.GetDelayFrames() != 2 ||
		c.GetZenithDeg() != 30 || c.GetObstruction() != 0.1 || c.GetDescription() != h.Camera.Description ||
		len(c.GetValidSubapertures()) != 3 || c.GetValidSubapertures()[2] != 3 {
		t.Errorf("camera read back as %v", c)
	}
	if m.GetActuatorCount() != 4 || m.GetStrokeM() != 1e-6 || m.GetCoupling() != 0.2 || len(m.GetPositionsM()) != 8 || m.GetPositionsM()[6] != 1 {
		t.Errorf("mirror read back as %v", m)
	}
	for i := range 10 {
		if r.FrameNumbers[i] != int64(i+1) || r.Sent[i]-r.Readout[i] != 300 || r.Saturated[i] != int32(i%3) ||
			r.Slopes[6*i+5] != float32(i*10+5) || r.Commands[4*i+3] != float32(-i*10-3) || r.States[i] != 2 {
			t.Fatalf("frame %d read back wrong", i)
		}
	}
	if len(r.After) != 1 || r.ReconstructorFile != nil {
		t.Errorf("%d extensions after the frames, reconstructor %v", len(r.After), r.ReconstructorFile != nil)
	}
}

func TestRefuses(t *testing.T) {
	good, err := os.ReadFile(write(t, 10, 10))
	if err != nil {
		t.Fatal(err)
	}
	hdus, err := fits.Read(bytes.NewReader(good))
	if err != nil {
		t.Fatal(err)
	}
	edit := func(f func(h []*fits.HDU) []*fits.HDU) []*fits.HDU {
		c, _ := fits.Read(bytes.NewReader(good))
		return f(c)
	}
	for name, h := range map[string][]*fits.HDU{
		"no version":    edit(func(h []*fits.HDU) []*fits.HDU { h[0].Header = fits.Header{}; return h }),
		"version 9":     edit(func(h []*fits.HDU) []*fits.HDU { h[0].Header.Set("RECVERS", 9, ""); return h }),
		"no frame rate": edit(func(h []*fits.HDU) []*fits.HDU { h[0].Header.Set("FRATE", 0.0, ""); return h }),
		"NaN gain":      edit(func(h []*fits.HDU) []*fits.HDU { h[0].Header.Set("GAIN", "NaN", ""); return h }),
		"slopes":        edit(func(h []*fits.HDU) []*fits.HDU { h[0].Header.Set("SLOPECNT", 8, ""); return h }),
		"index":         edit(func(h []*fits.HDU) []*fits.HDU { h[1].Data.([]int32)[0] = 4; return h }),
		"no frames":     edit(func(h []*fits.HDU) []*fits.HDU { return h[:3] }),
		"no layout":     edit(func(h []*fits.HDU) []*fits.HDU { return append(h[:1], h[3:]...) }),
		"unknown":       edit(func(h []*fits.HDU) []*fits.HDU { h[1].Header.Set("EXTNAME", "OTHER", ""); return h }),
	} {
		if _, err := FromHDUs(h); !errors.Is(err, ErrNotRecording) {
			t.Errorf("%s: %v, want ErrNotRecording", name, err)
		}
	}
	if _, err := FromHDUs(hdus); err != nil {
		t.Fatalf("the unedited file: %v", err)
	}
	path := filepath.Join(t.TempDir(), "short.fits")
	os.WriteFile(path, good[:len(good)-2880-10], 0o644)
	if _, err := ReadFile(path); err == nil || !strings.Contains(err.Error(), "truncated") {
		t.Errorf("truncated file: %v", err)
	}
	if _, err := Create(&bytes.Buffer{}, &stillskyv1.RecordingHeader{Camera: &stillskyv1.CameraServiceDescribeResponse{SlopeCount: 6}}, nil, 1); err == nil {
		t.Error("a header without valid subapertures or actuators accepted")
	}
}
