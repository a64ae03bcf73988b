package controller

import (
	"errors"
	"fmt"
	"io"
	"math"
	"time"

	"gonum.org/v1/gonum/mat"

	"stillsky/internal/fits"
)

// The reconstructor file is FITS (FITS Standard 4.0) with 64-bit float images:
//
//	primary   the control matrix R (NAXIS1 = slopes, NAXIS2 = actuators),
//	          keywords FILEVERS, SLOPECNT, ACTCNT, METHOD, NMODES, MODESKPT, NUNSEEN,
//	          DATE, BUNIT
//	SINGVAL   singular values of the inverted matrix (NAXIS1 = count)
//	MODES     actuators × modes (NAXIS1 = modes), svd and tikhonov only
//	MODALINV  modes × slopes (NAXIS1 = slopes), svd and tikhonov only
//	INTERACT  the interaction matrix, slopes × actuators (NAXIS1 = actuators), if known
//
// FILEVERS is the format version, 2 today. Version 1 files have no FILEVERS and name
// the slope and actuator counts NSLOPES and NACTU and the interaction matrix IMAT;
// the reader accepts both versions, the writer writes the current one. The
// optional keyword MODEBASE names the modal basis of MODES ("kl" for
// Karhunen–Loève modes, "mirror" for mirror modes); files without it, all files before it, use the
// singular modes of the interaction matrix.
const (
	extSingular = "SINGVAL"
	extModes    = "MODES"
	extInverse  = "MODALINV"
	keyVersion  = "FILEVERS"
	keyBasis    = "MODEBASE"
	fileVersion = 2
	fitsDate    = "2006-01-02T15:04:05.000000000" // FITS Standard 4.0 §4.4.2.1, UTC
)

// versionNames are the names that differ between versions of the file.
type versionNames struct {
	slopes, actuators, interaction string
}

// fileVersions maps each readable format version to its names.
var fileVersions = map[int64]versionNames{
	1:           {slopes: "NSLOPES", actuators: "NACTU", interaction: "IMAT"},
	fileVersion: {slopes: "SLOPECNT", actuators: "ACTCNT", interaction: "INTERACT"},
}

// ErrReconstructorFile is wrapped by every error that refuses a reconstructor file
// for its content (as opposed to a failure to read it).
var ErrReconstructorFile = errors.New("controller: not a valid reconstructor file")

// WriteReconstructor writes r as FITS to w.
func WriteReconstructor(w io.Writer, r *Reconstructor) error {
	hdus, err := reconstructorHDUs(r)
	if err != nil {
		return err
	}
	return fits.Write(w, hdus...)
}

// SaveReconstructor writes r as a FITS file at path, atomically (a temporary file
// in the same directory, synced and renamed).
func SaveReconstructor(path string, r *Reconstructor) error {
	hdus, err := reconstructorHDUs(r)
	if err != nil {
		return err
	}
	return fits.WriteFile(path, hdus...)
}

// ReadReconstructor reads and validates a reconstructor written by
// WriteReconstructor. Truncated or corrupt input, wrong shapes, non-finite
// entries and inconsistent factors are refused.
func ReadReconstructor(rd io.Reader) (*Reconstructor, error) {
	hdus, err := fits.Read(rd)
	if err != nil {
		return nil, fmt.Errorf("controller: reading reconstructor: %w", err)
	}
	return reconstructorFromHDUs(hdus)
}

// LoadReconstructor reads and validates the reconstructor file at path.
func LoadReconstructor(path string) (*Reconstructor, error) {
	hdus, err := fits.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("controller: reading reconstructor %s: %w", path, err)
	}
	r, err := reconstructorFromHDUs(hdus)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	return r, nil
}

func reconstructorHDUs(r *Reconstructor) ([]*fits.HDU, error) {
	if err := r.Validate(); err != nil {
		return nil, err
	}
	names := fileVersions[fileVersion]
	primary := denseHDU(r.Control)
	h := &primary.Header
	h.Set(keyVersion, fileVersion, "reconstructor file format version")
	h.Set(names.slopes, r.Slopes, "number of slopes (columns of R)")
	h.Set(names.actuators, r.Actuators, "number of actuators (rows of R)")
	h.Set("METHOD", r.Method.String(), "svd, tikhonov or matrix")
	h.Set("NMODES", r.NumModes(), "controllable modes (columns of MODES)")
	h.Set("MODESKPT", r.ModesKept, "singular modes kept in the inversion")
	h.Set("NUNSEEN", r.Unseen, "actuator dimensions projected out")
	if r.Basis != "" {
		h.Set(keyBasis, r.Basis, "modal basis of MODES (absent: singular modes)")
	}
	h.Set("BUNIT", "m/rad", "metres of surface per radian of slope")
	if !r.Created.IsZero() {
		h.Set("DATE", r.Created.UTC().Format(fitsDate), "creation time (UTC)")
	}
	h.Set("COMMENT", nil, "R = -M+ (control matrix: delta = R s nulls the slopes s)")
	hdus := []*fits.HDU{primary}
	if len(r.SingularValues) > 0 {
		hdus = append(hdus, named(&fits.HDU{Bitpix: -64, Axes: []int{len(r.SingularValues)}, Data: append([]float64(nil), r.SingularValues...)}, extSingular))
	}
	if r.Modes != nil {
		hdus = append(hdus, named(denseHDU(r.Modes), extModes), named(denseHDU(r.Inverse), extInverse))
	}
	if r.Interaction != nil {
		hdus = append(hdus, named(denseHDU(r.Interaction), names.interaction))
	}
	return hdus, nil
}

func named(h *fits.HDU, name string) *fits.HDU {
	h.Header.Set("EXTNAME", name, "")
	return h
}

// denseHDU stores m row-major: NAXIS1 = columns, NAXIS2 = rows.
func denseHDU(m *mat.Dense) *fits.HDU {
	r, c := m.Dims()
	data := make([]float64, 0, r*c)
	for i := 0; i < r; i++ {
		data = append(data, m.RawRowView(i)...)
	}
	return &fits.HDU{Bitpix: -64, Axes: []int{c, r}, Data: data}
}

func badFile(format string, args ...any) error {
	return fmt.Errorf("%w: "+format, append([]any{ErrReconstructorFile}, args...)...)
}

// hduMatrix returns the rows×cols matrix stored in h, checking type and shape.
func hduMatrix(name string, h *fits.HDU, rows, cols int) (*mat.Dense, error) {
	data, ok := h.Data.([]float64)
	if h.Bitpix != -64 || !ok {
		return nil, badFile("%s: BITPIX %d: want -64", name, h.Bitpix)
	}
	if len(h.Axes) != 2 || h.Axes[0] != cols || h.Axes[1] != rows {
		return nil, badFile("%s: axes %v: want [%d %d]", name, h.Axes, cols, rows)
	}
	for i, v := range data {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, badFile("%s: element (%d, %d) = %g: must be finite", name, i/cols, i%cols, v)
		}
	}
	return mat.NewDense(rows, cols, append([]float64(nil), data...)), nil
}

func headerInt(h *fits.Header, key string, min int64) (int, error) {
	v, ok := h.Int(key)
	if !ok {
		return 0, badFile("keyword %s: missing or not an integer", key)
	}
	if v < min || v > math.MaxInt32 {
		return 0, badFile("keyword %s = %d: must be in [%d, %d]", key, v, min, math.MaxInt32)
	}
	return int(v), nil
}

func reconstructorFromHDUs(hdus []*fits.HDU) (*Reconstructor, error) {
	if len(hdus) == 0 {
		return nil, badFile("no HDU")
	}
	p := hdus[0]
	version := int64(1) // version 1 has no version keyword
	if _, present := p.Header.Get(keyVersion); present {
		var ok bool
		if version, ok = p.Header.Int(keyVersion); !ok {
			return nil, badFile("keyword %s: not an integer", keyVersion)
		}
	}
	names, ok := fileVersions[version]
	if !ok {
		return nil, badFile("keyword %s = %d: this build reads versions 1 to %d", keyVersion, version, fileVersion)
	}
	r := &Reconstructor{}
	var err error
	if r.Slopes, err = headerInt(&p.Header, names.slopes, 1); err != nil {
		return nil, err
	}
	if r.Actuators, err = headerInt(&p.Header, names.actuators, 1); err != nil {
		return nil, err
	}
	nm, err := headerInt(&p.Header, "NMODES", 0)
	if err != nil {
		return nil, err
	}
	if r.ModesKept, err = headerInt(&p.Header, "MODESKPT", 0); err != nil {
		return nil, err
	}
	if r.Unseen, err = headerInt(&p.Header, "NUNSEEN", 0); err != nil {
		return nil, err
	}
	if b, ok := p.Header.String(keyBasis); ok {
		r.Basis = b
	}
	ms, ok := p.Header.String("METHOD")
	if !ok {
		return nil, badFile("keyword METHOD: missing or not a string")
	}
	if r.Method, err = ParseMethod(ms); err != nil {
		return nil, badFile("%v", err)
	}
	if ds, ok := p.Header.String("DATE"); ok {
		if r.Created, err = time.Parse(fitsDate, ds); err != nil {
			return nil, badFile("keyword DATE %q: want %s", ds, fitsDate)
		}
	}
	if r.Control, err = hduMatrix("control matrix", p, r.Actuators, r.Slopes); err != nil {
		return nil, err
	}
	seen := map[string]bool{}
	for i, h := range hdus[1:] {
		name, _ := h.Header.String("EXTNAME")
		if seen[name] {
			return nil, badFile("extension %d: EXTNAME %q appears twice", i+1, name)
		}
		seen[name] = true
		switch name {
		case extSingular:
			data, ok := h.Data.([]float64)
			if h.Bitpix != -64 || !ok || len(h.Axes) != 1 {
				return nil, badFile("%s: want a 1-axis BITPIX -64 image, got BITPIX %d axes %v", name, h.Bitpix, h.Axes)
			}
			r.SingularValues = append([]float64(nil), data...)
		case extModes:
			r.Modes, err = hduMatrix(name, h, r.Actuators, nm)
		case extInverse:
			r.Inverse, err = hduMatrix(name, h, nm, r.Slopes)
		case names.interaction:
			r.Interaction, err = hduMatrix(name, h, r.Slopes, r.Actuators)
		default:
			return nil, badFile("extension %d: EXTNAME %q: unknown", i+1, name)
		}
		if err != nil {
			return nil, err
		}
	}
	if (r.Modes != nil) != (nm > 0) {
		return nil, badFile("NMODES %d: want the %s and %s extensions exactly when NMODES > 0", nm, extModes, extInverse)
	}
	if err := r.Validate(); err != nil {
		return nil, fmt.Errorf("%w: %w", ErrReconstructorFile, err)
	}
	if r.Modes != nil {
		if d := factorMismatch(r); !(d <= 1e-9) {
			return nil, badFile("control matrix differs from -MODES·MODALINV by %.3g (relative)", d)
		}
	}
	return r, nil
}

// factorMismatch compares R·x with −Modes·(Inverse·x) for a fixed probe vector x
// (Freivalds' check, Freivalds 1977), O(size) instead of a matrix product.
func factorMismatch(r *Reconstructor) float64 {
	x := mat.NewVecDense(r.Slopes, nil)
	for j := 0; j < r.Slopes; j++ {
		x.SetVec(j, math.Cos(0.7*float64(j)+0.3))
	}
	var a, t, b mat.VecDense
	a.MulVec(r.Control, x)
	t.MulVec(r.Inverse, x)
	b.MulVec(r.Modes, &t)
	b.AddVec(&a, &b) // R·x + Modes·Inverse·x, zero when consistent
	scale := math.Max(mat.Norm(&a, 2), math.SmallestNonzeroFloat64)
	return mat.Norm(&b, 2) / scale
}
