package optics

import "fmt"

// FFT2 is the 2-D discrete Fourier transform of an n×n row-major complex grid,
// X[ky,kx] = Σ x[y,x] exp(−2πi (kx·x + ky·y)/n), unnormalised, computed in place as
// 1-D transforms of the rows and then of the columns. It owns its buffers, so a
// transform allocates nothing; it is not safe for concurrent use.
type FFT2 struct {
	n   int
	fft *plan
	col []complex128
}

// NewFFT2 returns a transform for n×n grids (n >= 1).
func NewFFT2(n int) (*FFT2, error) {
	if n < 1 {
		return nil, fmt.Errorf("optics: FFT size %d: must be >= 1", n)
	}
	return &FFT2{n: n, fft: newPlan(n), col: make([]complex128, colBlock*n)}, nil
}

// Len returns n.
func (f *FFT2) Len() int { return f.n }

// Rows transforms rows [from, to) of data (length n*n) in place.
func (f *FFT2) Rows(data []complex128, from, to int) {
	n := f.n
	for y := from; y < to; y++ {
		f.fft.transform(data[y*n : (y+1)*n])
	}
}

// colBlock columns are gathered together, so that each row of the grid is visited
// once per block rather than once per column.
const colBlock = 8

// Columns transforms columns [from, to) of data (length n*n) in place.
func (f *FFT2) Columns(data []complex128, from, to int) {
	n := f.n
	for x0 := from; x0 < to; x0 += colBlock {
		w := min(colBlock, to-x0)
		for y := 0; y < n; y++ {
			row := data[y*n+x0 : y*n+x0+w]
			for c, v := range row {
				f.col[c*n+y] = v
			}
		}
		for c := 0; c < w; c++ {
			f.fft.transform(f.col[c*n : (c+1)*n])
		}
		for y := 0; y < n; y++ {
			row := data[y*n+x0 : y*n+x0+w]
			for c := range row {
				row[c] = f.col[c*n+y]
			}
		}
	}
}

// Transform computes the 2-D transform of data in place. Only the first rows rows
// may hold non-zero values (the others must be zero), which saves their row
// transforms when a small pupil is zero-padded.
func (f *FFT2) Transform(data []complex128, rows int) {
	if len(data) != f.n*f.n {
		panic(fmt.Sprintf("optics: FFT2 data length %d, want %d", len(data), f.n*f.n))
	}
	f.Rows(data, 0, rows)
	f.Columns(data, 0, f.n)
}
