package controller

import (
	"os"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

func TestZZScratch(t *testing.T) {
	if os.Getenv("ZZ") == "" {
		t.Skip()
	}
	sc, _ := scenario.Load("xao")
	s, _ := bench.NewSystem(sc)
	s.SetTurbulence(false)
	s.SetNoise(false)
	ns, na := s.NumSlopes(), s.NumActuators()
	m := mat.NewDense(ns, na, nil)
	cmd := make([]float32, na)
	sl := make([]float32, ns)
	for j := 0; j < na; j++ {
		clear(cmd)
		cmd[j] = 1e-7
		s.Observe(cmd, sl)
		for i := range sl {
			m.Set(i, j, float64(sl[i])/1e-7)
		}
	}
	t0 := time.Now()
	var nm mat.SymDense
	nm.SymOuterK(1, m.T())
	buf := make([]float64, na*na)
	for i := 0; i < na; i++ {
		for j := 0; j < na; j++ {
			buf[i*na+j] = nm.At(i, j)
		}
	}
	t.Logf("MtM %v", time.Since(t0))
	t0 = time.Now()
	last := time.Now()
	tri, vecw, _ := eigenWork(na)
	vals, vec, err := symEigen(buf, na, func(d float64) {
		if time.Since(last) > 3*time.Second {
			t.Logf("  %.0f%% %v (tri end %.0f%%, vec end %.0f%%)", 100*d/(tri+vecw+2*float64(na)*float64(na)*float64(na)), time.Since(t0), 100*tri/(tri+vecw+2*float64(na*na)*float64(na)), 100*(tri+vecw)/(tri+vecw+2*float64(na*na)*float64(na)))
			last = time.Now()
		}
	})
	t.Logf("eig %v err %v; top %g, vals[3000] %g", time.Since(t0), err, vals[0], vals[3000])
	t0 = time.Now()
	var p mat.Dense
	p.Mul(vec, vec.T())
	t.Logf("dense gemm %v", time.Since(t0))
	_ = p
}
