package daemon

import (
	"bytes"
	"embed"
	"encoding/json"
	"fmt"
	"image"
	"image/color"
	"image/png"
	"io"
	"math"
	"net/http"
	"strconv"
	"strings"
	"sync"
	"time"

	stillskyv1 "stillsky/proto/stillsky/v1"
)

// assets holds the live view page and its script; no framework, no build step.
//
//go:embed assets
var assets embed.FS

// describes keeps the devices' Describe answers of the current session: the live
// view draws actuators and subapertures where the devices say they are.
type describes struct {
	cam *stillskyv1.CameraServiceDescribeResponse
	mir *stillskyv1.MirrorServiceDescribeResponse
}

// registerLiveView adds the live view to the daemon's HTTP mux: the page at /,
// its JSON feed at /live.json, and PNG snapshots of the mirror command, the
// slopes and (relayed from the bench) the science PSF.
func (d *Daemon) registerLiveView(mux *http.ServeMux) {
	lv := &liveView{d: d, client: &http.Client{Timeout: 2 * time.Second}}
	page, _ := assets.ReadFile("assets/index.html")
	mux.HandleFunc("GET /{$}", func(w http.ResponseWriter, _ *http.Request) {
		w.Header().Set("Content-Type", "text/html; charset=utf-8")
		w.Write(page)
	})
	mux.Handle("GET /assets/", http.FileServerFS(assets))
	mux.HandleFunc("GET /live.json", lv.serveJSON)
	mux.HandleFunc("GET /snapshot/commands.png", lv.serveCommands)
	mux.HandleFunc("GET /snapshot/slopes.png", lv.serveSlopes)
	mux.HandleFunc("GET /snapshot/psf.png", lv.servePSF)
	mux.HandleFunc("GET /snapshot/contrast.json", lv.serveContrast)
}

// liveView serves the live view from the telemetry ring and the devices'
// geometry. It only reads: nothing here changes the loop.
type liveView struct {
	d      *Daemon
	client *http.Client

	mu     sync.Mutex
	last   *describes
	layout *layout
}

// layout is the devices' geometry as the live view draws it: subapertures and
// actuators as cells of square grids, row-major, row 0 at the bottom (y up).
type layout struct {
	ID int `json:"id"`
	// Subapertures across the lenslet grid; Valid holds the grid cell of each
	// valid subaperture, in slope order (slopes 2k, 2k+1 are its x and y).
	Subapertures int   `json:"subapertures"`
	Valid        []int `json:"valid_subapertures"`
	// ActuatorsAcross the actuator grid; Cells holds the grid cell of each
	// driven actuator, in command order.
	ActuatorsAcross int     `json:"actuators_across"`
	Cells           []int   `json:"actuator_cells"`
	PupilDiameter   float64 `json:"pupil_diameter_m"`
	Stroke          float64 `json:"stroke_m"`
}

// current returns the layout of the current session's devices, or nil before
// they are described.
func (lv *liveView) current() *layout {
	desc := lv.d.describes.Load()
	if desc == nil {
		return nil
	}
	lv.mu.Lock()
	defer lv.mu.Unlock()
	if desc != lv.last {
		id := 1
		if lv.layout != nil {
			id = lv.layout.ID + 1
		}
		lv.last, lv.layout = desc, newLayout(desc, id)
	}
	return lv.layout
}

func newLayout(desc *describes, id int) *layout {
	cam, mir := desc.cam, desc.mir
	l := &layout{
		ID:              id,
		Subapertures:    int(cam.GetSubapertures()),
		ActuatorsAcross: int(mir.GetActuatorsAcross()),
		PupilDiameter:   cam.GetPupilDiameterM(),
		Stroke:          mir.GetStrokeM(),
	}
	for _, v := range cam.GetValidSubapertures() {
		l.Valid = append(l.Valid, int(v))
	}
	// Positions come in metres; the grid cell is the position over the pitch,
	// counted from the lowest actuator.
	pos, pitch, n := mir.GetPositionsM(), mir.GetPitchM(), l.ActuatorsAcross
	minX, minY := math.Inf(1), math.Inf(1)
	for i := 0; i+1 < len(pos); i += 2 {
		minX, minY = min(minX, pos[i]), min(minY, pos[i+1])
	}
	for i := 0; i+1 < len(pos) && pitch > 0; i += 2 {
		c := min(max(int(math.Round((pos[i]-minX)/pitch)), 0), n-1)
		r := min(max(int(math.Round((pos[i+1]-minY)/pitch)), 0), n-1)
		l.Cells = append(l.Cells, r*n+c)
	}
	return l
}

// liveSample is the newest frame as /live.json reports it.
type liveSample struct {
	Frame        uint64    `json:"frame"`
	State        string    `json:"state"`
	Slopes       []float32 `json:"slopes"`
	Commands     []float32 `json:"commands"`
	SlopeRMS     float64   `json:"residual_slope_rms_rad"`
	WavefrontRMS float64   `json:"residual_wavefront_rms_m"`
	Strehl       float64   `json:"strehl_estimate"`
	Wavelength   float64   `json:"science_wavelength_m"`
	Saturated    uint32    `json:"saturated_actuators"`
	RTCLatency   float64   `json:"rtc_latency_s"`
}

// liveFrame is the body of /live.json. Geometry is omitted when the client
// already holds the current one (?geometry=<id>).
type liveFrame struct {
	Geometry   *layout    `json:"geometry,omitempty"`
	GeometryID int        `json:"geometry_id"`
	PSF        bool       `json:"psf"`
	Sample     liveSample `json:"sample"`
}

func (lv *liveView) sample() liveSample {
	s := lv.d.u.telemetry.snapshot()
	state := "unknown"
	if i := int(s.GetState()) - 1; i >= 0 && i < len(stateNames) {
		state = stateNames[i]
	}
	return liveSample{
		Frame: s.GetFrameNumber(), State: state, Slopes: s.GetSlopes(), Commands: s.GetCommands(),
		SlopeRMS: s.GetResidualSlopeRmsRad(), WavefrontRMS: s.GetResidualWavefrontRmsM(),
		Strehl: s.GetStrehlEstimate(), Wavelength: lv.d.cfg.ScienceWavelength,
		Saturated: s.GetSaturatedActuators(), RTCLatency: s.GetRtcLatencyS(),
	}
}

func (lv *liveView) serveJSON(w http.ResponseWriter, r *http.Request) {
	l := lv.current()
	if l == nil {
		http.Error(w, "live view: the devices have not been described yet", http.StatusServiceUnavailable)
		return
	}
	f := liveFrame{GeometryID: l.ID, PSF: lv.d.cfg.BenchURL != "", Sample: lv.sample()}
	if have, err := strconv.Atoi(r.URL.Query().Get("geometry")); err != nil || have != l.ID {
		f.Geometry = l
	}
	body, err := json.Marshal(f)
	if err != nil {
		// Non-finite estimates cannot be written as JSON.
		http.Error(w, "live view: "+err.Error(), http.StatusInternalServerError)
		return
	}
	w.Header().Set("Content-Type", "application/json")
	w.Header().Set("Cache-Control", "no-store")
	w.Write(body)
}

func (lv *liveView) serveCommands(w http.ResponseWriter, _ *http.Request) {
	l := lv.current()
	if l == nil || l.ActuatorsAcross < 1 {
		http.Error(w, "live view: no mirror described yet", http.StatusServiceUnavailable)
		return
	}
	writePNG(w, commandImage(l, lv.sample().Commands))
}

func (lv *liveView) serveSlopes(w http.ResponseWriter, _ *http.Request) {
	l := lv.current()
	if l == nil || l.Subapertures < 1 {
		http.Error(w, "live view: no camera described yet", http.StatusServiceUnavailable)
		return
	}
	writePNG(w, slopeImage(l, lv.sample().Slopes))
}

// servePSF relays the bench's PSF image, so that the page needs only this
// origin and learns from the status whether the bench is reachable.
func (lv *liveView) servePSF(w http.ResponseWriter, r *http.Request) {
	lv.relay(w, r, "/psf.png", "image/png")
}

// serveContrast relays the bench's raw contrast at a few separations (JSON).
func (lv *liveView) serveContrast(w http.ResponseWriter, r *http.Request) {
	lv.relay(w, r, "/contrast.json", "application/json")
}

// relay answers with the bench's path, of the given content type.
func (lv *liveView) relay(w http.ResponseWriter, r *http.Request, path, contentType string) {
	base := lv.d.cfg.BenchURL
	if base == "" {
		http.Error(w, "live view: no bench URL configured", http.StatusNotFound)
		return
	}
	req, err := http.NewRequestWithContext(r.Context(), http.MethodGet, strings.TrimSuffix(base, "/")+path, nil)
	if err != nil {
		http.Error(w, fmt.Sprintf("live view: bench URL %q: %v", base, err), http.StatusInternalServerError)
		return
	}
	resp, err := lv.client.Do(req)
	if err != nil {
		http.Error(w, "live view: bench unreachable: "+err.Error(), http.StatusBadGateway)
		return
	}
	defer resp.Body.Close()
	if resp.StatusCode != http.StatusOK {
		http.Error(w, "live view: bench answered "+resp.Status, http.StatusBadGateway)
		return
	}
	w.Header().Set("Content-Type", contentType)
	w.Header().Set("Cache-Control", "no-store")
	io.Copy(w, resp.Body)
}

func writePNG(w http.ResponseWriter, img image.Image) {
	var buf bytes.Buffer
	if err := png.Encode(&buf, img); err != nil {
		http.Error(w, "live view: png: "+err.Error(), http.StatusInternalServerError)
		return
	}
	w.Header().Set("Content-Type", "image/png")
	w.Header().Set("Cache-Control", "no-store")
	w.Write(buf.Bytes())
}

// Colours of the snapshots (and of the page, which uses the same values).
var (
	background = color.RGBA{24, 26, 31, 255}
	cellColour = color.RGBA{46, 50, 60, 255}
	arrowColor = color.RGBA{120, 224, 168, 255}
	// A diverging scale of our own for signed values: blue below zero, pale grey
	// at zero, red above.
	negative = color.RGBA{38, 92, 204, 255}
	neutral  = color.RGBA{236, 236, 232, 255}
	positive = color.RGBA{206, 52, 40, 255}
)

// diverging maps t in [−1, 1] (clamped) onto negative–neutral–positive.
func diverging(t float64) color.RGBA {
	t = min(max(t, -1), 1)
	a, b := neutral, positive
	if t < 0 {
		b, t = negative, -t
	}
	mix := func(p, q uint8) uint8 { return uint8(float64(p) + t*(float64(q)-float64(p)) + 0.5) }
	return color.RGBA{mix(a.R, b.R), mix(a.G, b.G), mix(a.B, b.B), 255}
}

// snapshotSide is the target side of the snapshots in pixels.
const snapshotSide = 360

// peak returns max |v|, or 1 when v is all zero, as the scale of a map.
func peak(v []float32) float64 {
	p := 0.0
	for _, x := range v {
		p = max(p, math.Abs(float64(x)))
	}
	if !(p > 0) || math.IsInf(p, 0) {
		return 1
	}
	return p
}

// gridImage returns a square image of n×n cells and the cell side, with cells
// drawn from the bottom row up.
func gridImage(n, minCell int) (*image.RGBA, int) {
	s := max(minCell, snapshotSide/n)
	img := image.NewRGBA(image.Rect(0, 0, n*s, n*s))
	fill(img, img.Bounds(), background)
	return img, s
}

// cellRect is the pixel rectangle of grid cell (row r, column c) of an n-grid,
// row 0 at the bottom, inset by gap pixels.
func cellRect(n, s, r, c, gap int) image.Rectangle {
	y := (n - 1 - r) * s
	return image.Rect(c*s+gap, y+gap, (c+1)*s-gap, y+s-gap)
}

func fill(img *image.RGBA, r image.Rectangle, c color.RGBA) {
	for y := r.Min.Y; y < r.Max.Y; y++ {
		for x := r.Min.X; x < r.Max.X; x++ {
			img.SetRGBA(x, y, c)
		}
	}
}

// commandImage draws each actuator's command as a coloured cell, scaled to the
// largest |command| of the frame.
func commandImage(l *layout, cmd []float32) *image.RGBA {
	n := l.ActuatorsAcross
	img, s := gridImage(n, 4)
	gap := 0
	if s >= 8 {
		gap = 1
	}
	scale := peak(cmd)
	for i, cell := range l.Cells {
		if i >= len(cmd) {
			break
		}
		fill(img, cellRect(n, s, cell/n, cell%n, gap), diverging(float64(cmd[i])/scale))
	}
	return img
}

// slopeImage draws an arrow per valid subaperture, its length the slope vector
// over the largest slope component of the frame (half a cell at most).
func slopeImage(l *layout, slopes []float32) *image.RGBA {
	n := l.Subapertures
	img, s := gridImage(n, 12)
	scale := peak(slopes)
	for k, cell := range l.Valid {
		rect := cellRect(n, s, cell/n, cell%n, 1)
		fill(img, rect, cellColour)
		if 2*k+1 >= len(slopes) {
			continue
		}
		cx, cy := float64(rect.Min.X+rect.Max.X)/2, float64(rect.Min.Y+rect.Max.Y)/2
		// y up on the pupil is y down in the image.
		dx := float64(slopes[2*k]) / scale * 0.45 * float64(s)
		dy := -float64(slopes[2*k+1]) / scale * 0.45 * float64(s)
		arrow(img, cx, cy, dx, dy)
	}
	return img
}

// arrow draws a line from (x, y) along (dx, dy) with a two-stroke head.
func arrow(img *image.RGBA, x, y, dx, dy float64) {
	line(img, x, y, x+dx, y+dy)
	length := math.Hypot(dx, dy)
	if length < 3 {
		return
	}
	ux, uy := dx/length, dy/length
	head := max(2, 0.3*length)
	for _, sgn := range []float64{1, -1} {
		// The head strokes point back from the tip at ±30°.
		hx := -ux*math.Cos(math.Pi/6) - sgn*uy*math.Sin(math.Pi/6)
		hy := -uy*math.Cos(math.Pi/6) + sgn*ux*math.Sin(math.Pi/6)
		line(img, x+dx, y+dy, x+dx+head*hx, y+dy+head*hy)
	}
}

// line draws a one-pixel line by sampling it at every pixel step.
func line(img *image.RGBA, x0, y0, x1, y1 float64) {
	steps := int(math.Ceil(max(math.Abs(x1-x0), math.Abs(y1-y0))))
	for i := 0; i <= steps; i++ {
		t := 0.0
		if steps > 0 {
			t = float64(i) / float64(steps)
		}
		p := image.Pt(int(x0+t*(x1-x0)), int(y0+t*(y1-y0)))
		if p.In(img.Bounds()) {
			img.SetRGBA(p.X, p.Y, arrowColor)
		}
	}
}
