package main

import (
	"errors"
	"flag"
	"fmt"
	"math"
	"math/rand/v2"

	"stillsky/internal/fits"
	"stillsky/sim/atmosphere"
	"stillsky/sim/scenario"
)

func init() {
	register("screen", "write von Kármán phase screens (radians at 500 nm) to a FITS file", runScreen)
}

// maxScreenBytes bounds the cube a single command writes (float32 samples).
const maxScreenBytes = 4 << 30

func runScreen(args []string) error {
	fs := newFlagSet("screen")
	scn := fs.String("scenario", scenario.Default, "built-in scenario name or path to a scenario YAML file")
	layer := fs.Int("layer", 0, "screens of this layer alone (1 = first layer of the scenario); 0 for the whole atmosphere")
	r0 := fs.Float64("r0", 0, "Fried parameter in m at 500 nm towards the zenith (default: the scenario's)")
	l0 := fs.Float64("L0", 0, "outer scale in m (default: the scenario's)")
	size := fs.Int("size", 256, "samples on a side of each screen")
	pixel := fs.Float64("pixel-scale", 0, "sample spacing in m (default: telescope diameter / pupil samples)")
	count := fs.Int("count", 1, "number of independent screens (a cube when more than one)")
	seed := fs.Int64("seed", 0, "random seed (default: the scenario's)")
	out := fs.String("out", "", "output FITS file (required)")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	set := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	if *out == "" {
		return errors.New("--out: a FITS file name is required")
	}
	s, err := scenario.Load(*scn)
	if err != nil {
		return err
	}
	atm := s.Atmosphere
	if set["r0"] {
		atm.R0 = *r0
	}
	if set["L0"] {
		atm.L0 = *l0
	}
	if set["seed"] {
		atm.Seed = *seed
	}
	scale := s.Telescope.Diameter / float64(s.Telescope.PupilSamples)
	if set["pixel-scale"] {
		scale = *pixel
	}
	switch {
	case !(atm.R0 > 0) || math.IsInf(atm.R0, 0):
		return fmt.Errorf("--r0 %g: must be a finite positive length in m", atm.R0)
	case !(atm.L0 > 0) || math.IsInf(atm.L0, 0):
		return fmt.Errorf("--L0 %g: must be a finite positive length in m", atm.L0)
	case !(scale > 0) || math.IsInf(scale, 0):
		return fmt.Errorf("--pixel-scale %g: must be a finite positive length in m", scale)
	case *layer < 0 || *layer > len(atm.Layers):
		return fmt.Errorf("--layer %d: must be in [0, %d] for scenario %q", *layer, len(atm.Layers), s.Name)
	case *count < 1:
		return fmt.Errorf("--count %d: must be >= 1", *count)
	case *size < 2 || *size > 16384:
		return fmt.Errorf("--size %d: must be in [2, 16384]", *size)
	case float64(*size)*float64(*size)*float64(*count)*4 > maxScreenBytes:
		return fmt.Errorf("--size %d --count %d: more than %d GiB of data", *size, *count, maxScreenBytes>>30)
	}
	// r0 of what goes in the file: line of sight (Roddier 1981, r0 ∝ (cos z)^(3/5)),
	// and for one layer its own share of Cn² (r0_i = r0·f_i^(−3/5)).
	eff := atm.R0 * math.Pow(math.Cos(atm.ZenithDeg*math.Pi/180), 3.0/5)
	if *layer > 0 {
		eff *= math.Pow(atm.Layers[*layer-1].Fraction, -3.0/5)
	}
	hdu, err := makeScreens(atmosphere.ScreenConfig{Size: *size, PixelScale: scale, R0: eff, L0: atm.L0, Subharmonics: true}, *count, atm.Seed)
	if err != nil {
		return err
	}
	h := &hdu.Header
	h.Set("BUNIT", "rad", "phase at the wavelength WAVELEN")
	h.Set("WAVELEN", atmosphere.Wavelength500, "[m] wavelength of the phase and of R0")
	h.Set("PIXSCALE", scale, "[m] sample spacing")
	h.Set("R0", eff, "[m] Fried parameter of the screens")
	h.Set("L0", atm.L0, "[m] von Karman outer scale")
	h.Set("ZENITH", atm.ZenithDeg, "[deg] zenith angle applied to R0")
	h.Set("LAYER", int64(*layer), "scenario layer from 1; 0 = all layers")
	h.Set("SEED", atm.Seed, "random seed")
	h.Set("SCENARIO", truncate(s.Name, 60), "")
	h.Set("COMMENT", nil, "Independent von Karman phase screens made by FFT with subharmonics")
	h.Set("COMMENT", nil, "(stillsky screen). Each plane along NAXIS3 is one screen.")
	return fits.WriteFile(*out, hdu)
}

// makeScreens generates count screens into one float32 HDU: an image for one
// screen, a cube with the screens along NAXIS3 for more.
func makeScreens(c atmosphere.ScreenConfig, count int, seed int64) (*fits.HDU, error) {
	g, err := atmosphere.NewScreenGenerator(c)
	if err != nil {
		return nil, err
	}
	n := c.Size
	rng := rand.New(rand.NewPCG(uint64(seed), 0))
	screen := make([]float64, n*n)
	data := make([]float32, count*n*n)
	for k := 0; k < count; k++ {
		g.Generate(rng, screen)
		for i, v := range screen {
			data[k*n*n+i] = float32(v)
		}
	}
	axes := []int{n, n}
	if count > 1 {
		axes = append(axes, count)
	}
	return &fits.HDU{Bitpix: -32, Axes: axes, Data: data}, nil
}

func truncate(s string, n int) string {
	if len(s) > n {
		return s[:n]
	}
	return s
}
