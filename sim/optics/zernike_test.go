package optics

import (
	"fmt"
	"math"
	"testing"
)

func disk(t testing.TB, n int) *Pupil {
	t.Helper()
	p, err := NewPupil(PupilConfig{Diameter: 2, N: n})
	if err != nil {
		t.Fatal(err)
	}
	return p
}

// Noll 1976, Table I: index j and its radial order n and azimuthal frequency m.
func TestNollIndex(t *testing.T) {
	for _, c := range []struct{ j, n, m int }{
		{1, 0, 0}, {2, 1, 1}, {3, 1, -1}, {4, 2, 0}, {5, 2, -2}, {6, 2, 2},
		{7, 3, -1}, {8, 3, 1}, {9, 3, -3}, {10, 3, 3}, {11, 4, 0}, {12, 4, 2},
		{13, 4, -2}, {14, 4, 4}, {15, 4, -4}, {16, 5, 1}, {21, 5, -5}, {22, 6, 0},
	} {
		t.Run(fmt.Sprintf("j=%d", c.j), func(t *testing.T) {
			if n, m := NollIndex(c.j); n != c.n || m != c.m {
				t.Errorf("NollIndex(%d) = (%d, %d), want (%d, %d)", c.j, n, m, c.n, c.m)
			}
		})
	}
}

// Noll 1976, Table I: explicit polynomials, at one point off the axes.
func TestZernikeExplicit(t *testing.T) {
	p := disk(t, 64)
	out := make([]float64, 64*64)
	ix, iy := 45, 20
	x, y := p.Coord(ix), p.Coord(iy)
	r, th := math.Hypot(x, y), math.Atan2(y, x)
	for _, c := range []struct {
		j    int
		want float64
	}{
		{1, 1},
		{2, 2 * r * math.Cos(th)},
		{3, 2 * r * math.Sin(th)},
		{4, math.Sqrt(3) * (2*r*r - 1)},
		{5, math.Sqrt(6) * r * r * math.Sin(2*th)},
		{6, math.Sqrt(6) * r * r * math.Cos(2*th)},
		{7, math.Sqrt(8) * (3*r*r*r - 2*r) * math.Sin(th)},
		{8, math.Sqrt(8) * (3*r*r*r - 2*r) * math.Cos(th)},
		{11, math.Sqrt(5) * (6*math.Pow(r, 4) - 6*r*r + 1)},
		{22, math.Sqrt(7) * (20*math.Pow(r, 6) - 30*math.Pow(r, 4) + 12*r*r - 1)},
	} {
		t.Run(fmt.Sprintf("j=%d", c.j), func(t *testing.T) {
			if err := Zernike(c.j, p, out); err != nil {
				t.Fatal(err)
			}
			if got := out[iy*64+ix]; math.Abs(got-c.want) > 1e-12 {
				t.Errorf("Z%d = %.15g, want %.15g", c.j, got, c.want)
			}
		})
	}
}

// Noll 1976: the modes are orthonormal over the unit disk. On a 256-sample disk the
// Gram matrix of the first 36 modes is the identity to the sampling error.
func TestZernikeOrthonormal(t *testing.T) {
	const n, J = 256, 36
	p := disk(t, n)
	z := make([][]float64, J+1)
	for j := 1; j <= J; j++ {
		z[j] = make([]float64, n*n)
		if err := Zernike(j, p, z[j]); err != nil {
			t.Fatal(err)
		}
	}
	worst := 0.0
	for i := 1; i <= J; i++ {
		for j := i; j <= J; j++ {
			var s float64
			for k, a := range p.Mask {
				s += a * z[i][k] * z[j][k]
			}
			s /= p.Area
			want := 0.0
			if i == j {
				want = 1
			}
			worst = math.Max(worst, math.Abs(s-want))
		}
	}
	t.Logf("largest deviation of the Gram matrix from the identity: %.2g", worst)
	if worst > 0.01 {
		t.Errorf("Gram matrix deviates from the identity by %.3g > 0.01", worst)
	}
}

func TestZernikeRejects(t *testing.T) {
	p := disk(t, 8)
	if Zernike(0, p, make([]float64, 64)) == nil {
		t.Error("accepted j = 0")
	}
	if Zernike(2, p, make([]float64, 63)) == nil {
		t.Error("accepted a short output")
	}
	if Zernike(5000, p, make([]float64, 64)) == nil {
		t.Error("accepted a radial order above the limit")
	}
}
