package demo

import (
	"fmt"
	"strings"

	"stillsky/sim/bench"
)

// atSeparations picks the contrast curve's values at bench.ContrastSeparations
// (those within it), nil for no curve.
func atSeparations(curve []float64) map[int]float64 {
	if len(curve) == 0 {
		return nil
	}
	out := make(map[int]float64)
	for _, s := range bench.ContrastSeparations {
		if s < len(curve) {
			out[s] = curve[s]
		}
	}
	return out
}

// contrastText formats contrast at separations as "prefix5 λ/D 1.2e-03, …",
// or "" when there is none.
func contrastText(c map[int]float64, prefix string) string {
	var parts []string
	for _, s := range bench.ContrastSeparations {
		if v, ok := c[s]; ok {
			parts = append(parts, fmt.Sprintf("%d λ/D %.1e", s, v))
		}
	}
	if len(parts) == 0 {
		return ""
	}
	return prefix + strings.Join(parts, ", ")
}
