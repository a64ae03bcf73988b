package controller_test

import (
	"bytes"
	"encoding/binary"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"

	"stillsky/controller"
)

// fuzzStroke is the stroke limit of the fuzzed loop, metres.
const fuzzStroke = 1e-6

// fuzzLoop is a loop with a fixed random reconstructor of 24 slopes and 10
// actuators; its values are large enough that big slopes saturate the stroke
// and float32-range slopes overflow the reconstruction.
func fuzzLoop(t testing.TB) *controller.Loop {
	t.Helper()
	const ns, na = 24, 10
	rng := rand.New(rand.NewPCG(3, 5))
	m := mat.NewDense(na, ns, nil)
	for i := range na {
		for j := range ns {
			m.Set(i, j, rng.NormFloat64())
		}
	}
	r, err := controller.ReconstructorFromMatrix(m, time.Time{})
	if err != nil {
		t.Fatal(err)
	}
	p, err := controller.NewParams(controller.ParamsConfig{Reconstructor: r, Gain: 1.5, Leak: 0.01, Stroke: fuzzStroke, StrehlWavelength: 1.65e-6})
	if err != nil {
		t.Fatal(err)
	}
	l, err := controller.NewLoop(p)
	if err != nil {
		t.Fatal(err)
	}
	return l
}

// frameSeed packs float32 slopes as the fuzzer's input bytes.
func frameSeed(v ...float32) []byte {
	b := make([]byte, 4*len(v))
	for i, x := range v {
		binary.LittleEndian.PutUint32(b[4*i:], math.Float32bits(x))
	}
	return b
}

// FuzzStep feeds Loop.Step arbitrary float32 bit patterns: the input is cut
// into frames of Slopes() values, the remainder making one frame of the wrong
// length, and split at a fuzzed point into two chunks for StepChunk/Finish. No
// input may panic, and every command, accepted or rejected, must be finite and
// within the stroke (docs/hot-path.md: nothing non-finite ever reaches the
// mirror). A rejected frame must leave the last good command.
func FuzzStep(f *testing.F) {
	ns := 24
	ones := make([]float32, ns)
	for i := range ones {
		ones[i] = 1e-6
	}
	f.Add(frameSeed(ones...), uint8(7))
	big := bytes.Repeat(frameSeed(math.MaxFloat32), ns)
	f.Add(big, uint8(0))
	f.Add(frameSeed(float32(math.NaN()), 1, 2), uint8(1))
	f.Add(append(frameSeed(ones...), frameSeed(float32(math.Inf(-1)))...), uint8(23))
	f.Fuzz(func(t *testing.T, data []byte, split uint8) {
		l := fuzzLoop(t)
		ns, na := l.Params().Slopes(), l.Params().Actuators()
		cmd := make([]float32, na)
		last := make([]float32, na)
		slopes := make([]float32, 0, len(data)/4)
		for i := 0; i+4 <= len(data); i += 4 {
			slopes = append(slopes, math.Float32frombits(binary.LittleEndian.Uint32(data[i:])))
		}
		check := func(res controller.Result, how string) {
			for i, v := range cmd {
				if !(v >= -fuzzStroke && v <= fuzzStroke) {
					t.Fatalf("%s: command %d = %g: not finite within ±%g", how, i, v, fuzzStroke)
				}
			}
			if !res.OK() {
				for i := range cmd {
					if cmd[i] != last[i] {
						t.Fatalf("%s rejected (%v) but the command changed at %d: %g → %g", how, res.Status, i, last[i], cmd[i])
					}
				}
			}
			if res.OK() && (math.IsNaN(res.SlopeRMS) || math.IsNaN(res.ResidualRMS) || math.IsNaN(res.Strehl)) {
				t.Fatalf("%s accepted with a NaN estimate: %+v", how, res)
			}
			copy(last, cmd)
		}
		for len(slopes) >= ns {
			frame := slopes[:ns]
			slopes = slopes[ns:]
			check(l.Step(frame, cmd), "Step")
			c := int(split) % (ns + 1)
			l.StepChunk(frame, 0, c)
			l.StepChunk(frame, c, ns)
			check(l.Finish(cmd), "StepChunk+Finish")
		}
		res := l.Step(slopes, cmd)
		if res.Status != controller.StatusSlopesLength {
			t.Fatalf("a frame of %d slopes (want %d): status %v, want slopes_length", len(slopes), ns, res.Status)
		}
		check(res, "short Step")
	})
}

// reconstructorSeeds are valid reconstructor files: a truncated-SVD one with
// every extension, and a bare matrix.
func reconstructorSeeds(t testing.TB) [][]byte {
	rng := rand.New(rand.NewPCG(1, 2))
	im := mat.NewDense(6, 4, nil)
	for i := range 6 {
		for j := range 4 {
			im.Set(i, j, rng.NormFloat64())
		}
	}
	svd, err := controller.BuildReconstructor(im, controller.ReconstructorConfig{Method: controller.MethodTruncatedSVD})
	if err != nil {
		t.Fatal(err)
	}
	bare, err := controller.ReconstructorFromMatrix(mat.NewDense(2, 3, []float64{1, 2, 3, 4, 5, 6}), time.Date(2026, 1, 2, 3, 4, 5, 0, time.UTC))
	if err != nil {
		t.Fatal(err)
	}
	var out [][]byte
	for _, r := range []*controller.Reconstructor{svd, bare} {
		var b bytes.Buffer
		if err := controller.WriteReconstructor(&b, r); err != nil {
			t.Fatal(err)
		}
		out = append(out, b.Bytes())
	}
	return out
}

// FuzzReadReconstructor feeds ReadReconstructor arbitrary bytes (seeded with
// valid files and their truncations). It must never panic; whatever it accepts
// must validate, write back, read back with the same geometry, and make a
// parameter set.
func FuzzReadReconstructor(f *testing.F) {
	// Only the small file seeds the fuzzer: its throughput collapses on inputs of
	// many 2880-byte records (the SVD file has ten).
	b := reconstructorSeeds(f)[1]
	f.Add(b)
	f.Add(b[:2880])
	f.Fuzz(func(t *testing.T, data []byte) {
		r, err := controller.ReadReconstructor(bytes.NewReader(data))
		if err != nil {
			return
		}
		if err := r.Validate(); err != nil {
			t.Fatalf("accepted a reconstructor that does not validate: %v", err)
		}
		var b bytes.Buffer
		if err := controller.WriteReconstructor(&b, r); err != nil {
			t.Fatalf("accepted a reconstructor that cannot be written: %v", err)
		}
		back, err := controller.ReadReconstructor(&b)
		if err != nil {
			t.Fatalf("written reconstructor does not read back: %v", err)
		}
		if back.Slopes != r.Slopes || back.Actuators != r.Actuators || back.Method != r.Method || back.ModesKept != r.ModesKept {
			t.Fatalf("read back %d×%d %v %d modes, wrote %d×%d %v %d", back.Slopes, back.Actuators, back.Method, back.ModesKept,
				r.Slopes, r.Actuators, r.Method, r.ModesKept)
		}
		p, err := controller.NewParams(controller.ParamsConfig{Reconstructor: r, Gain: 0.4, Stroke: 1e-6, StrehlWavelength: 1.65e-6})
		if err == nil {
			p.Close()
		}
	})
}
