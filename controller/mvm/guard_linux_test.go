package mvm

import (
	"fmt"
	"math/rand/v2"
	"os"
	"testing"
	"unsafe"

	"golang.org/x/sys/unix"
)

// guardedVector returns n float32 in memory that ends (atEnd) or starts on
// a page boundary next to an inaccessible page, so a kernel that reads one
// element past x[n-1], or before x[0], faults.
func guardedVector(t *testing.T, n int, atEnd bool) []float32 {
	t.Helper()
	page := os.Getpagesize()
	data := roundUp(4*n, page)
	m, err := unix.Mmap(-1, 0, data+2*page, unix.PROT_READ|unix.PROT_WRITE, unix.MAP_PRIVATE|unix.MAP_ANONYMOUS)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = unix.Munmap(m) })
	for _, g := range [][]byte{m[:page], m[page+data:]} {
		if err := unix.Mprotect(g, unix.PROT_NONE); err != nil {
			t.Fatal(err)
		}
	}
	off := page
	if atEnd {
		off = page + data - 4*n
	}
	return unsafe.Slice((*float32)(unsafe.Pointer(&m[off])), n)
}

// No kernel reads x outside [c0, c1): x is put against an inaccessible page
// on either side, and the products must neither fault nor differ from Plain.
func TestKernelsStayInsideX(t *testing.T) {
	rng := rand.New(rand.NewPCG(17, 18))
	for _, v := range variants() {
		for _, sh := range [][2]int{{9, 47}, {37, 1001}, {12, 16}} {
			rows, cols := sh[0], sh[1]
			for _, atEnd := range []bool{false, true} {
				t.Run(fmt.Sprintf("%s/%dx%d/end=%v", v.name, rows, cols, atEnd), func(t *testing.T) {
					a := randomMatrix(rng, rows, cols)
					ref := a
					if v.opts.Precision == BFloat16 {
						ref = bf16Matrix(a)
					}
					m, err := New(a, v.opts)
					if err != nil {
						t.Fatal(err)
					}
					defer m.Close()
					x := guardedVector(t, cols, atEnd)
					copy(x, randomVector(rng, cols))
					plain := NewPlain(ref)
					for _, r := range [][2]int{{0, cols}, {cols - 1, cols}, {0, 1}, {cols / 3, cols}, {0, cols - cols/3}} {
						want, got := make([]float32, rows), make([]float32, rows)
						plain.MulVecCols(want, x, r[0], r[1])
						m.MulVecCols(got, x, r[0], r[1])
						for i := range got {
							if !closeTo(got[i], want[i], r[1]-r[0], absDot(ref, i, x, r[0], r[1]), 0) {
								t.Fatalf("columns [%d, %d): y[%d] = %v, Plain gives %v", r[0], r[1], i, got[i], want[i])
							}
						}
					}
				})
			}
		}
	}
}
