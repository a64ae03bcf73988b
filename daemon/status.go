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
	}
	if k := r.ModesKept; k > 0 && k <= len(r.SingularValues) && r.SingularValues[k-1] > 0 {
		info.ConditionNumber = r.SingularValues[0] / r.SingularValues[k-1]
	}
	return info
}

// status is the GetStatus snapshot.
func (d *Daemon) status() *stillskyv1.GetStatusResponse {
	st := &d.stats
	d.paramsMu.Lock()
	gain, leak := d.gain, d.leak
	d.paramsMu.Unlock()
	s := &stillskyv1.GetStatusResponse{
		State:                 loopState(d.state.Load()).proto(),
		Gain:                  gain,
		Leak:                  leak,
		Frames:                st.frames.Load(),
		FramesDropped:         st.dropped.Load(),
		FramesRejected:        st.rejected.Load(),
		LastFrame:             st.lastFrame.Load(),
		Reconstructor:         reconstructorInfo(d.reconstructor()),
		ResidualSlopeRmsRad:   st.slopeRMS.Load(),
		ResidualWavefrontRmsM: st.wavefrontRMS.Load(),
		StrehlEstimate:        st.strehl.Load(),
		ScienceWavelengthM:    d.cfg.ScienceWavelength,
		SaturatedActuators:    uint32(st.saturated.Load()),
		RtcLatency:            st.rtc.summary(),
		EndToEndLatency:       st.e2e.summary(),
		InterlockTrips:        st.trips.Load(),
		LastInterlock:         st.lastTrip(),
		CameraConnected:       d.cameraUp.Load(),
		MirrorConnected:       d.mirrorUp.Load(),
	}
	if g := d.geometry(); g != nil {
		s.SlopeCount, s.ActuatorCount, s.FrameRateHz = uint32(g.slopes), uint32(g.actuators), g.frameRate
	}
	return s
}
