package daemon

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"slices"
	"sync"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"stillsky/controller/centroid"
	"stillsky/internal/atomicfile"
	"stillsky/internal/fits"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// Pixel calibration files in Config.StateDir, each replaced atomically: the
// dark (ADU) and flat (relative response) as width × height float32 images,
// the reference slopes (pixels, x then y per valid subaperture) as a float64
// vector.
const (
	darkFile      = "pixel-dark.fits"
	flatFile      = "pixel-flat.fits"
	referenceFile = "pixel-reference.fits"
)

// Capture limits: frames averaged by default and at most, and the frames
// skipped after switching the source (those already read out or in flight).
const (
	defaultCaptureFrames = 50
	maxCaptureFrames     = 10000
	captureSettleFrames  = 8
)

// pixelParts are the captured calibrations the centroid is built from; nil
// parts take the defaults (the bias as dark, a uniform flat, zero reference).
type pixelParts struct {
	mu        sync.Mutex
	dark      []float32
	flat      []float32
	reference []float64
}

// pixelCapture sums raw frames for CapturePixelCalibration. The real-time
// goroutine calls add on each complete pixel frame; the control goroutine
// reads sum once done is closed.
type pixelCapture struct {
	skip, n, want int
	sum           []float64
	done          chan struct{}
}

func (c *pixelCapture) add(frame []uint16) {
	if c.skip > 0 {
		c.skip--
		return
	}
	if c.n >= c.want {
		return
	}
	for i, v := range frame {
		c.sum[i] += float64(v)
	}
	if c.n++; c.n == c.want {
		close(c.done)
	}
}

// capturePixels is CapturePixelCalibration.
func (d *Daemon) capturePixels(ctx context.Context, req *stillskyv1.CapturePixelCalibrationRequest) (*stillskyv1.CapturePixelCalibrationResponse, error) {
	var src stillskyv1.Source
	switch req.GetKind() {
	case stillskyv1.PixelCalibrationKind_PIXEL_CALIBRATION_KIND_DARK:
		src = stillskyv1.Source_SOURCE_DARK
	case stillskyv1.PixelCalibrationKind_PIXEL_CALIBRATION_KIND_FLAT:
		src = stillskyv1.Source_SOURCE_FLAT
	case stillskyv1.PixelCalibrationKind_PIXEL_CALIBRATION_KIND_REFERENCE:
		src = stillskyv1.Source_SOURCE_CALIBRATION
	default:
		return nil, status.Errorf(codes.InvalidArgument, "kind %v: want dark, flat or reference", req.GetKind())
	}
	frames := int(req.GetFrames())
	if frames == 0 {
		frames = defaultCaptureFrames
	}
	if frames > maxCaptureFrames {
		return nil, status.Errorf(codes.InvalidArgument, "frames %d: must be in [1, %d] (0 for %d)", frames, maxCaptureFrames, defaultCaptureFrames)
	}
	g := d.geometry()
	if g == nil || !d.cameraUp.Load() {
		return nil, status.Error(codes.Unavailable, "no camera connected")
	}
	pg := g.pixels
	if pg == nil {
		return nil, status.Error(codes.FailedPrecondition, "the camera streams slopes: pixel calibrations need a pixel camera")
	}
	if s := d.u.current(); s != stateOpen {
		return nil, status.Errorf(codes.FailedPrecondition, "loop %s: open it before capturing a pixel calibration", stateNames[s])
	}
	cam := d.camera.Load()
	if cam == nil {
		return nil, status.Error(codes.Unavailable, "no camera connected")
	}
	if _, err := (*cam).SetSource(ctx, &stillskyv1.SetSourceRequest{Source: src}); err != nil {
		return nil, status.Errorf(codes.FailedPrecondition, "camera refused source %v: %v", src, err)
	}
	defer (*cam).SetSource(context.WithoutCancel(ctx), &stillskyv1.SetSourceRequest{Source: stillskyv1.Source_SOURCE_SKY})
	skip := captureSettleFrames + g.delayFrames
	// The wait is from skip, not c.skip: once published, c's counters are the
	// real-time goroutine's alone until done is closed.
	wait := time.Duration(float64(frames+skip)/g.frameRate*float64(time.Second)) + 10*time.Second
	c := &pixelCapture{skip: skip, want: frames,
		sum: make([]float64, pg.width*pg.height), done: make(chan struct{})}
	if !d.u.capture.CompareAndSwap(nil, c) {
		return nil, status.Error(codes.FailedPrecondition, "another pixel calibration is being captured")
	}
	defer d.u.capture.Store(nil)
	timer := time.NewTimer(wait)
	defer timer.Stop()
	select {
	case <-c.done:
	case <-ctx.Done():
		return nil, status.FromContextError(ctx.Err()).Err()
	case <-timer.C:
		return nil, status.Errorf(codes.DeadlineExceeded, "%d frames did not come within %v", frames, wait)
	}
	mean := c.sum
	for i := range mean {
		mean[i] /= float64(frames)
	}
	resp := &stillskyv1.CapturePixelCalibrationResponse{Kind: req.GetKind(), Frames: uint32(frames)}
	parts := &d.pixParts
	parts.mu.Lock()
	defer parts.mu.Unlock()
	dark, flat, ref := parts.dark, parts.flat, parts.reference
	var file string
	var hdu *fits.HDU
	switch src {
	case stillskyv1.Source_SOURCE_DARK:
		dark = make([]float32, len(mean))
		for i, v := range mean {
			dark[i] = float32(v)
		}
		resp.Mean, resp.Rms = meanRMS32(dark)
		file, hdu = darkFile, imageHDU(dark, pg, "DARK", "mean frame with the shutter closed, ADU", frames)
	case stillskyv1.Source_SOURCE_FLAT:
		var err error
		if flat, err = flatFrom(mean, dark, pg); err != nil {
			return nil, status.Error(codes.FailedPrecondition, err.Error())
		}
		resp.Mean, resp.Rms = meanRMS32(flat)
		file, hdu = flatFile, imageHDU(flat, pg, "FLAT", "relative response of each pixel, mean 1", frames)
	default:
		var err error
		if ref, err = referenceFrom(mean, dark, flat, pg); err != nil {
			return nil, status.Error(codes.FailedPrecondition, err.Error())
		}
		s := make([]float32, len(ref))
		for i, v := range ref {
			s[i] = float32(v)
		}
		resp.Mean, resp.Rms = meanRMS32(s)
		hdu = &fits.HDU{Bitpix: -64, Axes: []int{len(ref)}, Data: ref}
		hdu.Header.Set("CALTYPE", "REFERENCE", "slopes on the calibration source, pixels")
		hdu.Header.Set("NFRAMES", int64(frames), "frames averaged")
		hdu.Header.Set("PIXSCALE", pg.scale, "radians per pixel")
		file = referenceFile
	}
	cal, err := centroid.NewCalibration(pg.layout, pg.options(orBias(dark, pg), flat, ref))
	if err != nil {
		return nil, status.Errorf(codes.FailedPrecondition, "the captured %s does not make a calibration: %v", file, err)
	}
	d.u.pixCal.Store(cal)
	parts.dark, parts.flat, parts.reference = dark, flat, ref
	if d.cfg.StateDir != "" {
		path := filepath.Join(d.cfg.StateDir, file)
		if err := atomicfile.Write(path, func(w io.Writer) error { return fits.Write(w, hdu) }); err != nil {
			d.log.Error("cannot commit the pixel calibration", "file", file, "err", err)
		} else {
			resp.File = file
		}
	}
	d.log.Info("pixel calibration captured", "kind", req.GetKind().String(), "frames", frames, "mean", resp.Mean, "rms", resp.Rms)
	return resp, nil
}

// orBias is the dark, or the camera's bias everywhere when none is captured.
func orBias(dark []float32, g *pixelGeometry) []float32 {
	if dark != nil {
		return dark
	}
	b := make([]float32, g.width*g.height)
	for i := range b {
		b[i] = float32(g.desc.GetBiasAdu())
	}
	return b
}

// flatFrom turns a mean frame under the flat lamp into each pixel's response
// relative to the mean, less the dark (or the bias).
func flatFrom(mean []float64, dark []float32, g *pixelGeometry) ([]float32, error) {
	dk := orBias(dark, g)
	flat := make([]float32, len(mean))
	var sum float64
	for i, v := range mean {
		sum += v - float64(dk[i])
	}
	avg := sum / float64(len(mean))
	if !(avg > 0) {
		return nil, fmt.Errorf("flat: mean signal %g ADU above the dark: is the flat lamp on?", avg)
	}
	for i, v := range mean {
		r := (v - float64(dk[i])) / avg
		if !(r > 0.05 && r < 20) {
			return nil, fmt.Errorf("flat: pixel (%d, %d) responds %.3g of the mean: must be in (0.05, 20)", i%g.width, i/g.width, r)
		}
		flat[i] = float32(r)
	}
	return flat, nil
}

// referenceFrom centroids the mean frame on the calibration source with the
// dark and flat and no reference: its slopes, in pixels, are the reference.
func referenceFrom(mean []float64, dark, flat []float32, g *pixelGeometry) ([]float64, error) {
	cal, err := centroid.NewCalibration(g.layout, g.options(orBias(dark, g), flat, nil))
	if err != nil {
		return nil, fmt.Errorf("reference: %w", err)
	}
	frame := make([]uint16, len(mean))
	for i, v := range mean {
		frame[i] = uint16(min(65535, max(0, math.Round(v))))
	}
	slopes := make([]float32, 2*len(g.layout.Valid))
	if _, err := cal.Process(frame, slopes, make([]float32, g.layout.Pixels*g.layout.Pixels)); err != nil {
		return nil, fmt.Errorf("reference: %w", err)
	}
	ref := make([]float64, len(slopes))
	for i, s := range slopes {
		ref[i] = float64(s)
	}
	return ref, nil
}

func imageHDU(img []float32, g *pixelGeometry, kind, what string, frames int) *fits.HDU {
	h := &fits.HDU{Bitpix: -32, Axes: []int{g.width, g.height}, Data: img}
	h.Header.Set("CALTYPE", kind, what)
	h.Header.Set("NFRAMES", int64(frames), "frames averaged")
	h.Header.Set("SUBAPPIX", int64(g.layout.Pixels), "pixels across a subaperture window")
	return h
}

func meanRMS32(v []float32) (mean, rms float64) {
	for _, x := range v {
		mean += float64(x)
	}
	mean /= float64(len(v))
	for _, x := range v {
		rms += (float64(x) - mean) * (float64(x) - mean)
	}
	return mean, math.Sqrt(rms / float64(len(v)))
}

// restorePixels loads the committed dark, flat and reference that fit the
// camera's geometry and builds the centroid from them; a missing file takes
// the default, a file of the wrong shape is ignored with a warning.
func (d *Daemon) restorePixels(g *pixelGeometry) (*centroid.Calibration, error) {
	parts := &d.pixParts
	parts.mu.Lock()
	defer parts.mu.Unlock()
	if d.cfg.StateDir != "" && parts.dark == nil && parts.flat == nil && parts.reference == nil {
		img := func(name string) []float32 {
			h := d.readCalibrationFile(name)
			if h == nil {
				return nil
			}
			v, ok := h.Data.([]float32)
			if !ok || len(h.Axes) != 2 || h.Axes[0] != g.width || h.Axes[1] != g.height {
				d.log.Warn("ignoring a pixel calibration of another shape", "file", name, "axes", h.Axes)
				return nil
			}
			return v
		}
		parts.dark, parts.flat = img(darkFile), img(flatFile)
		if h := d.readCalibrationFile(referenceFile); h != nil {
			if v, ok := h.Data.([]float64); ok && len(v) == 2*len(g.layout.Valid) {
				parts.reference = v
			} else {
				d.log.Warn("ignoring a pixel reference of another shape", "file", referenceFile, "axes", h.Axes)
			}
		}
		if parts.dark != nil || parts.flat != nil || parts.reference != nil {
			d.log.Info("restored pixel calibration", "dark", parts.dark != nil, "flat", parts.flat != nil, "reference", parts.reference != nil)
		}
	}
	cal, err := centroid.NewCalibration(g.layout, g.options(orBias(parts.dark, g), parts.flat, parts.reference))
	if err != nil {
		d.log.Warn("the committed pixel calibration does not fit; using the defaults", "err", err)
		parts.dark, parts.flat, parts.reference = nil, nil, nil
		return g.defaultCalibration()
	}
	return cal, nil
}

// readCalibrationFile returns the first HDU of a committed file, nil when it
// is missing or unreadable (logged).
func (d *Daemon) readCalibrationFile(name string) *fits.HDU {
	hdus, err := fits.ReadFile(filepath.Join(d.cfg.StateDir, name))
	if errors.Is(err, os.ErrNotExist) {
		return nil
	}
	if err != nil || len(hdus) == 0 {
		d.log.Warn("ignoring an unreadable pixel calibration", "file", name, "err", err)
		return nil
	}
	return hdus[0]
}

// PixelCalibration returns copies of the pixel camera's captured or restored
// dark (ADU), flat and reference slopes (pixels); nil for each not captured.
func (d *Daemon) PixelCalibration() (dark, flat []float32, reference []float64) {
	p := &d.pixParts
	p.mu.Lock()
	defer p.mu.Unlock()
	return slices.Clone(p.dark), slices.Clone(p.flat), slices.Clone(p.reference)
}
