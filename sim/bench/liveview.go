package bench

import (
	"bytes"
	"image"
	"image/color"
	"image/png"
	"math"
	"net/http"

	"stillsky/sim/optics"
)

// psfDecades is the dynamic range of the PSF image: log10 of the PSF over the
// diffraction-limited peak, from −psfDecades (black) to 0 (white). Five decades
// show the first Airy rings and the halo of a partly corrected PSF.
const psfDecades = 5

// psfMinSide is the smallest side of the PSF image in pixels; smaller PSFs are
// enlarged by an integer factor so that a browser does not blur them.
const psfMinSide = 256

// RegisterLiveView adds GET /psf.png to mux: the science PSF of the newest
// frame's residual, log scale, and GET /contrast.json, the last second's raw
// contrast at a few separations. Pass it to Serve to offer them on the bench's
// metrics port, for the loop's live view.
func (b *Server) RegisterLiveView(mux *http.ServeMux) {
	mux.HandleFunc("GET /psf.png", b.servePSF)
	mux.HandleFunc("GET /contrast.json", b.serveContrast)
}

// servePSF images the newest residual with an imager of its own, so that a
// viewer costs the bench's clock nothing but a copy under the lock, whichever
// mode the bench runs in and however often it samples its own Strehl ratio.
func (b *Server) servePSF(w http.ResponseWriter, _ *http.Request) {
	im, err := optics.NewImager(b.sys.Pupil(), b.scn.Science.Wavelength, SciencePad)
	if err != nil {
		http.Error(w, "bench: psf image: "+err.Error(), http.StatusInternalServerError)
		return
	}
	// Frame writes the residual only under b.mu.
	b.mu.Lock()
	opd := append([]float64(nil), b.sys.Residual()...)
	b.mu.Unlock()
	n := im.Size()
	psf := make([]float64, n*n)
	im.PSF(opd, psf)
	var buf bytes.Buffer
	if err := png.Encode(&buf, psfImage(psf, n)); err != nil {
		http.Error(w, "bench: psf image: "+err.Error(), http.StatusInternalServerError)
		return
	}
	w.Header().Set("Content-Type", "image/png")
	w.Header().Set("Cache-Control", "no-store")
	w.Write(buf.Bytes())
}

// psfImage renders an n×n PSF (diffraction-limited peak 1) on a log scale,
// enlarged to at least psfMinSide pixels.
func psfImage(psf []float64, n int) *image.RGBA {
	scale := max(1, (psfMinSide+n-1)/n)
	img := image.NewRGBA(image.Rect(0, 0, n*scale, n*scale))
	for y := range n {
		for x := range n {
			c := heat(1 + math.Log10(max(psf[y*n+x], 1e-300))/psfDecades)
			for dy := range scale {
				for dx := range scale {
					img.SetRGBA(x*scale+dx, y*scale+dy, c)
				}
			}
		}
	}
	return img
}

// heatStops is a sequential colour scale of our own, dark to light, for
// intensities: black, deep blue, orange, near white.
var heatStops = [...]color.RGBA{{0, 0, 0, 255}, {36, 28, 120, 255}, {226, 116, 36, 255}, {255, 252, 236, 255}}

// heat maps t in [0, 1] (clamped) onto heatStops, linearly between stops.
func heat(t float64) color.RGBA {
	if !(t > 0) {
		return heatStops[0]
	}
	if t >= 1 {
		return heatStops[len(heatStops)-1]
	}
	f := t * float64(len(heatStops)-1)
	i := int(f)
	f -= float64(i)
	a, c := heatStops[i], heatStops[i+1]
	mix := func(p, q uint8) uint8 { return uint8(float64(p) + f*(float64(q)-float64(p)) + 0.5) }
	return color.RGBA{mix(a.R, c.R), mix(a.G, c.G), mix(a.B, c.B), 255}
}
