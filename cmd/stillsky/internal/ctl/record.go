package ctl

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"

	"stillsky/analysis"
	"stillsky/cmd/stillsky/internal/report"
	"stillsky/internal/atomicfile"
	"stillsky/internal/fits"
	"stillsky/internal/recording"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// RecordUsage is the record verb's synopsis.
const RecordUsage = "record --frames N FILE.fits"

// parseRecord reads the record verb's arguments: --frames N, then the file.
func parseRecord(args []string) (uint64, string, error) {
	fs := flag.NewFlagSet("record", flag.ContinueOnError)
	fs.SetOutput(io.Discard)
	frames := fs.Uint64("frames", 0, "frames to record")
	if err := fs.Parse(args); err != nil {
		return 0, "", fmt.Errorf("record: %v: %s", err, RecordUsage)
	}
	if *frames == 0 || fs.NArg() != 1 {
		return 0, "", fmt.Errorf("record: want --frames N (N >= 1) and one file: %s", RecordUsage)
	}
	return *frames, fs.Arg(0), nil
}

// Recorded summarises a finished recording.
type Recorded struct {
	Frames            int
	First, Last       uint64
	Duration          float64 // seconds from the first frame's readout to the last's
	HasReconstructor  bool
	SlopesPerFrame    int
	ActuatorsPerFrame int
	// Turbulence is estimated from the frames and stored in the file (nil, with
	// TurbulenceNote saying why, when it could not be).
	Turbulence     *analysis.TurbulenceEstimate
	TurbulenceNote string
}

// Record records frames frames from the daemon into the recording file at path,
// written atomically: an interrupted or failed recording leaves no file (and an
// existing one as it was). The daemon's loop is not affected by a failure here.
func Record(ctx context.Context, c stillskyv1.ControlServiceClient, frames uint64, path string, out io.Writer) error {
	var sum Recorded
	err := atomicfile.Write(path, func(w io.Writer) error {
		var err error
		sum, err = RecordTo(ctx, c, frames, w)
		return err
	})
	if err != nil {
		return fmt.Errorf("record %s: %w", path, oneLine(err))
	}
	fmt.Fprintf(out, "recorded %d frames (%d to %d, %.3f s; %d slopes, %d actuators a frame) to %s\n",
		sum.Frames, sum.First, sum.Last, sum.Duration, sum.SlopesPerFrame, sum.ActuatorsPerFrame, path)
	if te := sum.Turbulence; te != nil {
		fmt.Fprintf(out, "turbulence (stored in the file): r0 %.3f m at 500 nm towards the zenith, L0 %.3g m, wind %.1f m/s, τ0 %.2f ms\n",
			te.R0, te.L0, te.Wind, te.Tau0*1e3)
	} else {
		fmt.Fprintf(out, "turbulence not estimated: %s\n", sum.TurbulenceNote)
	}
	return nil
}

// RecordTo records into w, which must be an io.WriteSeeker when the daemon may
// end the recording early.
func RecordTo(ctx context.Context, c stillskyv1.ControlServiceClient, frames uint64, w io.Writer) (Recorded, error) {
	var sum Recorded
	ctx, cancel := context.WithCancel(ctx)
	defer cancel() // ends the daemon's side when writing fails
	stream, err := c.RecordTelemetry(ctx, &stillskyv1.RecordTelemetryRequest{FrameCount: frames})
	if err != nil {
		return sum, err
	}
	first, err := stream.Recv()
	if err != nil {
		return sum, err
	}
	h := first.GetHeader()
	if h == nil {
		return sum, errors.New("the daemon's recording did not start with a header")
	}
	var file []byte
	for uint64(len(file)) < h.GetReconstructorFileBytes() {
		m, err := stream.Recv()
		if err != nil {
			return sum, err
		}
		c, ok := m.GetContent().(*stillskyv1.RecordTelemetryResponse_ReconstructorChunk)
		if !ok {
			return sum, fmt.Errorf("the daemon sent %d of the %d bytes of the reconstructor file", len(file), h.GetReconstructorFileBytes())
		}
		file = append(file, c.ReconstructorChunk...)
	}
	rw, err := recording.Create(w, h, file, int(frames))
	if err != nil {
		return sum, err
	}
	sum.HasReconstructor = file != nil
	sum.SlopesPerFrame, sum.ActuatorsPerFrame = int(h.GetCamera().GetSlopeCount()), int(h.GetMirror().GetActuatorCount())
	var t0, t1 int64
	for uint64(rw.Frames()) < frames {
		m, err := stream.Recv()
		if err == io.EOF {
			return sum, fmt.Errorf("the daemon ended the recording after %d of %d frames", rw.Frames(), frames)
		}
		if err != nil {
			return sum, err
		}
		b := m.GetFrames()
		if b == nil || len(b.GetFrameNumbers()) == 0 {
			continue
		}
		if rw.Frames() == 0 {
			sum.First, t0 = b.FrameNumbers[0], b.ReadoutEndNs[0]
		}
		if err := rw.Append(b); err != nil {
			return sum, err
		}
		k := len(b.FrameNumbers) - 1
		sum.Last, t1 = b.FrameNumbers[k], b.ReadoutEndNs[k]
	}
	sum.Frames = rw.Frames()
	sum.Duration = float64(t1-t0) * 1e-9
	if err := rw.EndFrames(); err != nil {
		return sum, err
	}
	var after []*fits.HDU
	if f, ok := w.(io.ReadWriteSeeker); ok {
		st, err := study(f, sum.Frames*4*(sum.SlopesPerFrame+sum.ActuatorsPerFrame))
		if err == nil {
			err = st.TurbulenceErr
		}
		if err == nil {
			sum.Turbulence = &st.Turbulence
			after = append(after, st.TurbulenceHDU())
		} else {
			sum.TurbulenceNote = err.Error()
		}
	}
	return sum, rw.Close(after...)
}

// maxStudyBytes bounds the recordings whose turbulence the record verb
// estimates, as it reads the whole file back.
const maxStudyBytes = 1 << 30

// study reads the recording just written to f back and studies it; f is left
// at its end.
func study(f io.ReadWriteSeeker, size int) (*report.Study, error) {
	if size > maxStudyBytes {
		return nil, fmt.Errorf("a recording of %d MiB is too large to study here (stillsky report studies it)", size>>20)
	}
	end, err := f.Seek(0, io.SeekCurrent)
	if err != nil {
		return nil, err
	}
	defer f.Seek(end, io.SeekStart)
	if _, err := f.Seek(0, io.SeekStart); err != nil {
		return nil, err
	}
	hdus, err := fits.Read(io.LimitReader(f, end))
	if err != nil {
		return nil, err
	}
	rec, err := recording.FromHDUs(hdus)
	if err != nil {
		return nil, err
	}
	return report.NewStudy(rec)
}
