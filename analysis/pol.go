package analysis

import (
	"fmt"

	"gonum.org/v1/gonum/mat"
)

// PseudoOpenLoop writes the pseudo-open-loop slopes s_pol = s − M·c into out:
// the slopes the sensor would have measured with the mirror flat, from the slopes
// s measured in closed loop and the command c that was applied during that
// exposure (the command the loop sent d frames earlier). M is the interaction
// matrix (slopes × actuators, slopes per metre of command), whose columns carry
// the sign of the mirror's correction, so subtracting M·c removes it. It panics
// if the lengths do not match M.
func PseudoOpenLoop(m *mat.Dense, slopes, applied []float32, out []float64) {
	ns, na := m.Dims()
	if len(slopes) != ns || len(out) != ns || len(applied) != na {
		panic(fmt.Sprintf("analysis: PseudoOpenLoop: %d slopes, %d commands, %d out for a %d×%d interaction matrix", len(slopes), len(applied), len(out), ns, na))
	}
	for i := range ns {
		row := m.RawRowView(i)
		s := float64(slopes[i])
		for j, c := range applied {
			s -= row[j] * float64(c)
		}
		out[i] = s
	}
}

// Projector maps closed-loop slopes and the applied command straight to modal
// coefficients of the pseudo-open-loop wavefront, a = P·s − (P·M)·c, with P a
// projection of slopes on modes (P·M precomputed, so a frame costs
// modes × (slopes + actuators) products instead of slopes × actuators).
type Projector struct {
	p, pm *mat.Dense
}

// NewProjector builds the projector of p (modes × slopes) for interaction
// matrix m (slopes × actuators).
func NewProjector(p, m *mat.Dense) (*Projector, error) {
	_, ps := p.Dims()
	ns, _ := m.Dims()
	if ps != ns {
		return nil, fmt.Errorf("analysis: projection of %d slopes for an interaction matrix of %d", ps, ns)
	}
	var pm mat.Dense
	pm.Mul(p, m)
	return &Projector{p: mat.DenseCopyOf(p), pm: &pm}, nil
}

// Modes returns the number of modal coefficients.
func (q *Projector) Modes() int { r, _ := q.p.Dims(); return r }

// Coefficients writes the pseudo-open-loop modal coefficients of one frame into
// out (Modes values). It panics on lengths that do not match.
func (q *Projector) Coefficients(slopes, applied []float32, out []float64) {
	nm, ns := q.p.Dims()
	_, na := q.pm.Dims()
	if len(slopes) != ns || len(applied) != na || len(out) != nm {
		panic(fmt.Sprintf("analysis: Projector.Coefficients: %d slopes, %d commands, %d out; want %d, %d, %d", len(slopes), len(applied), len(out), ns, na, nm))
	}
	for i := range nm {
		pr, mr := q.p.RawRowView(i), q.pm.RawRowView(i)
		s := 0.0
		for j, v := range slopes {
			s += pr[j] * float64(v)
		}
		for j, c := range applied {
			s -= mr[j] * float64(c)
		}
		out[i] = s
	}
}
