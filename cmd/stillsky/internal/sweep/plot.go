package sweep

import (
	"cmp"
	"fmt"
	"io"
	"math"
	"path/filepath"
	"slices"
	"strings"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/plotutil"
	"gonum.org/v1/plot/vg"

	"stillsky/internal/atomicfile"
)

// curve is one line of a plot: closed-loop Strehl ratio against gain.
type curve struct {
	label string
	pts   plotter.XYs
}

// panel is one plot: the points that share every setting but the gain and r0.
type panel struct {
	title  string
	curves []curve
	delays []int // the loop delays of its points
}

// Plots writes one PNG per combination of the settings other than the gain and
// r0, each with a curve of closed-loop Strehl ratio against gain per r0 value and
// the pure integrator's stability limit for the points' delay; failed points are
// left out. It returns the files written, or ErrNoGain when the gain is not an axis.
func (c *Collection) Plots(dir string) ([]string, error) {
	if !slices.Contains(c.Axes, Gain) {
		return nil, ErrNoGain
	}
	panels := c.panels()
	var files []string
	for i, p := range panels {
		name := "strehl-vs-gain.png"
		if len(panels) > 1 {
			name = fmt.Sprintf("strehl-vs-gain-%d.png", i+1)
		}
		path := filepath.Join(dir, name)
		if err := p.write(path, c.Sweep); err != nil {
			return files, err
		}
		files = append(files, path)
	}
	return files, nil
}

// panels groups the successful results.
func (c *Collection) panels() []*panel {
	var others []string
	for _, a := range c.Axes {
		if a != Gain && a != R0 {
			others = append(others, a)
		}
	}
	byTitle := map[string]*panel{}
	var order []string
	for _, r := range c.Results {
		if r.Summary == nil {
			continue
		}
		g, ok := r.value(Gain)
		if !ok {
			continue
		}
		var parts []string
		for _, a := range others {
			if v, ok := r.value(a); ok {
				parts = append(parts, fmt.Sprintf("%s = %v", a, v))
			}
		}
		title := strings.Join(parts, ", ")
		p := byTitle[title]
		if p == nil {
			p = &panel{title: title}
			byTitle[title] = p
			order = append(order, title)
		}
		label := "Strehl ratio"
		if v, ok := r.value(R0); ok {
			label = fmt.Sprintf("r0 = %v m", v)
		}
		k := slices.IndexFunc(p.curves, func(c curve) bool { return c.label == label })
		if k < 0 {
			p.curves = append(p.curves, curve{label: label})
			k = len(p.curves) - 1
		}
		p.curves[k].pts = append(p.curves[k].pts, plotter.XY{X: g.(float64), Y: r.Summary.StrehlClosed})
		if !slices.Contains(p.delays, r.DelayFrames) {
			p.delays = append(p.delays, r.DelayFrames)
		}
	}
	out := make([]*panel, len(order))
	for i, t := range order {
		out[i] = byTitle[t]
		for _, c := range out[i].curves {
			slices.SortFunc(c.pts, func(a, b plotter.XY) int { return cmp.Compare(a.X, b.X) })
		}
	}
	return out
}

func (p *panel) write(path, sweep string) error {
	plt := plot.New()
	plt.Title.Text = "sweep " + sweep
	if p.title != "" {
		plt.Title.Text += ": " + p.title
	}
	plt.X.Label.Text = "integrator gain"
	plt.Y.Label.Text = "Strehl ratio, closed loop"
	// Room above a Strehl ratio of 1 for the legend.
	plt.Y.Min, plt.Y.Max = 0, 1+0.07*float64(len(p.curves)+1)
	plt.Legend.Top = true
	var args []any
	for _, c := range p.curves {
		args = append(args, c.label, c.pts)
	}
	if err := plotutil.AddLinePoints(plt, args...); err != nil {
		return err
	}
	// The stability limit of the pure integrator for the panel's delay, when the
	// panel has one delay and the limit lies in the plotted gain range [0, 2).
	if len(p.delays) == 1 {
		if g := StabilityLimit(p.delays[0]); !math.IsNaN(g) && g < 2 {
			l, err := plotter.NewLine(plotter.XYs{{X: g, Y: 0}, {X: g, Y: 1}})
			if err != nil {
				return err
			}
			l.Dashes = []vg.Length{vg.Points(4), vg.Points(3)}
			plt.Add(l)
			plt.Legend.Add(fmt.Sprintf("stability limit, %d-frame delay (g = %.3g)", p.delays[0], g), l)
		}
	}
	w, err := plt.WriterTo(7*vg.Inch, 4.5*vg.Inch, "png")
	if err != nil {
		return err
	}
	return atomicfile.Write(path, func(out io.Writer) error {
		_, err := w.WriteTo(out)
		return err
	})
}
