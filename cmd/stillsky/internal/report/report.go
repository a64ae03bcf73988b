package report

import (
	"errors"
	"fmt"
	"html/template"
	"image/color"
	"io"
	"math"
	"os"
	"path/filepath"
	"slices"
	"time"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"

	"stillsky/analysis"
	"stillsky/internal/atomicfile"
	"stillsky/internal/recording"
)

// figure is one plot of the page.
type figure struct {
	File, Title, Caption string
}

// page is what the HTML template shows.
type page struct {
	Name, Started, Camera                    string
	Frames, Slopes, Actuators                int
	Rate, Gain, Leak                         float64
	Reconstructor, StudyNote, TurbulenceNote string
	Figures                                  []figure
	Turbulence                               *analysis.TurbulenceEstimate
	TurbulenceStored                         bool
	Lag, StudyFrames                         int
	RTCp50, RTCp99, TransitP50               string
}

// Write studies the recording at path and writes DIR/index.html with its PNG
// plots beside it. The page needs nothing but the files in DIR.
func Write(path, dir string, out io.Writer) error {
	rec, err := recording.ReadFile(path)
	if err != nil {
		return err
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return err
	}
	p := &page{
		Name: filepath.Base(path), Camera: rec.Camera.GetDescription(), Frames: rec.Frames,
		Slopes: int(rec.Camera.GetSlopeCount()), Actuators: int(rec.Mirror.GetActuatorCount()),
		Rate: rec.Camera.GetFrameRateHz(), Gain: rec.Gain, Leak: rec.Leak, Reconstructor: "none loaded",
	}
	if !rec.Started.IsZero() {
		p.Started = rec.Started.UTC().Format(time.RFC3339)
	}
	if m, ok := rec.Header.String("RECMETH"); ok {
		sha, _ := rec.Header.String("RECSHA")
		modes, _ := rec.Header.Int("RECMODES")
		p.Reconstructor = fmt.Sprintf("%s, %d modes kept, SHA-256 %s…", m, modes, sha)
	}
	if err := p.timeFigures(rec, dir); err != nil {
		return err
	}
	st, err := NewStudy(rec)
	switch {
	case errors.Is(err, ErrNoStudy):
		p.StudyNote = err.Error()
	case err != nil:
		return err
	default:
		if err := p.modalFigures(st, dir); err != nil {
			return err
		}
	}
	for _, h := range rec.After {
		if name, _ := h.Header.String("EXTNAME"); name == "TURBULENCE" {
			p.TurbulenceStored = true
		}
	}
	err = atomicfile.Write(filepath.Join(dir, "index.html"), func(w io.Writer) error { return pageTemplate.Execute(w, p) })
	if err != nil {
		return err
	}
	fmt.Fprintf(out, "report of %s (%d frames, %d plots) written to %s\n", p.Name, rec.Frames, len(p.Figures), filepath.Join(dir, "index.html"))
	return nil
}

// timeFigures draws the latency histograms and the estimates against time.
func (p *page) timeFigures(rec *recording.Recording, dir string) error {
	n := rec.Frames
	rtc, compute, transit := make([]float64, n), make([]float64, n), make([]float64, n)
	t, wf, strehl := make([]float64, n), make([]float64, n), make([]float64, n)
	for i := range n {
		rtc[i] = float64(rec.Sent[i]-rec.Received[i]) * 1e-3
		compute[i] = float64(rec.Computed[i]-rec.Received[i]) * 1e-3
		transit[i] = float64(rec.Received[i]-rec.Readout[i]) * 1e-3
		t[i] = float64(rec.Readout[i]-rec.Readout[0]) * 1e-9
		wf[i] = rec.WavefrontRMS[i] * 1e9
		strehl[i] = rec.Strehl[i]
	}
	p.RTCp50, p.RTCp99 = fmt.Sprintf("%.1f", quantile(rtc, 0.5)), fmt.Sprintf("%.1f", quantile(rtc, 0.99))
	p.TransitP50 = fmt.Sprintf("%.1f", quantile(transit, 0.5))
	for _, h := range []struct {
		file, title, caption string
		v                    []float64
	}{
		{"latency-rtc.png", "rtc latency (frame received → command sent)", "The controller's own latency per frame.", rtc},
		{"latency-compute.png", "compute latency (frame received → command computed)", "Calibration, reconstruction and integration per frame.", compute},
		{"latency-camera.png", "camera → loop (readout end → frame received)", "Transport and scheduling between the camera and the loop.", transit},
	} {
		if err := histogram(filepath.Join(dir, h.file), h.title, h.v); err != nil {
			return err
		}
		p.Figures = append(p.Figures, figure{File: h.file, Title: h.title, Caption: h.caption})
	}
	if err := series(filepath.Join(dir, "residual.png"), "estimated residual wavefront", "time (s)", "nm rms", t, wf); err != nil {
		return err
	}
	if err := series(filepath.Join(dir, "strehl.png"), fmt.Sprintf("estimated Strehl ratio at %.3g µm", rec.ScienceWavelength*1e6), "time (s)", "Strehl ratio", t, strehl); err != nil {
		return err
	}
	p.Figures = append(p.Figures,
		figure{File: "residual.png", Title: "Residual against time", Caption: "The loop's own estimate from the slopes (2·rms of the reconstructed command increment): it leaves out fitting and aliasing error."},
		figure{File: "strehl.png", Title: "Strehl ratio against time", Caption: "Maréchal's approximation exp(−σ²) of the estimated residual."})
	return nil
}

// modalFigures draws the modal variances, the rejection and notes the turbulence.
func (p *page) modalFigures(st *Study, dir string) error {
	p.Lag, p.StudyFrames = st.Lag, st.Frames
	if st.TurbulenceErr == nil {
		p.Turbulence = &st.Turbulence
	} else {
		p.TurbulenceNote = st.TurbulenceErr.Error()
	}
	nm := len(st.Open[0])
	open, closed := variances(st.Open), variances(st.Residual)
	if err := modalVariance(filepath.Join(dir, "modal-variance.png"), open, closed); err != nil {
		return err
	}
	p.Figures = append(p.Figures, figure{File: "modal-variance.png", Title: "Modal variance, open against closed",
		Caption: fmt.Sprintf("Variance of each Zernike coefficient (Noll 2 to %d) of the pseudo-open-loop slopes (open) and of the measured slopes (closed), over %d frames.", nm+1, st.Frames)})
	if !st.Closed {
		p.StudyNote = "The loop was not closed through the frames studied: no rejection to measure."
		return nil
	}
	meas, err := st.Rejection()
	if err != nil {
		return err
	}
	if err := rejection(filepath.Join(dir, "rejection.png"), meas, st.Loop); err != nil {
		return err
	}
	p.Figures = append(p.Figures, figure{File: "rejection.png", Title: "Rejection transfer function, measured against the model",
		Caption: fmt.Sprintf("Closed-loop over pseudo-open-loop modal spectra (Welch, %d-frame Hann segments), against |E(f)|² of the leaky integrator with gain %.3g, leak %.3g and %d frames of delay.", segment, st.Loop.Gain, st.Loop.Leak, st.Loop.Delay)})
	return nil
}

func variances(rows [][]float64) []float64 {
	nm := len(rows[0])
	v := make([]float64, nm)
	for j := range nm {
		mean := 0.0
		for _, r := range rows {
			mean += r[j]
		}
		mean /= float64(len(rows))
		for _, r := range rows {
			v[j] += (r[j] - mean) * (r[j] - mean)
		}
		v[j] /= float64(len(rows) - 1)
	}
	return v
}

func quantile(v []float64, q float64) float64 {
	s := slices.Clone(v)
	slices.Sort(s)
	return s[min(len(s)-1, int(q*float64(len(s))))]
}

var (
	blue   = color.RGBA{R: 31, G: 92, B: 153, A: 255}
	orange = color.RGBA{R: 204, G: 102, B: 0, A: 255}
)

func save(p *plot.Plot, path string) error {
	return atomicfile.Write(path, func(w io.Writer) error {
		wt, err := p.WriterTo(7*vg.Inch, 4*vg.Inch, "png")
		if err != nil {
			return err
		}
		_, err = wt.WriteTo(w)
		return err
	})
}

// histogram draws the distribution of v (µs) up to its 99.9th percentile, the
// tail beyond counted in the title.
func histogram(path, title string, v []float64) error {
	cut := quantile(v, 0.999)
	var kept plotter.Values
	for _, x := range v {
		if x <= cut {
			kept = append(kept, x)
		}
	}
	p := plot.New()
	p.Title.Text = fmt.Sprintf("%s; %d beyond %.0f µs", title, len(v)-len(kept), cut)
	p.X.Label.Text = "µs"
	p.Y.Label.Text = "frames"
	h, err := plotter.NewHist(kept, 60)
	if err != nil {
		return err
	}
	h.FillColor = blue
	p.Add(h)
	return save(p, path)
}

func series(path, title, xl, yl string, x, y []float64) error {
	p := plot.New()
	p.Title.Text, p.X.Label.Text, p.Y.Label.Text = title, xl, yl
	pts := make(plotter.XYs, len(x))
	for i := range x {
		pts[i].X, pts[i].Y = x[i], y[i]
	}
	l, err := plotter.NewLine(pts)
	if err != nil {
		return err
	}
	l.Color = blue
	p.Add(l)
	return save(p, path)
}

func modalVariance(path string, open, closed []float64) error {
	p := plot.New()
	p.Title.Text = "modal variance"
	p.X.Label.Text = "Noll index"
	p.Y.Label.Text = "rad² at the sensing wavelength"
	p.Y.Scale = plot.LogScale{}
	p.Y.Tick.Marker = plot.LogTicks{Prec: -1}
	for _, c := range []struct {
		name string
		v    []float64
		col  color.Color
	}{{"open (pseudo-open-loop)", open, orange}, {"closed", closed, blue}} {
		pts := make(plotter.XYs, 0, len(c.v))
		for j, v := range c.v {
			if v > 0 {
				pts = append(pts, plotter.XY{X: float64(j + 2), Y: v})
			}
		}
		l, err := plotter.NewLine(pts)
		if err != nil {
			return err
		}
		l.Color = c.col
		p.Add(l)
		p.Legend.Add(c.name, l)
	}
	p.Legend.Top = true
	return save(p, path)
}

func rejection(path string, meas analysis.Spectrum, l analysis.Loop) error {
	p := plot.New()
	p.Title.Text = "rejection transfer function"
	p.X.Label.Text = "frequency (Hz)"
	p.Y.Label.Text = "closed / open power"
	p.X.Scale, p.Y.Scale = plot.LogScale{}, plot.LogScale{}
	p.X.Tick.Marker, p.Y.Tick.Marker = plot.LogTicks{Prec: -1}, plot.LogTicks{Prec: -1}
	var m, th plotter.XYs
	for i, f := range meas.Freq {
		if f <= 0 {
			continue
		}
		if v := meas.Power[i]; v > 0 && !math.IsInf(v, 0) {
			m = append(m, plotter.XY{X: f, Y: v})
		}
		th = append(th, plotter.XY{X: f, Y: l.RejectionPower(f)})
	}
	ml, err := plotter.NewLine(m)
	if err != nil {
		return err
	}
	ml.Color = blue
	tl, err := plotter.NewLine(th)
	if err != nil {
		return err
	}
	tl.Color = orange
	tl.Dashes = []vg.Length{vg.Points(5), vg.Points(3)}
	p.Add(ml, tl)
	p.Legend.Add("measured", ml)
	p.Legend.Add("|E(f)|², model", tl)
	p.Legend.Top, p.Legend.Left = true, true
	return save(p, path)
}

var pageTemplate = template.Must(template.New("report").Funcs(template.FuncMap{"ms": func(s float64) float64 { return s * 1e3 }}).Parse(`<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<title>Loop report: {{.Name}}</title>
<style>
body { font-family: sans-serif; max-width: 60rem; margin: 1rem auto; padding: 0 1rem; color: #222; }
table { border-collapse: collapse; margin: 0.5rem 0 1rem; }
td, th { border-bottom: 1px solid #ccc; padding: 0.2rem 0.8rem; text-align: left; }
figure { margin: 1.5rem 0; }
img { max-width: 100%; }
figcaption { color: #555; font-size: 0.9rem; }
</style>
</head>
<body>
<h1>Loop report: {{.Name}}</h1>
<table>
<tr><th>recorded</th><td>{{.Started}}, {{.Frames}} frames at {{printf "%.0f" .Rate}} Hz</td></tr>
<tr><th>camera</th><td>{{.Camera}}; {{.Slopes}} slopes, {{.Actuators}} actuators</td></tr>
<tr><th>loop</th><td>gain {{printf "%.3g" .Gain}}, leak {{printf "%.3g" .Leak}} (at the start)</td></tr>
<tr><th>reconstructor</th><td>{{.Reconstructor}}</td></tr>
<tr><th>rtc latency</th><td>p50 {{.RTCp50}} µs, p99 {{.RTCp99}} µs; camera → loop p50 {{.TransitP50}} µs</td></tr>
</table>
<h2>Turbulence estimated from the loop's data</h2>
{{with .Turbulence}}
<table>
<tr><th>r0 at 500 nm, zenith</th><td>{{printf "%.3f" .R0}} m</td></tr>
<tr><th>outer scale L0</th><td>{{printf "%.3g" .L0}} m</td></tr>
<tr><th>wind (one frozen-flow layer)</th><td>{{printf "%.1f" .Wind}} m/s</td></tr>
<tr><th>coherence time τ0 at 500 nm</th><td>{{printf "%.2f" (ms .Tau0)}} ms</td></tr>
<tr><th>frames used</th><td>{{.Frames}}</td></tr>
</table>
{{end}}
<p>From {{.StudyFrames}} consecutive frames: pseudo-open-loop slopes (the measured slopes plus the interaction matrix times the command the mirror held during each exposure, {{.Lag}} frame(s) earlier), projected on Zernike modes and fitted by Noll's von Kármán model. {{if .TurbulenceStored}}The recording stores these estimates (extension TURBULENCE).{{end}} {{.TurbulenceNote}}</p>
{{if .StudyNote}}<p><strong>{{.StudyNote}}</strong></p>{{end}}
{{range .Figures}}
<figure>
<h2>{{.Title}}</h2>
<img src="{{.File}}" alt="{{.Title}}">
<figcaption>{{.Caption}}</figcaption>
</figure>
{{end}}
</body>
</html>
`))
