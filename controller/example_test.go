package controller_test

import (
	"fmt"
	"math"
	"time"

	"gonum.org/v1/gonum/mat"

	"stillsky/controller"
)

// interaction is the interaction matrix of a toy system: three actuators in a
// row and a sensor that measures the two differences between neighbours, 1000
// rad of slope per metre of surface. Piston (all three equal) is invisible to
// it.
func interaction() *mat.Dense {
	return mat.NewDense(2, 3, []float64{
		-1e3, 1e3, 0,
		0, -1e3, 1e3,
	})
}

// A reconstructor by truncated SVD of a measured interaction matrix: the two
// seen modes are kept, and the unseen piston is projected out of every command.
func ExampleBuildReconstructor() {
	r, err := controller.BuildReconstructor(interaction(), controller.ReconstructorConfig{
		Method:  controller.MethodTruncatedSVD,
		Created: time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC),
	})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("%d slopes × %d actuators, %d modes kept, %d unseen\n", r.Slopes, r.Actuators, r.ModesKept, r.Unseen)
	fmt.Printf("singular values %.4g\n", r.SingularValues)
	// Output:
	// 2 slopes × 3 actuators, 2 modes kept, 1 unseen
	// singular values [1732 1000]
}

// Loop.Step closes the loop on the toy system: each frame's slopes are a fixed
// tilt of the wavefront plus what the mirror's last command adds (a simulated
// mirror with no delay beyond the frame), and the integrator, at gain 0.5 and no
// leak, halves the residual every frame.
func ExampleLoop_Step() {
	r, err := controller.BuildReconstructor(interaction(), controller.ReconstructorConfig{Created: time.Unix(0, 0)})
	if err != nil {
		fmt.Println(err)
		return
	}
	p, err := controller.NewParams(controller.ParamsConfig{Reconstructor: r, Gain: 0.5, Stroke: 1e-6, StrehlWavelength: 1.65e-6})
	if err != nil {
		fmt.Println(err)
		return
	}
	loop, err := controller.NewLoop(p)
	if err != nil {
		fmt.Println(err)
		return
	}
	tilt := []float64{1e-4, 1e-4} // rad: a 100 nm step between neighbours
	slopes, cmd := make([]float32, 2), make([]float32, 3)
	d := interaction()
	for k := 1; k <= 4; k++ {
		for i := range slopes {
			v := tilt[i]
			for j, c := range cmd {
				v += d.At(i, j) * float64(c)
			}
			slopes[i] = float32(v)
		}
		res := loop.Step(slopes, cmd) // writes the new command into cmd
		fmt.Printf("frame %d: residual slopes %.3g µrad rms, command %+.2f nm\n", k, res.SlopeRMS*1e6, nm(cmd))
	}
	// Output:
	// frame 1: residual slopes 100 µrad rms, command [+50.00 +0.00 -50.00] nm
	// frame 2: residual slopes 50 µrad rms, command [+75.00 +0.00 -75.00] nm
	// frame 3: residual slopes 25 µrad rms, command [+87.50 +0.00 -87.50] nm
	// frame 4: residual slopes 12.5 µrad rms, command [+93.75 +0.00 -93.75] nm
}

// nm converts a command to nanometres, rounded to 0.01 nm (and −0 to 0) so that
// the printed digits do not depend on the multiply kernel's summation order.
func nm(v []float32) []float64 {
	out := make([]float64, len(v))
	for i, x := range v {
		out[i] = math.Round(float64(x)*1e11)/100 + 0
	}
	return out
}
