package centroid

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"

	"stillsky/controller"
	"stillsky/sim/detector"
)

// BenchmarkPixelVsSlope measures side by side, in one run, the compute of a
// frame in slope mode (controller.Loop.Step on ready slopes) and in pixel mode
// (Process on the detector frame, then the same Step), for the default
// scenario's geometry: 24×24 subapertures of 8×8 pixels on a circular pupil
// and 25×25 actuators, about π/4 of each valid (*common practice*). The
// calibration does all it can: dark, a measured 2% flat, a 5% threshold and
// the hot-pixel test. The target is pixels/slopes ≤ 1.5 in compute
// p50: each sub-benchmark reports the median of its per-frame times
// (p50-ns) beside the mean (ns/op). process-plain is the pure-Go kernel.
func BenchmarkPixelVsSlope(b *testing.B) {
	const n, pix = 24, 8
	var valid []int
	for r := range n {
		for c := range n {
			if math.Hypot(float64(c)-11.5, float64(r)-11.5) < 12 {
				valid = append(valid, r*n+c)
			}
		}
	}
	ns, na := 2*len(valid), int(math.Round(math.Pi/4*25*25))
	rng := rand.New(rand.NewPCG(1, 2))
	data := make([]float64, na*ns)
	for i := range data {
		data[i] = rng.Float64() - 0.5
	}
	r, err := controller.ReconstructorFromMatrix(mat.NewDense(na, ns, data), time.Time{})
	if err != nil {
		b.Fatal(err)
	}
	p, err := controller.NewParams(controller.ParamsConfig{Reconstructor: r, Gain: 0.4, Leak: 0.01, Stroke: 1, StrehlWavelength: 1.65e-6})
	if err != nil {
		b.Fatal(err)
	}
	defer p.Close()
	loop, err := controller.NewLoop(p)
	if err != nil {
		b.Fatal(err)
	}
	det, err := detector.New(detector.Config{Subapertures: n, Valid: valid, Pixels: pix, Sigma: 1.2,
		Photons: 5000, Background: 20, ReadNoise: 3, PhotonNoise: true, Bias: 100, Gain: 1, FullWell: 60000,
		FlatRMS: 0.02, FlatSeed: 5})
	if err != nil {
		b.Fatal(err)
	}
	frame := make([]uint16, det.Side()*det.Side())
	off := make([]float64, ns)
	for i := range off {
		off[i] = 0.5 * (rng.Float64() - 0.5)
	}
	if err := det.Render(frame, off, rng); err != nil {
		b.Fatal(err)
	}
	dark := make([]float32, len(frame))
	for i := range dark {
		dark[i] = 120
	}
	flat := make([]float32, len(frame))
	for i, v := range det.Flat() {
		flat[i] = float32(v)
	}
	l := Layout{Subapertures: n, Pixels: pix, Valid: valid}
	o := Options{Dark: dark, Flat: flat, Threshold: 0.05, HotRatio: 4}
	cal, err := NewCalibration(l, o)
	if err != nil {
		b.Fatal(err)
	}
	o.Kernel = "plain"
	plain, err := NewCalibration(l, o)
	if err != nil {
		b.Fatal(err)
	}
	slopes, cmd, work := make([]float32, ns), make([]float32, na), make([]float32, pix*pix)
	for i := range slopes {
		slopes[i] = float32(off[i])
	}
	b.Run("slopes", func(b *testing.B) {
		perFrame(b, func() { loop.Step(slopes, cmd) })
	})
	b.Run("pixels", func(b *testing.B) {
		perFrame(b, func() {
			if _, err := cal.Process(frame, slopes, work); err != nil {
				b.Fatal(err)
			}
			loop.Step(slopes, cmd)
		})
	})
	// pixels-split times the two halves of a pixel frame apart: Process
	// (process-p50-ns) and the Step after it (step-p50-ns), which shows
	// whether the pixel pass slows the multiply by evicting its matrix.
	b.Run("pixels-split", func(b *testing.B) {
		tp, ts := make([]time.Duration, b.N), make([]time.Duration, b.N)
		b.ResetTimer()
		for i := range tp {
			t0 := time.Now()
			if _, err := cal.Process(frame, slopes, work); err != nil {
				b.Fatal(err)
			}
			t1 := time.Now()
			loop.Step(slopes, cmd)
			tp[i], ts[i] = t1.Sub(t0), time.Since(t1)
		}
		b.StopTimer()
		slices.Sort(tp)
		slices.Sort(ts)
		b.ReportMetric(float64(tp[len(tp)/2].Nanoseconds()), "process-p50-ns")
		b.ReportMetric(float64(ts[len(ts)/2].Nanoseconds()), "step-p50-ns")
	})
	b.Run("process-only", func(b *testing.B) {
		perFrame(b, func() {
			if _, err := cal.Process(frame, slopes, work); err != nil {
				b.Fatal(err)
			}
		})
	})
	// process-rows hands the frame in one grid row (8 detector rows) at a
	// time, as a camera's row chunks arrive.
	b.Run("process-rows", func(b *testing.B) {
		side := det.Side()
		perFrame(b, func() {
			for r := 0; r < side; r += pix {
				if _, err := cal.ProcessRows(frame[r*side:(r+pix)*side], r, r+pix, slopes, work); err != nil {
					b.Fatal(err)
				}
			}
		})
	})
	b.Run("process-plain", func(b *testing.B) {
		perFrame(b, func() {
			if _, err := plain.Process(frame, slopes, work); err != nil {
				b.Fatal(err)
			}
		})
	})
}

// perFrame runs f b.N times, timing each call, and reports the median as
// p50-ns beside the mean; the time buffer is made before the timer starts,
// so allocs/op counts f alone.
func perFrame(b *testing.B, f func()) {
	b.ReportAllocs()
	d := make([]time.Duration, b.N)
	b.ResetTimer()
	for i := range d {
		t0 := time.Now()
		f()
		d[i] = time.Since(t0)
	}
	b.StopTimer()
	slices.Sort(d)
	b.ReportMetric(float64(d[len(d)/2].Nanoseconds()), "p50-ns")
}
