//go:build !amd64

package atmosphere

func combine6Fast(dst []float32, add bool, src *[6][]float32, c *[6]float32) int { return 0 }

func taps6AddFast(out []float64, even, odd []float32, a, b *[3]float64) int { return 0 }

func waves6Fast(row []float64, add bool, base float64, x *[6][]float64, c *[6]float64) int { return 0 }
