//go:build !amd64

package atmosphere

func blend4Fast(dst, f0, f1, t0, t1 []float32, a0, a1, b0, b1 float32) int { return 0 }

func lerpAddFast(out []float64, src []float32, wl, wr float64) int { return 0 }

func waves6Fast(row []float64, add bool, base float64, x *[6][]float64, c *[6]float64) int { return 0 }
