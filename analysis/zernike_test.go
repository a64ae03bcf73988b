package analysis

import (
	"fmt"
	"math"
	"testing"
)

func TestZernikeVarianceNoll(t *testing.T) {
	// Noll 1976, Table IV: residual variances Δ_J after removing J modes, in
	// (D/r0)^(5/3) rad², Kolmogorov turbulence. A coefficient of mode J+1 has
	// variance Δ_J − Δ_{J+1}; per order the modes share it equally.
	delta := []float64{1.0299, 0.582, 0.134, 0.111, 0.0880, 0.0648, 0.0587, 0.0525, 0.0463, 0.0401, 0.0377}
	const D, r0 = 1.0, 1.0
	for _, c := range []struct {
		n       int
		j0, j1  int // Δ indices: modes j0+1 .. j1
		perMode float64
	}{
		{1, 1, 3, (delta[0] - delta[2]) / 2},
		{2, 3, 6, (delta[2] - delta[5]) / 3},
		{3, 6, 10, (delta[5] - delta[9]) / 4},
	} {
		t.Run(fmt.Sprintf("order %d", c.n), func(t *testing.T) {
			got := ZernikeVariance(c.n, D, r0, math.Inf(1), 0, 0)
			t.Logf("order %d: %.5f, Noll %.5f", c.n, got, c.perMode)
			if math.Abs(got/c.perMode-1) > 0.02 {
				t.Errorf("order %d: variance %.5f (D/r0)^(5/3), Noll's table gives %.5f", c.n, got, c.perMode)
			}
		})
	}
}

func TestZernikeFastMatchesSlow(t *testing.T) {
	// The cached Horner evaluation against the direct sum of Noll's radial
	// polynomial (Noll 1976) at points inside and outside the unit disk.
	for j := 2; j < len(zernikeModes); j += 7 {
		for _, p := range [][2]float64{{0.3, -0.2}, {-0.9, 0.1}, {0.6, 0.7}, {1.1, -0.4}} {
			if a, b := zernikeAt(j, p[0], p[1]), zernikeSlow(j, p[0], p[1]); math.Abs(a-b) > 1e-9*(1+math.Abs(b)) {
				t.Errorf("Z%d at %v: %g, direct %g", j, p, a, b)
			}
		}
	}
}
