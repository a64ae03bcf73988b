package bench

import (
	"encoding/binary"
	"fmt"
	"math"
	"math/rand/v2"
	"sync/atomic"

	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/sim/detector"
	"stillsky/sim/scenario"
)

// pixelStream separates the detector's noise stream from the sensor's and the
// turbulence's.
const pixelStream = 0x5eed_0f_91c5

// pixelCamera renders the bench's frames as raw detector pixels when the
// scenario has a wfs.pixels section: the System's noise-free slopes (radians)
// become spot offsets in pixels, and sim/detector draws the frame with its own
// photon, read and background noise, bias, dark, flat field and full well.
// Looking at the calibration source the spots are bright and free of photon
// and read noise (cal). Only the bench's producer renders.
type pixelCamera struct {
	sky, cal *detector.Detector
	// dark renders with the shutter closed, flat under a uniform lamp.
	dark, flat *detector.Detector
	source     atomic.Int32 // the stillskyv1.Source selected
	scale      float64      // radians per pixel
	off        []float64
	frame      []uint16
	rng        *rand.Rand
	pixels     int // across a window
	side       int // across the detector
}

// calibrationPhotons is the calibration source's photo-electrons per
// subaperture per frame (at most half a full well): bright, as an internal
// source is, and no pixel of a spot saturates.
const calibrationPhotons = 1e4

// flatLevel is the flat lamp's electrons per pixel per frame (at most half
// a full well).
const flatLevel = 1e4

// newPixelCamera builds the detectors of scenario s, with the laser beacon's
// elongation when s has one; nil when s streams slopes.
func newPixelCamera(s *scenario.Scenario, sys *System) (*pixelCamera, error) {
	p := s.WFS.Pixels
	if p == nil {
		return nil, nil
	}
	sensor := sys.Sensor()
	var valid []int
	for i, v := range sensor.Valid() {
		if v {
			valid = append(valid, i)
		}
	}
	n := s.WFS.Subapertures
	cfg := detector.Config{
		Subapertures: n, Valid: valid, Pixels: p.PixelsPerSubaperture,
		Sigma:   min(max(s.SpotSigmaPixels(), 0.2), float64(p.PixelsPerSubaperture)),
		Photons: s.PhotonsPerSubaperture(), Background: p.Background, Dark: p.Dark,
		ReadNoise: p.ReadNoise, Bias: p.Bias, Gain: p.Gain, FullWell: p.FullWell,
		FlatRMS: p.FlatRMS, FlatSeed: uint64(p.FlatSeed), PhotonNoise: s.WFS.Noise,
	}
	if !s.WFS.Noise {
		cfg.ReadNoise = 0
	}
	sky, err := detector.New(cfg)
	if err != nil {
		return nil, fmt.Errorf("bench: scenario %s: wfs.pixels: %w", s.Name, err)
	}
	cfg.Photons, cfg.ReadNoise, cfg.PhotonNoise = min(calibrationPhotons, p.FullWell/2), 0, false
	cal, err := detector.New(cfg)
	if err != nil {
		return nil, fmt.Errorf("bench: scenario %s: wfs.pixels: %w", s.Name, err)
	}
	// The shutter closed: bias, dark current and its noise, read noise. The
	// flat lamp: a uniform level of half a full well at most, times each
	// pixel's response.
	cfg.Photons, cfg.Background, cfg.ReadNoise, cfg.PhotonNoise = 0, 0, p.ReadNoise, true
	dark, err := detector.New(cfg)
	if err != nil {
		return nil, fmt.Errorf("bench: scenario %s: wfs.pixels: %w", s.Name, err)
	}
	cfg.Background = min(flatLevel, p.FullWell/2)
	flat, err := detector.New(cfg)
	if err != nil {
		return nil, fmt.Errorf("bench: scenario %s: wfs.pixels: %w", s.Name, err)
	}
	if s.LaserGuideStar != nil {
		d, half := s.SubapertureSize(), s.Telescope.Diameter/2
		centres := make([][2]float64, len(valid))
		for i, v := range valid {
			r, c := v/n, v%n
			centres[i] = [2]float64{(float64(c)+0.5)*d - half, (float64(r)+0.5)*d - half}
		}
		e, err := BeaconElongation(s, centres, p.PixelScale)
		if err != nil {
			return nil, err
		}
		// The calibration source is a point: its spots are not elongated.
		if err := sky.SetElongation(e); err != nil {
			return nil, fmt.Errorf("bench: scenario %s: laser elongation: %w", s.Name, err)
		}
	}
	side := sky.Side()
	c := &pixelCamera{sky: sky, cal: cal, dark: dark, flat: flat, scale: p.PixelScale, off: make([]float64, 2*len(valid)),
		frame: make([]uint16, side*side), pixels: p.PixelsPerSubaperture, side: side,
		rng: rand.New(rand.NewPCG(uint64(s.Atmosphere.Seed), pixelStream))}
	c.source.Store(int32(stillskyv1.Source_SOURCE_SKY))
	return c, nil
}

// bytes is the size of one encoded frame.
func (c *pixelCamera) bytes() int { return 2 * c.side * c.side }

// render draws the frame whose noise-free slopes are slopes (radians) into
// dst, little-endian 16-bit pixels, as the selected source shows it. It
// allocates nothing.
func (c *pixelCamera) render(dst []byte, slopes []float32) {
	for i, s := range slopes {
		c.off[i] = float64(s) / c.scale
	}
	d := c.sky
	switch stillskyv1.Source(c.source.Load()) {
	case stillskyv1.Source_SOURCE_CALIBRATION:
		d = c.cal
	case stillskyv1.Source_SOURCE_DARK:
		d = c.dark
	case stillskyv1.Source_SOURCE_FLAT:
		d = c.flat
	}
	if err := d.Render(c.frame, c.off, c.rng); err != nil {
		// Lengths are fixed at construction; an error here is a bug.
		panic(err)
	}
	for i, v := range c.frame {
		binary.LittleEndian.PutUint16(dst[2*i:], v)
	}
}

// geometry is the camera's PixelGeometry for Describe.
func (c *pixelCamera) geometry(p *scenario.Pixels, sigma float64) *stillskyv1.PixelGeometry {
	g := &stillskyv1.PixelGeometry{
		PixelsPerSubaperture: uint32(c.pixels), Width: uint32(c.side), Height: uint32(c.side),
		PixelScaleRad: c.scale, BiasAdu: p.Bias, GainEPerAdu: p.Gain, ReadNoiseE: p.ReadNoise,
		SaturationAdu: saturation(p),
		Centroid:      stillskyv1.CentroidMethod_CENTROID_METHOD_COG, Threshold: p.Threshold,
	}
	if p.Centroid == scenario.CentroidWCoG {
		g.Centroid = stillskyv1.CentroidMethod_CENTROID_METHOD_WEIGHTED
		g.WeightSigmaPx = p.WeightSigma
		if g.WeightSigmaPx == 0 {
			g.WeightSigmaPx = sigma
		}
	}
	return g
}

// saturation is the raw value from which a pixel counts as saturated: the
// full well's level less three read-noise sigmas (common practice), within the
// 16-bit converter.
func saturation(p *scenario.Pixels) uint32 {
	return uint32(max(1, min(65535, math.Floor(p.Bias+(p.FullWell-3*p.ReadNoise)/p.Gain))))
}
