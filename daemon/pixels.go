package daemon

import (
	"fmt"
	"math"
	"slices"
	"unsafe"

	"stillsky/controller/centroid"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// pixelGeometry is what a pixel camera's Describe tells the daemon (frame
// format 2, docs/frames.md): the windows, the detector's size and the pixel
// scale that turns centroids in pixels into slopes in radians.
type pixelGeometry struct {
	layout        centroid.Layout
	width, height int
	scale         float64
	desc          *stillskyv1.PixelGeometry
}

// hotRatio flags a window whose brightest pixel exceeds this many times each
// of its four neighbours: a spot of 0.6 pixel rms or wider never does (its
// neighbours are at exp(−1/2σ²) ≥ 0.25 of its peak), a hot pixel or a cosmic
// ray does (common practice; see centroid.Options.HotRatio), and 16 rather
// than 4 leaves room for photon noise: measured on the default geometry
// (452 windows of 8 pixels, σ = 0.85, 0.5 e⁻ read noise, 100 frames), 42 e⁻
// a window flag 57 frames at 4, 1 at 8, none at 16.
const hotRatio = 16

// hotWindowsNoise: a window with no star to speak of (a faint star, a cloud,
// a dark frame) has noise for a peak and is flagged hot as often as not —
// 39 % of the windows at 0 e⁻, 3 % at 15 e⁻, measured as above — so a frame
// is refused for a hot pixel only when at most one window in this many (or a
// single one) is flagged, as a hot pixel or a cosmic ray flags one or two.
const hotWindowsNoise = 100

// newPixelGeometry checks a camera's pixel geometry against the rest of its
// Describe; nil, nil for a slope camera.
func newPixelGeometry(d *stillskyv1.CameraServiceDescribeResponse) (*pixelGeometry, error) {
	g := d.GetPixels()
	if g == nil {
		return nil, nil
	}
	n, p := int(d.GetSubapertures()), int(g.GetPixelsPerSubaperture())
	valid := make([]int, len(d.GetValidSubapertures()))
	for i, v := range d.GetValidSubapertures() {
		valid[i] = int(v)
	}
	if int(d.GetSlopeCount()) != 2*len(valid) {
		return nil, fmt.Errorf("pixel camera: slope_count %d: must be 2 × %d valid subapertures", d.GetSlopeCount(), len(valid))
	}
	if int(g.GetWidth()) != n*p || int(g.GetHeight()) != n*p {
		return nil, fmt.Errorf("pixel camera: detector %d×%d pixels: must be subapertures × pixels_per_subaperture = %d each", g.GetWidth(), g.GetHeight(), n*p)
	}
	if !(g.GetPixelScaleRad() > 0) {
		return nil, fmt.Errorf("pixel camera: pixel_scale_rad %g: must be > 0", g.GetPixelScaleRad())
	}
	pg := &pixelGeometry{layout: centroid.Layout{Subapertures: n, Pixels: p, Valid: valid},
		width: n * p, height: n * p, scale: g.GetPixelScaleRad(), desc: g}
	if _, err := pg.defaultCalibration(); err != nil {
		return nil, fmt.Errorf("pixel camera: %w", err)
	}
	return pg, nil
}

// defaultCalibration is the centroid calibration before any dark, flat or
// reference is captured: the camera's bias as the dark, a uniform flat, the
// centroid and threshold the camera describes.
func (g *pixelGeometry) defaultCalibration() (*centroid.Calibration, error) {
	dark := make([]float32, g.width*g.height)
	for i := range dark {
		dark[i] = float32(g.desc.GetBiasAdu())
	}
	return centroid.NewCalibration(g.layout, g.options(dark, nil, nil))
}

// options are the centroid options of the camera's processing with the given
// dark, flat and reference (nil: bias, uniform, zero).
func (g *pixelGeometry) options(dark, flat []float32, ref []float64) centroid.Options {
	o := centroid.Options{Dark: dark, Flat: flat, Reference: ref, Threshold: g.desc.GetThreshold(),
		HotRatio: hotRatio, HotFloor: g.hotFloor(), Saturation: uint16(min(65535, g.desc.GetSaturationAdu()))}
	if g.desc.GetCentroid() == stillskyv1.CentroidMethod_CENTROID_METHOD_WEIGHTED {
		o.Method, o.WeightSigma = centroid.WCoG, g.desc.GetWeightSigmaPx()
	}
	return o
}

// hotFloor is the least value, in ADU, that the hot-pixel test takes a
// window peak's neighbours to hold: 5σ of a pixel with the camera's read
// noise and one photo-electron, √(σ_r² + 1)·5/gain (a 5σ detection, common
// practice). A faint star's window holds noise about zero around its peak,
// which against a bare ratio is hot for any positive peak: measured on the
// small scenario at magnitude 9 in pixel mode, 26 of 740 frames were refused
// for hot pixels before this floor.
func (g *pixelGeometry) hotFloor() float64 {
	gain := g.desc.GetGainEPerAdu()
	if !(gain > 0) {
		gain = 1
	}
	r := g.desc.GetReadNoiseE()
	return min(65535, 5*math.Sqrt(r*r+1)/gain)
}

// pixelFrames is the assembler's pixel side: it decodes each chunk's rows into
// the frame buffer and centroids the windows they complete, so that the
// multiply of the slopes already known overlaps the next chunk's arrival.
type pixelFrames struct {
	g     *pixelGeometry
	cal   func() *centroid.Calibration // the current calibration, read at a frame's first chunk
	cur   *centroid.Calibration
	frame []uint16
	work  []float32
	next  int // the detector row the next chunk must start at
	flags centroid.Flags
}

func newPixelFrames(g *pixelGeometry, cal func() *centroid.Calibration) *pixelFrames {
	p := g.layout.Pixels
	return &pixelFrames{g: g, cal: cal, frame: make([]uint16, g.width*g.height), work: make([]float32, p*p)}
}

// add takes one pixel chunk of frame num into a.slopes (radians).
func (a *assembler) addPixels(f *stillskyv1.StreamFramesResponse, r assembly, num uint64) assembly {
	px := a.px
	if f.GetChunkIndex() == 0 {
		px.next, px.flags, a.flux = 0, centroid.Flags{}, 0
		px.cur = px.cal()
	}
	g := px.g
	first, rows, b := int(f.GetFirstRow()), int(f.GetRowCount()), f.GetPixels()
	if len(b) != 2*rows*g.width || len(f.GetSlopes()) != 0 {
		return a.refuse(r, num, refusedPixelCount)
	}
	if first != px.next || rows == 0 || rows%g.layout.Pixels != 0 || first+rows > g.height {
		return a.refuse(r, num, refusedChunkLayout)
	}
	from, to := 2*px.cur.RowsReady(first), 2*px.cur.RowsReady(first+rows)
	if int(f.GetOffset()) != from {
		return a.refuse(r, num, refusedChunkLayout)
	}
	// The whole frame stays in px.frame, for captures; the centroid reads the
	// chunk's own bytes where the host's order is the wire's.
	dst := px.frame[first*g.width : (first+rows)*g.width]
	src := dst
	if v, ok := wireView(b); ok {
		copy(dst, v)
		src = v
	} else {
		for i := range dst {
			dst[i] = uint16(b[2*i]) | uint16(b[2*i+1])<<8
		}
	}
	fl, err := px.cur.ProcessRows(src, first, first+rows, a.slopes, px.work)
	if err != nil {
		return a.refuse(r, num, refusedChunkLayout)
	}
	scale := float32(g.scale)
	for i := from; i < to; i++ {
		a.slopes[i] *= scale
	}
	px.flags.Saturated += fl.Saturated
	px.flags.Dark += fl.Dark
	px.flags.DeadRows += fl.DeadRows
	px.flags.Hot += fl.Hot
	a.flux += float64(f.GetFluxElectrons())
	px.next = first + rows
	r.from, r.to = from, to
	if px.next < g.height {
		if f.GetChunkIndex()+1 >= f.GetChunkCount() {
			return a.refuse(r, num, refusedChunkLayout) // the frame's last chunk, and rows missing
		}
		a.next = 1 // a frame in progress (the slope index is the slope path's)
		r.verdict = chunkPartial
		return r
	}
	// Every row arrived: a capture may use the frame whatever it shows. A
	// frame whose pixels show a defect is refused whole, its command not
	// computed: the mirror holds the last good one.
	r.pixels = true
	switch fl := px.flags; {
	case fl.DeadRows > 0:
		return a.refuse(r, num, refusedDeadRow)
	case fl.Saturated > 0:
		return a.refuse(r, num, refusedSaturated)
	case fl.Hot > 0 && fl.Hot <= max(1, len(g.layout.Valid)/hotWindowsNoise):
		return a.refuse(r, num, refusedHotPixel)
	}
	a.next = 0
	if gap := num - a.last; a.last != 0 && gap > 1 {
		r.dropped = gap - 1
	}
	a.last = num
	r.verdict = frameComplete
	return r
}

// sameLayout reports whether two frame layouts are the same windows.
func sameLayout(a, b centroid.Layout) bool {
	return a.Subapertures == b.Subapertures && a.Pixels == b.Pixels && slices.Equal(a.Valid, b.Valid)
}

// littleEndian: the host stores a uint16's low byte first, as the wire does.
var littleEndian = func() bool { x := uint16(1); return *(*byte)(unsafe.Pointer(&x)) == 1 }()

// wireView is b's little-endian 16-bit pixels read in place, when the host
// is little-endian and b is 2-byte aligned (a decoded frame's buffer always
// is): decoding pixel by pixel costs 32–66 µs for the default detector's
// 192² pixels, the copy out of the view 0.9 µs (BenchmarkPixelDecode).
func wireView(b []byte) ([]uint16, bool) {
	if !littleEndian || len(b) == 0 || uintptr(unsafe.Pointer(&b[0]))%2 != 0 {
		return nil, false
	}
	return unsafe.Slice((*uint16)(unsafe.Pointer(&b[0])), len(b)/2), true
}
