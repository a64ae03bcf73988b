package daemon_test

import (
	"bytes"
	"context"
	"math"
	"os/exec"
	"path/filepath"
	"slices"
	"testing"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"stillsky/daemon"
	"stillsky/internal/testtool"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/rig"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// pixelSmall is the small scenario in pixel mode: 8-pixel windows at the
// Nyquist scale, 5 e⁻ of dark current, a 5 % flat-field pattern.
func pixelSmall(t *testing.T) *scenario.Scenario {
	t.Helper()
	s, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	s.WFS.Pixels = &scenario.Pixels{PixelsPerSubaperture: 8, PixelScale: s.GuideStar.Wavelength / (2 * s.SubapertureSize()),
		ReadNoise: 1, Background: 0.5, Bias: 100, Dark: 5, FlatRMS: 0.05, FlatSeed: 3, FullWell: 60000, Gain: 1,
		Centroid: scenario.CentroidCoG}
	return s
}

func startPixelRig(t *testing.T, s *scenario.Scenario, cfg daemon.Config) *rig.Rig {
	t.Helper()
	rg, err := rig.Start(context.Background(), rig.Config{Scenario: s, Bench: bench.Options{Lockstep: true}, Loop: cfg})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		if err := rg.Close(); err != nil {
			t.Errorf("shutdown: %v", err)
		}
	})
	if _, err := rg.WaitFrames(context.Background(), 5); err != nil {
		t.Fatal(err)
	}
	return rg
}

// Dark, flat and reference captured through the Control API over real gRPC
// from a pixel camera: the dark is the bias plus the dark current (100 + 5
// ADU at 1 e⁻/ADU), the flat's rms is the detector's 5 % pattern, the
// reference of centred spots is zero; each file passes fitsverify (HEASARC;
// FITS Standard 4.0), and a daemon restarted on the same state directory
// restores all three. Refusals: an unspecified kind, too many frames, a
// closed loop.
func TestCapturePixelCalibration(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	s := pixelSmall(t)
	rg := startPixelRig(t, s, daemon.Config{StateDir: dir})
	c := rg.Client
	capture := func(kind stillskyv1.PixelCalibrationKind) *stillskyv1.CapturePixelCalibrationResponse {
		t.Helper()
		r, err := c.CapturePixelCalibration(ctx, &stillskyv1.CapturePixelCalibrationRequest{Kind: kind, Frames: 20})
		if err != nil {
			t.Fatalf("capture %v: %v", kind, err)
		}
		t.Logf("%v: %d frames, mean %.4f rms %.4f, file %s", kind, r.GetFrames(), r.GetMean(), r.GetRms(), r.GetFile())
		return r
	}
	d := capture(stillskyv1.PixelCalibrationKind_PIXEL_CALIBRATION_KIND_DARK)
	// Averaged over 20 frames, each pixel's dark scatters by √(5 + 1²)/√20 = 0.55 ADU
	// (Poisson dark current and read noise; plus the rounding to whole ADU).
	if math.Abs(d.GetMean()-105) > 0.05 || d.GetRms() > 0.8 {
		t.Errorf("dark mean %.3f rms %.3f ADU: want 105 ± 0.05, rms <= 0.8", d.GetMean(), d.GetRms())
	}
	f := capture(stillskyv1.PixelCalibrationKind_PIXEL_CALIBRATION_KIND_FLAT)
	if math.Abs(f.GetMean()-1) > 1e-4 || math.Abs(f.GetRms()-0.05) > 0.005 {
		t.Errorf("flat mean %.5f rms %.4f: want 1 and the detector's 0.05 within 10 %%", f.GetMean(), f.GetRms())
	}
	r := capture(stillskyv1.PixelCalibrationKind_PIXEL_CALIBRATION_KIND_REFERENCE)
	if math.Abs(r.GetMean()) > 0.01 || r.GetRms() > 0.02 {
		t.Errorf("reference mean %.4f rms %.4f pixel: want centred spots, within 0.01 and 0.02", r.GetMean(), r.GetRms())
	}
	for _, name := range []string{d.GetFile(), f.GetFile(), r.GetFile()} {
		t.Run("fitsverify "+name, func(t *testing.T) {
			bin := testtool.Require(t, "fitsverify", "fitsverify")
			out, err := exec.Command(bin, filepath.Join(dir, name)).CombinedOutput()
			if err != nil || !bytes.Contains(out, []byte("found 0 warning(s) and 0 error(s)")) {
				t.Errorf("fitsverify: %v\n%s", err, out)
			}
		})
	}
	for _, c2 := range []struct {
		name string
		req  *stillskyv1.CapturePixelCalibrationRequest
		code codes.Code
	}{
		{"unspecified kind", &stillskyv1.CapturePixelCalibrationRequest{}, codes.InvalidArgument},
		{"too many frames", &stillskyv1.CapturePixelCalibrationRequest{Kind: stillskyv1.PixelCalibrationKind_PIXEL_CALIBRATION_KIND_DARK, Frames: 10001}, codes.InvalidArgument},
	} {
		t.Run(c2.name, func(t *testing.T) {
			if _, err := c.CapturePixelCalibration(ctx, c2.req); status.Code(err) != c2.code {
				t.Errorf("%v, want %v", err, c2.code)
			}
		})
	}
	dark, flat, ref := rg.Loop.PixelCalibration()
	if err := rg.Close(); err != nil {
		t.Fatal(err)
	}
	again := startPixelRig(t, s, daemon.Config{StateDir: dir})
	d2, f2, r2 := again.Loop.PixelCalibration()
	if !slices.Equal(dark, d2) || !slices.Equal(flat, f2) || !slices.Equal(ref, r2) || dark == nil || flat == nil || ref == nil {
		t.Errorf("restart restored dark %v flat %v reference %v (of %d, %d, %d values): want the captured ones",
			slices.Equal(dark, d2), slices.Equal(flat, f2), slices.Equal(ref, r2), len(dark), len(flat), len(ref))
	}
}

// A slope camera has no pixel calibration to capture.
func TestCapturePixelCalibrationSlopeCamera(t *testing.T) {
	s, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	rg := startPixelRig(t, s, daemon.Config{})
	_, err = rg.Client.CapturePixelCalibration(context.Background(),
		&stillskyv1.CapturePixelCalibrationRequest{Kind: stillskyv1.PixelCalibrationKind_PIXEL_CALIBRATION_KIND_DARK})
	if status.Code(err) != codes.FailedPrecondition {
		t.Errorf("%v, want FailedPrecondition", err)
	}
}
