package budgetsim

import (
	"encoding/json"
	"fmt"
	"io"
	"math"

	"stillsky/analysis"
	"stillsky/sim/scenario"
)

// Report is the output of `stillsky budget`: the analytic budget of a scenario at
// one gain, for the optical system as designed (Design: a real atmosphere and a
// Shack–Hartmann that averages the gradient over each subaperture) and as the
// bench simulates it (Simulated: the wavefront sampled on the pupil grid, slopes
// differenced across the grid's samples), and with Simulate the terms measured on
// the bench, averaged over seeds.
type Report struct {
	Scenario   string          `json:"scenario"`
	Gain       float64         `json:"gain"`
	Leak       float64         `json:"leak"`
	Wavelength float64         `json:"science_wavelength_m"`
	Design     analysis.Budget `json:"design"`
	Simulated  analysis.Budget `json:"simulated"`
	// Measured is the mean of the simulated decompositions (nil without
	// Simulate), from Seeds × Frames frames.
	Measured *Terms `json:"measured,omitempty"`
	// PerSeed holds each seed's decomposition, in the order of Seeds; Spread
	// is their sample standard deviation, term by term (zero for one seed).
	PerSeed []Terms `json:"per_seed,omitempty"`
	Spread  *Terms  `json:"spread,omitempty"`
	Seeds   []int64 `json:"seeds,omitempty"`
	Frames  int     `json:"frames,omitempty"`
}

// Evaluate calibrates the scenario's bench, computes both budgets at gain and leak and,
// when seeds is not empty, measures the terms by simulation over frames frames
// per seed (after 200 to converge).
func Evaluate(scn *scenario.Scenario, gain, leak float64, seeds []int64, frames int) (*Report, error) {
	if len(seeds) > 0 && (frames < 100 || frames > 1_000_000) {
		return nil, fmt.Errorf("frames %d: must be in [100, 1000000]", frames)
	}
	rig, err := Calibrate(scn)
	if err != nil {
		return nil, err
	}
	rep := &Report{Scenario: scn.Name, Gain: gain, Leak: leak, Wavelength: scn.Science.Wavelength}
	if rep.Design, err = rig.Predict(gain, leak, nil, false); err != nil {
		return nil, err
	}
	if rep.Simulated, err = rig.Predict(gain, leak, nil, true); err != nil {
		return nil, err
	}
	if len(seeds) == 0 {
		return rep, nil
	}
	rep.Seeds, rep.Frames = seeds, frames
	mean, sd, per, err := rig.Measure(gain, leak, seeds, frames)
	if err != nil {
		return nil, err
	}
	rep.Measured, rep.Spread, rep.PerSeed = &mean, &sd, per
	return rep, nil
}

// Measure decomposes the loop at gain and leak on the bench for each seed
// (frames frames after 200 to converge, Decompose) and returns the mean of the
// terms, their sample standard deviation (zero for one seed) and each seed's.
func (r *Rig) Measure(gain, leak float64, seeds []int64, frames int) (mean, spread Terms, per []Terms, err error) {
	for _, seed := range seeds {
		m, err := r.Decompose(gain, leak, seed, 200, frames, 10)
		if err != nil {
			return Terms{}, Terms{}, nil, err
		}
		k := 1 / float64(len(seeds))
		mean.Fitting += k * m.Fitting
		mean.Aliasing += k * m.Aliasing
		mean.Servo += k * m.Servo
		mean.Noise += k * m.Noise
		mean.LowOrder += k * m.LowOrder
		mean.Total += k * m.Total
		mean.Strehl += k * m.Strehl
		per = append(per, m)
	}
	if n := len(per); n > 1 {
		for _, m := range per {
			spread.add(m, mean, 1/float64(n-1))
		}
		spread.sqrt()
	}
	return mean, spread, per, nil
}

// add adds k (m − mean)² to each term of t.
func (t *Terms) add(m, mean Terms, k float64) {
	sq := func(a, b float64) float64 { return k * (a - b) * (a - b) }
	t.Fitting += sq(m.Fitting, mean.Fitting)
	t.Aliasing += sq(m.Aliasing, mean.Aliasing)
	t.Servo += sq(m.Servo, mean.Servo)
	t.Noise += sq(m.Noise, mean.Noise)
	t.LowOrder += sq(m.LowOrder, mean.LowOrder)
	t.Total += sq(m.Total, mean.Total)
	t.Strehl += sq(m.Strehl, mean.Strehl)
}

// sqrt takes the square root of each term.
func (t *Terms) sqrt() {
	for _, p := range []*float64{&t.Fitting, &t.Aliasing, &t.Servo, &t.Noise, &t.LowOrder, &t.Total, &t.Strehl} {
		*p = math.Sqrt(*p)
	}
}

// WriteJSON writes the report as indented JSON.
func (r *Report) WriteJSON(w io.Writer) error {
	e := json.NewEncoder(w)
	e.SetIndent("", "  ")
	return e.Encode(r)
}

// WriteText writes the report as a table: each term in rad² and nm rms at the
// science wavelength.
func (r *Report) WriteText(w io.Writer) error {
	b := r.Design
	fmt.Fprintf(w, "error budget: scenario %s, gain %.3g, leak %.3g, science wavelength %.0f nm, r0 there %.3f m\n",
		r.Scenario, r.Gain, r.Leak, r.Wavelength*1e9, b.R0)
	head := fmt.Sprintf("  %-10s %18s %18s", "term", "design rad² (nm)", "simulated rad² (nm)")
	if r.Measured != nil {
		head += fmt.Sprintf(" %20s %7s", "measured rad² (nm)", "ratio")
	}
	fmt.Fprintln(w, head)
	cell := func(v float64) string { return fmt.Sprintf("%.4f (%5.1f)", v, b.NM(v)) }
	// The ratio compares each measured term with the analytic quantity that its
	// runs measure (cmp): the no-delay loop at gain 1 passes the aliasing whole
	// (AliasingNoDelay), and the delayed loop's change to it falls in servo.
	sim := r.Simulated
	rows := []struct {
		name          string
		d, s          float64
		measured, cmp float64
	}{
		{"fitting", r.Design.Fitting, sim.Fitting, 0, sim.Fitting},
		{"aliasing", r.Design.Aliasing, sim.Aliasing, 0, 0},
		{"low order", r.Design.LowOrder, sim.LowOrder, 0, sim.LowOrder - sim.BandEdge},
		{"alias+low", r.Design.Aliasing + r.Design.LowOrder, sim.Aliasing + sim.LowOrder, 0, sim.AliasingNoDelay + sim.LowOrder},
		{"servo", r.Design.Servo, sim.Servo, 0, sim.Servo + sim.Aliasing - sim.AliasingNoDelay},
		{"noise", r.Design.Noise, sim.Noise, 0, sim.Noise},
		{"total", r.Design.Total, sim.Total, 0, sim.Total},
	}
	if m := r.Measured; m != nil {
		for i, v := range []float64{m.Fitting, math.NaN(), m.LowOrder, m.Aliasing, m.Servo, m.Noise, m.Total} {
			rows[i].measured = v
		}
	}
	for _, row := range rows {
		line := fmt.Sprintf("  %-10s %18s %18s", row.name, cell(row.d), cell(row.s))
		if r.Measured != nil {
			ratio, m := "   -", "-"
			if !math.IsNaN(row.measured) {
				m = cell(math.Max(row.measured, 0))
				if row.cmp > 0 {
					ratio = fmt.Sprintf("%7.2f", row.measured/row.cmp)
				}
			}
			line += fmt.Sprintf(" %20s %7s", m, ratio)
		}
		fmt.Fprintln(w, line)
	}
	line := fmt.Sprintf("  %-10s %18.3f %18.3f", "Strehl", r.Design.Strehl, r.Simulated.Strehl)
	if r.Measured != nil {
		line += fmt.Sprintf(" %20.3f", r.Measured.Strehl)
	}
	fmt.Fprintln(w, line)
	if len(r.PerSeed) > 1 && r.Spread != nil {
		sd := r.Spread
		fmt.Fprintf(w, "  spread over seeds (sample standard deviation): fitting %.4f, alias+low %.4f, servo %.4f, noise %.4f, total %.4f rad²; Strehl %.3f\n",
			sd.Fitting, sd.Aliasing, sd.Servo, sd.Noise, sd.Total, sd.Strehl)
		for i, m := range r.PerSeed {
			fmt.Fprintf(w, "  seed %d: fitting %.4f, alias+low %.4f, servo %.4f, noise %.4f, total %.4f rad², Strehl %.3f\n",
				r.Seeds[i], m.Fitting, m.Aliasing, m.Servo, m.Noise, m.Total, m.Strehl)
		}
	}
	fmt.Fprintln(w, "  (Strehl: Maréchal exp(−σ²) of the total; measured: long-exposure science PSF.")
	fmt.Fprintln(w, "   design: a real atmosphere, gradients averaged over each subaperture; simulated: the bench's pupil sampling.)")
	if r.Measured != nil {
		fmt.Fprintf(w, "  measured on the lockstep bench over seeds %v, %d frames each: noise = full − noise off; servo = delayed − no-delay loop (noise off; it also holds the leak's cost, which the budget puts in low order); fitting = best mirror fit; alias+low = no-delay loop − fitting (aliasing is not measured alone); low order = the share of Noll modes 2–21 the no-delay loop leaves, regressed on the turbulence's own\n", r.Seeds, r.Frames)
		fmt.Fprintf(w, "  ratio: measured over the analytic value of what its runs measure: alias+low against the aliasing a no-delay loop at gain 1 passes whole (%.4f rad²) plus low order; servo against servo plus the delayed loop's filtering of the aliasing (%+.4f rad²); low order against its Zernike modes alone, without the band edge above them (%.4f rad²)\n",
			sim.AliasingNoDelay, sim.Aliasing-sim.AliasingNoDelay, sim.BandEdge)
	}
	return nil
}
