//go:build amd64

package centroid

import "golang.org/x/sys/cpu"

// windows8AVX2 is the kernel contract of kernel.go for 8×8-pixel windows:
// idx holds n window indices, frame the rows whose first pixel is frame
// pixel base, stride the bytes of one frame row. Each window's eight rows
// are eight 256-bit registers from the raw load to the sums; the counters
// come back in flags as saturated, dark, dead rows, hot.
//
//go:noescape
func windows8AVX2(frame *uint16, base int, stride uintptr, idx *int32, n int, par *params8,
	cal *float32, start *int32, ref *float32, slopes *float32, flags *[4]int)

func windowsAVX2(c *Calibration, frame []uint16, base int, idx []int32, slopes []float32, f *Flags) {
	var n [4]int
	windows8AVX2(&frame[0], base, uintptr(2*c.layout.Side()), &idx[0], len(idx), c.par8,
		&c.cal[0], &c.start[0], &c.ref[0], &slopes[0], &n)
	f.Saturated += n[0]
	f.Dark += n[1]
	f.DeadRows += n[2]
	f.Hot += n[3]
}

func archKernels() []kernel {
	if cpu.X86.HasAVX2 && cpu.X86.HasFMA {
		return []kernel{{name: "avx2", pixels: 8, avx2: true}}
	}
	return nil
}
