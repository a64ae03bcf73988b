package bench

import (
	"encoding/json"
	"net/http"
	"strconv"
	"sync"

	"stillsky/sim/optics"
)

// ContrastSeparations are the separations, in λ/D at the science wavelength,
// at which the bench reports the raw contrast in its metrics, its live view and
// the demo: inside and around the control radius of the built-in systems (4 to
// 32 λ/D); those beyond the science image's field are left out.
var ContrastSeparations = []int{2, 5, 10, 20}

// maxContrastSeparations bounds the contrast curve's length (λ/D), beyond the
// field of every built-in science image.
const maxContrastSeparations = 256

// contrastCurve returns the raw contrast curve (optics.Contrast) of the
// exposure e, nil if it has no frame. The exposure's sum serves as is: the
// curve is relative to the image's own peak.
func (e *exposure) contrastCurve(size int) []float64 {
	if e.n == 0 {
		return nil
	}
	out := make([]float64, maxContrastSeparations)
	n, err := optics.Contrast(e.sum, size, SciencePad, out)
	if err != nil {
		return nil // a dark exposure (no light yet) has no curve
	}
	return out[:n]
}

// contrastGauge keeps the last second's contrast at ContrastSeparations for
// the live view.
type contrastGauge struct {
	mu     sync.Mutex
	values map[int]float64
}

// setContrast publishes a curve to the gauges and the live view.
func (b *Server) setContrast(curve []float64) {
	vals := make(map[int]float64, len(ContrastSeparations))
	for _, s := range ContrastSeparations {
		if s < len(curve) {
			vals[s] = curve[s]
			b.metrics.contrast.WithLabelValues(strconv.Itoa(s)).Set(curve[s])
		}
	}
	b.sci.lastContrast.mu.Lock()
	b.sci.lastContrast.values = vals
	b.sci.lastContrast.mu.Unlock()
}

// LatestContrast returns the raw contrast of the last one-second exposure at
// the ContrastSeparations within the science image (separation in λ/D →
// contrast), or nil before the first.
func (b *Server) LatestContrast() map[int]float64 {
	b.sci.lastContrast.mu.Lock()
	defer b.sci.lastContrast.mu.Unlock()
	return b.sci.lastContrast.values
}

// serveContrast answers GET /contrast.json: {"separations_lambda_over_d": [...],
// "contrast": [...]}, the last second's raw contrast, for the loop's live view.
func (b *Server) serveContrast(w http.ResponseWriter, _ *http.Request) {
	vals := b.LatestContrast()
	out := struct {
		Separations []int     `json:"separations_lambda_over_d"`
		Contrast    []float64 `json:"contrast"`
	}{Separations: []int{}, Contrast: []float64{}}
	for _, s := range ContrastSeparations {
		if v, ok := vals[s]; ok {
			out.Separations = append(out.Separations, s)
			out.Contrast = append(out.Contrast, v)
		}
	}
	w.Header().Set("Content-Type", "application/json")
	w.Header().Set("Cache-Control", "no-store")
	_ = json.NewEncoder(w).Encode(out)
}
