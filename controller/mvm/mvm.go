package mvm

import "fmt"

// Matrix is a dense row-major float32 matrix: element (i, j) is Data[i*Stride+j].
type Matrix struct {
	Rows, Cols int
	// Stride is the distance between the starts of consecutive rows, Stride >= Cols.
	Stride int
	Data   []float32
}

// NewMatrix returns a zeroed rows×cols matrix with Stride = cols.
// It returns an error when a dimension is not positive.
func NewMatrix(rows, cols int) (*Matrix, error) {
	if rows <= 0 || cols <= 0 {
		return nil, fmt.Errorf("mvm: matrix shape %d×%d: both dimensions must be positive", rows, cols)
	}
	return &Matrix{Rows: rows, Cols: cols, Stride: cols, Data: make([]float32, rows*cols)}, nil
}

// Row returns row i as a slice of length Cols that aliases Data.
func (m *Matrix) Row(i int) []float32 {
	return m.Data[i*m.Stride : i*m.Stride+m.Cols]
}

// Multiplier computes matrix–vector products with a matrix it owns.
// Implementations are built off the hot path; their methods allocate nothing.
type Multiplier interface {
	// Rows and Cols give the shape of the matrix A.
	Rows() int
	Cols() int
	// MulVec stores y = A·x. It panics unless len(y) == Rows() and len(x) == Cols().
	MulVec(y, x []float32)
	// MulVecCols adds the contribution of columns [c0, c1) to y:
	// y[i] += Σ_{j=c0}^{c1-1} A[i,j]·x[j]. It is the seam for pipelined
	// reconstruction, where x arrives in chunks. It panics unless len(y) == Rows(),
	// len(x) == Cols() and 0 <= c0 <= c1 <= Cols().
	MulVecCols(y, x []float32, c0, c1 int)
	// Close releases resources such as worker goroutines. The Multiplier must not
	// be used after Close.
	Close()
}

// Plain is the portable reference kernel: a straightforward row-by-row dot product
// in float32 arithmetic. Faster kernels are tested against it.
type Plain struct{ a *Matrix }

// NewPlain returns a Plain multiplier for a. The matrix is not copied.
func NewPlain(a *Matrix) *Plain { return &Plain{a: a} }

// Rows returns the number of rows of A.
func (p *Plain) Rows() int { return p.a.Rows }

// Cols returns the number of columns of A.
func (p *Plain) Cols() int { return p.a.Cols }

// MulVec stores y = A·x.
func (p *Plain) MulVec(y, x []float32) {
	checkShape(p.a, y, x, 0, p.a.Cols)
	for i := range y {
		y[i] = dot(p.a.Row(i), x)
	}
}

// MulVecCols adds A[:, c0:c1]·x[c0:c1] into y.
func (p *Plain) MulVecCols(y, x []float32, c0, c1 int) {
	checkShape(p.a, y, x, c0, c1)
	xs := x[c0:c1]
	for i := range y {
		y[i] += dot(p.a.Row(i)[c0:c1], xs)
	}
}

// Close does nothing: Plain holds no resources.
func (p *Plain) Close() {}

func dot(a, b []float32) float32 {
	var s float32
	b = b[:len(a)]
	for j, v := range a {
		s += v * b[j]
	}
	return s
}

func checkShape(a *Matrix, y, x []float32, c0, c1 int) {
	if len(y) != a.Rows || len(x) != a.Cols {
		panic(fmt.Sprintf("mvm: shape mismatch: A is %d×%d, len(y)=%d, len(x)=%d", a.Rows, a.Cols, len(y), len(x)))
	}
	if c0 < 0 || c0 > c1 || c1 > a.Cols {
		panic(fmt.Sprintf("mvm: column range [%d, %d) outside [0, %d)", c0, c1, a.Cols))
	}
}
