package sweep

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"

	"stillsky/internal/atomicfile"
)

// R0 is the scenario field that the plots draw one curve for each value of.
const R0 = "atmosphere.r0_m"

// Collection is the results of one sweep read back from a directory.
type Collection struct {
	// Sweep is the sweep's name and Points its size.
	Sweep  string
	Points int
	// Axes are the fields that vary, in the order first seen.
	Axes []string
	// Results holds a result for every index in [0, Points): a point without a
	// result file is a Result whose Error says so.
	Results []Result
}

// Collect reads the result files in dir. Results of more than one sweep, or
// disagreeing about the sweep's size, are refused.
func Collect(dir string) (*Collection, error) {
	files, err := filepath.Glob(filepath.Join(dir, "point-*.json"))
	if err != nil {
		return nil, err
	}
	if len(files) == 0 {
		return nil, fmt.Errorf("sweep: %s: no point-*.json result files", dir)
	}
	c := &Collection{}
	byIndex := map[int]Result{}
	for _, f := range files {
		data, err := os.ReadFile(f)
		if err != nil {
			return nil, err
		}
		dec := json.NewDecoder(bytes.NewReader(data))
		dec.DisallowUnknownFields()
		var r Result
		if err := dec.Decode(&r); err != nil {
			return nil, fmt.Errorf("sweep: %s: %w", f, err)
		}
		if filepath.Base(f) != FileName(r.Index) {
			return nil, fmt.Errorf("sweep: %s: holds point %d", f, r.Index)
		}
		if c.Sweep == "" {
			c.Sweep, c.Points = r.Sweep, r.Points
		}
		if r.Sweep != c.Sweep || r.Points != c.Points {
			return nil, fmt.Errorf("sweep: %s: point of sweep %q with %d points, others are of %q with %d", f, r.Sweep, r.Points, c.Sweep, c.Points)
		}
		if r.Index < 0 || r.Index >= r.Points {
			return nil, fmt.Errorf("sweep: %s: index %d outside the sweep's %d points", f, r.Index, r.Points)
		}
		if r.Summary == nil && r.Error == "" {
			return nil, fmt.Errorf("sweep: %s: neither a summary nor an error", f)
		}
		byIndex[r.Index] = r
		for _, s := range r.Settings {
			if !slices.Contains(c.Axes, s.Field) {
				c.Axes = append(c.Axes, s.Field)
			}
		}
	}
	c.Results = make([]Result, c.Points)
	for i := range c.Results {
		r, ok := byIndex[i]
		if !ok {
			r = Result{Sweep: c.Sweep, Index: i, Points: c.Points, Error: "no result file (" + FileName(i) + ")"}
		}
		c.Results[i] = r
	}
	return c, nil
}

// Failed returns the results with an error, in index order.
func (c *Collection) Failed() []Result {
	var out []Result
	for _, r := range c.Results {
		if r.Error != "" {
			out = append(out, r)
		}
	}
	return out
}

// value returns the setting of field in r, and whether it is set.
func (r *Result) value(field string) (any, bool) {
	for _, s := range r.Settings {
		if s.Field == field {
			return s.Value, true
		}
	}
	return nil, false
}

// summaryColumns are the CSV columns taken from each summary.
var summaryColumns = []string{
	"scenario", "strehl_open", "strehl_closed", "strehl_closed_block_std", "strehl_estimate_closed", "science_wavelength_m",
	"residual_rms_nm_open", "residual_rms_nm_closed", "rtc_latency_p99_us", "frames_dropped",
	"frames_rejected", "interlock_trips", "final_loop_state", "loop_gain",
}

// WriteCSV writes one row per point: index, the axes, the summary's figures, the
// run's time and its error ("" for none). Failed points have empty figures.
func (c *Collection) WriteCSV(w io.Writer) error {
	cw := csv.NewWriter(w)
	head := append(append(append([]string{"index"}, c.Axes...), summaryColumns...), "delay_frames", "seconds", "error")
	if err := cw.Write(head); err != nil {
		return err
	}
	f := func(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }
	u := func(v uint64) string { return strconv.FormatUint(v, 10) }
	for _, r := range c.Results {
		row := []string{strconv.Itoa(r.Index)}
		for _, a := range c.Axes {
			v, ok := r.value(a)
			cell := ""
			if ok {
				cell = fmt.Sprint(v)
			}
			row = append(row, cell)
		}
		if s := r.Summary; s != nil {
			row = append(row, s.Scenario, f(s.StrehlOpen), f(s.StrehlClosed), f(s.StrehlClosedBlocks.Std), f(s.StrehlEstimateClosed), f(s.ScienceWavelengthM),
				f(s.ResidualRMSNmOpen), f(s.ResidualRMSNmClosed), f(s.RTCLatencyUs.P99), u(s.FramesDropped),
				u(s.FramesRejected), u(s.InterlockTrips), s.FinalLoopState, f(s.Gain))
		} else {
			row = append(row, make([]string, len(summaryColumns))...)
		}
		delay, secs := "", ""
		if r.DelayFrames > 0 {
			delay = strconv.Itoa(r.DelayFrames)
		}
		if r.Summary != nil {
			secs = f(r.Seconds)
		}
		row = append(row, delay, secs, r.Error)
		if err := cw.Write(row); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}

// WriteFiles writes sweep.csv and the Strehl-against-gain plots into dir and
// returns the paths written.
func (c *Collection) WriteFiles(dir string) ([]string, error) {
	csvPath := filepath.Join(dir, "sweep.csv")
	if err := atomicfile.Write(csvPath, c.WriteCSV); err != nil {
		return nil, err
	}
	plots, err := c.Plots(dir)
	return append([]string{csvPath}, plots...), err
}

// StabilityLimit is the largest gain for which the pure integrator
// c_k = c_{k−1} + g e_k with the sensor seeing the command of d frames earlier
// (e_k = φ_k − c_{k−d}) is stable: g_max = 2 sin(π / (2(2d − 1))), from the Jury
// criterion on z^d (z − 1) + g = 0 (standard discrete-time control). It is 2 for
// d = 1, 1 for d = 2, 0.618 for d = 3; NaN for d < 1.
func StabilityLimit(d int) float64 {
	if d < 1 {
		return math.NaN()
	}
	return 2 * math.Sin(math.Pi/(2*float64(2*d-1)))
}

// ErrNoGain is returned by Plots (and WriteFiles, after the CSV) for a sweep that does not vary the gain.
var ErrNoGain = errors.New("sweep: the sweep does not vary " + Gain + ": no Strehl-against-gain plot")
