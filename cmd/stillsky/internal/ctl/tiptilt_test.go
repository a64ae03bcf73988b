package ctl_test

import (
	"bytes"
	"strings"
	"testing"

	"stillsky/cmd/stillsky/internal/ctl"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// ctl status prints the tip-tilt loop's line when the daemon runs one, in
// microradians, and none without.
func TestStatusShowsTipTilt(t *testing.T) {
	var out bytes.Buffer
	ctl.WriteStatus(&out, &stillskyv1.GetStatusResponse{})
	if strings.Contains(out.String(), "tip-tilt") {
		t.Errorf("a daemon without a tip-tilt loop shows one:\n%s", out.String())
	}
	out.Reset()
	ctl.WriteStatus(&out, &stillskyv1.GetStatusResponse{TipTilt: &stillskyv1.TipTiltStatus{
		Connected: true, Frames: 1200, Commands: 1199, ResidualRmsRad: 4.7e-8, CommandXRad: -2.5e-7, CommandYRad: 3e-7,
		StrokeRad: 1e-5, SaturatedFrames: 2, Gain: 0.4, OffloadGain: 0.05}})
	want := "tip-tilt        devices connected; 1200 frames, 1199 commands; residual 0.047 µrad rms; command (-0.25, 0.3) µrad of ±10; 2 saturated frames; gain 0.4, offload 0.05\n"
	if !strings.Contains(out.String(), want) {
		t.Errorf("status:\n%s\nwant the line\n%s", out.String(), want)
	}
}
