package daemon

import (
	"stillsky/controller"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

func reconstructorInfo(r *controller.Reconstructor) *stillskyv1.ReconstructorInfo {
	if r == nil {
		return nil
	}
	info := &stillskyv1.ReconstructorInfo{
		Method:         r.Method.String(),
		ModesKept:      uint32(r.ModesKept),
		SlopeCount:     uint32(r.Slopes),
		ActuatorCount:  uint32(r.Actuators),
		CreatedUnix:    r.Created.Unix(),
		SingularValues: r.SingularValues,
		Basis:          "svd",
		ModeCount:      uint32(r.NumModes()),
	}
	if r.Basis != "" {
		info.Basis = r.Basis
	}
	if r.Method == controller.MethodMatrix {
		info.Basis = ""
	}
	if k := r.ModesKept; k > 0 && k <= len(r.SingularValues) && r.SingularValues[k-1] > 0 {
		info.ConditionNumber = r.SingularValues[0] / r.SingularValues[k-1]
	}
	return info
}

// status is the GetStatus snapshot.
func (d *Daemon) status() *stillskyv1.GetStatusResponse {
	u := d.u.snapshot()
	d.paramsMu.Lock()
	gain, leak := d.gain, d.leak
	d.paramsMu.Unlock()
	s := &stillskyv1.GetStatusResponse{
		State:                 u.state.proto(),
		Gain:                  gain,
		Leak:                  leak,
		Frames:                u.frames,
		FramesDropped:         u.dropped,
		FramesRejected:        u.rejected,
		LastFrame:             u.lastFrame,
		Reconstructor:         reconstructorInfo(u.reconstructor),
		ResidualSlopeRmsRad:   u.slopeRMS,
		ResidualWavefrontRmsM: u.wavefrontRMS,
		StrehlEstimate:        u.strehl,
		ScienceWavelengthM:    d.cfg.ScienceWavelength,
		SaturatedActuators:    uint32(u.saturated),
		RtcLatency:            u.rtc,
		EndToEndLatency:       u.endToEnd,
		InterlockTrips:        u.trips,
		LastInterlock:         u.lastTrip,
		CameraConnected:       d.cameraUp.Load(),
		MirrorConnected:       d.mirrorUp.Load(),
	}
	if g := d.geometry(); g != nil {
		s.SlopeCount, s.ActuatorCount, s.FrameRateHz = uint32(g.slopes), uint32(g.actuators), g.frameRate
	}
	if tt := d.u.tt; tt != nil {
		s.TipTilt = tt.status()
	}
	if st, ok := d.SupervisorState(); ok {
		s.SupervisorState = st.String()
	}
	return s
}
