package daemon

import (
	"net/http"

	stillskyv1 "stillsky/proto/stillsky/v1"
)

// describes keeps the devices' Describe answers of the current session: the live
// view draws actuators and subapertures where the devices say they are.
type describes struct {
	cam *stillskyv1.CameraServiceDescribeResponse
	mir *stillskyv1.MirrorServiceDescribeResponse
}

// registerLiveView adds the live view's page, its JSON feed and the PNG
// snapshots to the daemon's HTTP mux.
func (d *Daemon) registerLiveView(mux *http.ServeMux) {
	lv := &liveView{d: d}
	mux.HandleFunc("GET /live.json", lv.serveJSON)
}

type liveView struct{ d *Daemon }

func (lv *liveView) serveJSON(w http.ResponseWriter, r *http.Request) {
	http.Error(w, "live view: devices not described yet", http.StatusServiceUnavailable)
}
