package scenario

// The raw* types mirror the YAML file. Every field is a pointer so that a missing
// key can be told apart from a zero value; validate turns them into a Scenario.

type rawScenario struct {
	Name        *string        `yaml:"name"`
	Description *string        `yaml:"description"`
	Telescope   *rawTelescope  `yaml:"telescope"`
	Atmosphere  *rawAtmosphere `yaml:"atmosphere,omitempty"`
	GuideStar   *rawGuideStar  `yaml:"guide_star"`
	LGS         *rawLGS        `yaml:"laser_guide_star,omitempty"`
	TipTilt     *rawTipTilt    `yaml:"tip_tilt,omitempty"`
	Clouds      []*rawCloud    `yaml:"clouds,omitempty"`
	Supervisor  *rawSupervisor `yaml:"supervisor,omitempty"`
	WFS         *rawWFS        `yaml:"wfs"`
	DM          *rawDM         `yaml:"dm"`
	Loop        *rawLoop       `yaml:"loop"`
	Science     *rawScience    `yaml:"science"`
	Eye         *rawEye        `yaml:"eye,omitempty"`
}

type rawTelescope struct {
	Name         *string  `yaml:"name"`
	Site         *string  `yaml:"site"`
	Diameter     *float64 `yaml:"diameter_m"`
	Obstruction  *float64 `yaml:"obstruction"`
	Spiders      *int     `yaml:"spiders"`
	SpiderWidth  *float64 `yaml:"spider_width_m"`
	PupilSamples *int     `yaml:"pupil_samples"`
}

type rawAtmosphere struct {
	R0        *float64    `yaml:"r0_m"`
	L0        *float64    `yaml:"l0_m"`
	ZenithDeg *float64    `yaml:"zenith_deg"`
	Seed      *int64      `yaml:"seed"`
	Layers    []*rawLayer `yaml:"layers"`
}

type rawLayer struct {
	Altitude         *float64 `yaml:"altitude_m"`
	Fraction         *float64 `yaml:"fraction"`
	WindSpeed        *float64 `yaml:"wind_speed_m_per_s"`
	WindDirectionDeg *float64 `yaml:"wind_direction_deg"`
}

type rawGuideStar struct {
	Magnitude  *float64 `yaml:"magnitude"`
	Wavelength *float64 `yaml:"wavelength_m"`
	ZeroPoint  *float64 `yaml:"zero_point_photons_per_s_per_m2"`
	Throughput *float64 `yaml:"throughput"`
}

type rawLGS struct {
	Height    *float64 `yaml:"height_m"`
	Thickness *float64 `yaml:"thickness_m"`
	LaunchX   *float64 `yaml:"launch_x_m"`
	LaunchY   *float64 `yaml:"launch_y_m"`
}

type rawTipTilt struct {
	Magnitude   *float64 `yaml:"magnitude"`
	Wavelength  *float64 `yaml:"wavelength_m"`
	FrameRate   *float64 `yaml:"frame_rate_hz"`
	ReadNoise   *float64 `yaml:"read_noise_e"`
	Gain        *float64 `yaml:"gain"`
	OffloadGain *float64 `yaml:"offload_gain"`
	Stroke      *float64 `yaml:"stroke_rad"`
}

type rawWFS struct {
	Subapertures         *int       `yaml:"subapertures"`
	Mode                 *string    `yaml:"mode"`
	ValidThreshold       *float64   `yaml:"valid_threshold"`
	PixelsPerSubaperture *int       `yaml:"pixels_per_subaperture"`
	PixelScale           *float64   `yaml:"pixel_scale_rad"`
	ReadNoise            *float64   `yaml:"read_noise_e"`
	Background           *float64   `yaml:"background_e_per_pixel"`
	CentroidThreshold    *float64   `yaml:"centroid_threshold"`
	Noise                *bool      `yaml:"noise"`
	Pixels               *rawPixels `yaml:"pixels,omitempty"`
}

type rawPixels struct {
	PixelsPerSubaperture *int     `yaml:"pixels_per_subaperture"`
	PixelScale           *float64 `yaml:"pixel_scale_rad"`
	ReadNoise            *float64 `yaml:"read_noise_e"`
	Background           *float64 `yaml:"background_e_per_pixel"`
	Bias                 *float64 `yaml:"bias_adu"`
	Dark                 *float64 `yaml:"dark_e_per_pixel"`
	FlatRMS              *float64 `yaml:"flat_rms"`
	FlatSeed             *int64   `yaml:"flat_seed"`
	FullWell             *float64 `yaml:"full_well_e"`
	Gain                 *float64 `yaml:"gain_e_per_adu"`
	Centroid             *string  `yaml:"centroid"`
	Threshold            *float64 `yaml:"threshold"`
	WeightSigma          *float64 `yaml:"weight_sigma_px,omitempty"`
}

type rawDM struct {
	Actuators *int     `yaml:"actuators"`
	Coupling  *float64 `yaml:"coupling"`
	Stroke    *float64 `yaml:"stroke_m"`
	Margin    *float64 `yaml:"margin_pitches"`
}

type rawLoop struct {
	FrameRate   *float64 `yaml:"frame_rate_hz"`
	DelayFrames *int     `yaml:"delay_frames"`
}

type rawScience struct {
	Wavelength *float64 `yaml:"wavelength_m"`
	OffsetX    *float64 `yaml:"offset_x_arcsec"`
	OffsetY    *float64 `yaml:"offset_y_arcsec"`
}

// toRaw is the inverse of validate: every field present, defaults written out.
func (s *Scenario) toRaw() *rawScenario {
	t, a, g, w, d, l := s.Telescope, s.Atmosphere, s.GuideStar, s.WFS, s.DM, s.Loop
	layers := make([]*rawLayer, len(a.Layers))
	for i, x := range a.Layers {
		layers[i] = &rawLayer{&x.Altitude, &x.Fraction, &x.WindSpeed, &x.WindDirectionDeg}
	}
	sci := s.Science
	var lgs *rawLGS
	if g := s.LaserGuideStar; g != nil {
		lgs = &rawLGS{&g.Height, &g.Thickness, &g.LaunchX, &g.LaunchY}
	}
	var tt *rawTipTilt
	if x := s.TipTilt; x != nil {
		tt = &rawTipTilt{&x.Magnitude, &x.Wavelength, &x.FrameRate, &x.ReadNoise, &x.Gain, &x.OffloadGain, &x.Stroke}
	}
	raw := &rawScenario{
		LGS:         lgs,
		TipTilt:     tt,
		Clouds:      s.Clouds.toRaw(),
		Supervisor:  s.Supervisor.toRaw(),
		Name:        &s.Name,
		Description: &s.Description,
		Telescope:   &rawTelescope{&t.Name, &t.Site, &t.Diameter, &t.Obstruction, &t.Spiders, &t.SpiderWidth, &t.PupilSamples},
		Atmosphere:  &rawAtmosphere{&a.R0, &a.L0, &a.ZenithDeg, &a.Seed, layers},
		GuideStar:   &rawGuideStar{&g.Magnitude, &g.Wavelength, &g.ZeroPoint, &g.Throughput},
		WFS: &rawWFS{&w.Subapertures, &w.Mode, &w.ValidThreshold, &w.PixelsPerSubaperture, &w.PixelScale,
			&w.ReadNoise, &w.Background, &w.CentroidThreshold, &w.Noise, nil},
		DM:      &rawDM{&d.Actuators, &d.Coupling, &d.Stroke, &d.Margin},
		Loop:    &rawLoop{&l.FrameRate, &l.DelayFrames},
		Science: &rawScience{&sci.Wavelength, &sci.OffsetX, &sci.OffsetY},
	}
	if p := w.Pixels; p != nil {
		raw.WFS.Pixels = &rawPixels{&p.PixelsPerSubaperture, &p.PixelScale, &p.ReadNoise, &p.Background,
			&p.Bias, &p.Dark, &p.FlatRMS, &p.FlatSeed, &p.FullWell, &p.Gain, &p.Centroid, &p.Threshold, nil}
		if p.WeightSigma != 0 {
			raw.WFS.Pixels.WeightSigma = &p.WeightSigma
		}
	}
	if s.Eye != nil {
		raw.Atmosphere, raw.Eye = nil, s.Eye.toRaw()
	}
	return raw
}
