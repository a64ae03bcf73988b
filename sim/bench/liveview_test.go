package bench_test

import (
	"context"
	"encoding/json"
	"fmt"
	"image"
	"image/png"
	"io"
	"net/http"
	"strings"
	"testing"
	"time"

	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/sim/bench"
	"stillsky/sim/scenario"
)

// luma is the Rec. 601 luma of a pixel, 0–255. The PSF colour scale brightens
// monotonically, so luma orders pixels by intensity.
func luma(img image.Image, x, y int) float64 {
	r, g, b, _ := img.At(x, y).RGBA()
	return (0.299*float64(r) + 0.587*float64(g) + 0.114*float64(b)) / 257
}

func getPNG(t *testing.T, url string) image.Image {
	t.Helper()
	resp, err := http.Get(url)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	if resp.StatusCode != http.StatusOK || resp.Header.Get("Content-Type") != "image/png" {
		t.Fatalf("GET %s: %s, %s", url, resp.Status, resp.Header.Get("Content-Type"))
	}
	img, err := png.Decode(resp.Body)
	if err != nil {
		t.Fatalf("GET %s: %v", url, err)
	}
	return img
}

// TestPSFImage serves a free-running bench with its live view handler and reads
// /psf.png back with the standard library's PNG decoder. With the calibration
// source (no turbulence, flat mirror) the PSF is the diffraction pattern of the
// pupil: its peak is on axis and equals the diffraction-limited peak (the top
// of the colour scale), and beyond 5 λ/D the Airy rings are below 10⁻³ of the
// peak (Born & Wolf, Principles of Optics, §8.5.2: ring maxima 0.0175, 0.0042,
// 0.0016, 0.0008; from memory), darker than the middle of the five-decade
// scale. On sky the short-exposure peak of the uncorrected 1.5 m pupil is
// far below the diffraction-limited one, so the centre is not at the top.
func TestPSFImage(t *testing.T) {
	scn, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	b, err := bench.NewServer(scn, bench.Options{})
	if err != nil {
		t.Fatal(err)
	}
	l, err := bench.Listen(bench.Addrs{Camera: "127.0.0.1:0", Metrics: "127.0.0.1:0"})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- b.Serve(ctx, l, b.RegisterLiveView) }()
	t.Cleanup(func() {
		cancel()
		if err := <-done; err != nil {
			t.Error(err)
		}
	})
	url := "http://" + l.Metrics.Addr().String() + "/psf.png"
	top := [3]uint32{255 * 257, 252 * 257, 236 * 257}

	for _, c := range []struct {
		source       stillskyv1.Source
		diffraction  bool
		wantMinLumas int // distinct luma values the image must show at least
	}{
		{stillskyv1.Source_SOURCE_SKY, false, 20},
		{stillskyv1.Source_SOURCE_CALIBRATION, true, 20},
	} {
		t.Run(c.source.String(), func(t *testing.T) {
			if _, err := b.SetSource(ctx, &stillskyv1.SetSourceRequest{Source: c.source}); err != nil {
				t.Fatal(err)
			}
			// The new source shows from the next frame on.
			var img image.Image
			var cx, cy int
			atTop := false
			for deadline := time.Now().Add(10 * time.Second); time.Now().Before(deadline); time.Sleep(50 * time.Millisecond) {
				img = getPNG(t, url)
				w := img.Bounds().Dx()
				cx, cy = w/2, img.Bounds().Dy()/2
				r, g, bl, _ := img.At(cx, cy).RGBA()
				atTop = [3]uint32{r, g, bl} == top
				if atTop == c.diffraction && luma(img, cx, cy) > 0 {
					break
				}
			}
			bnd := img.Bounds()
			if bnd.Dx() < 256 || bnd.Dx() != bnd.Dy() {
				t.Fatalf("PSF image %v: want square, >= 256 px", bnd)
			}
			if atTop != c.diffraction {
				t.Errorf("centre pixel at the top of the scale: %v, want %v", atTop, c.diffraction)
			}
			lumas := map[int]bool{}
			for y := 0; y < bnd.Dy(); y += 2 {
				for x := 0; x < bnd.Dx(); x += 2 {
					lumas[int(luma(img, x, y))] = true
				}
			}
			if len(lumas) < c.wantMinLumas {
				t.Errorf("%d distinct brightness levels, want >= %d", len(lumas), c.wantMinLumas)
			}
			if !c.diffraction {
				return
			}
			// The corners are tens of λ/D off axis (a pixel is λ/(2D)).
			// The middle of the scale, 10^-2.5 of the peak, is halfway between its
			// deep-blue and orange stops: (131, 72, 78).
			mid := 0.299*131 + 0.587*72 + 0.114*78
			for _, p := range [][2]int{{0, 0}, {bnd.Dx() - 1, 0}, {0, bnd.Dy() - 1}, {bnd.Dx() - 1, bnd.Dy() - 1}} {
				if l := luma(img, p[0], p[1]); l >= mid {
					t.Errorf("corner %v luma %.0f, want < %.0f (below 10^-2.5 of the peak)", p, l, mid)
				}
			}
		})
	}
}

// TestContrastServed runs the small scenario's bench free-running with the
// calibration source (the PSF is the pupil's diffraction pattern) and reads
// the raw contrast from /contrast.json and /metrics: at 2 and 5 λ/D it is the
// level of the obstructed pupil's Airy rings, between 10⁻⁴ and 10⁻¹ of the
// peak (Born & Wolf, Principles of Optics, §8.5.2, ring maxima 0.0175 and
// below; the 30 % obstruction moves energy into the rings), and the two agree.
func TestContrastServed(t *testing.T) {
	scn, err := scenario.Load("small")
	if err != nil {
		t.Fatal(err)
	}
	b, err := bench.NewServer(scn, bench.Options{StrehlEvery: 5})
	if err != nil {
		t.Fatal(err)
	}
	l, err := bench.Listen(bench.Addrs{Camera: "127.0.0.1:0", Metrics: "127.0.0.1:0"})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- b.Serve(ctx, l, b.RegisterLiveView) }()
	t.Cleanup(func() {
		cancel()
		if err := <-done; err != nil {
			t.Error(err)
		}
	})
	if _, err := b.SetSource(ctx, &stillskyv1.SetSourceRequest{Source: stillskyv1.Source_SOURCE_CALIBRATION}); err != nil {
		t.Fatal(err)
	}
	base := "http://" + l.Metrics.Addr().String()
	var got struct {
		Separations []int     `json:"separations_lambda_over_d"`
		Contrast    []float64 `json:"contrast"`
	}
	deadline := time.Now().Add(20 * time.Second)
	for len(got.Contrast) == 0 {
		if time.Now().After(deadline) {
			t.Fatal("no contrast within 20 s")
		}
		time.Sleep(200 * time.Millisecond)
		resp, err := http.Get(base + "/contrast.json")
		if err != nil {
			t.Fatal(err)
		}
		err = json.NewDecoder(resp.Body).Decode(&got)
		resp.Body.Close()
		if err != nil {
			t.Fatal(err)
		}
	}
	// The small scenario's 32-sample pupil padded twice gives a field of 16 λ/D:
	// 2, 5 and 10 λ/D are inside, 20 is not.
	if fmt.Sprint(got.Separations) != "[2 5 10]" {
		t.Fatalf("separations %v, want [2 5 10]", got.Separations)
	}
	for i, c := range got.Contrast[:2] {
		if !(c > 1e-4 && c < 1e-1) {
			t.Errorf("contrast at %d λ/D = %.3g, want the Airy rings' 1e-4 … 1e-1", got.Separations[i], c)
		}
	}
	resp, err := http.Get(base + "/metrics")
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	body, _ := io.ReadAll(resp.Body)
	if !strings.Contains(string(body), `stillsky_bench_raw_contrast_ratio{separation_lambda_over_d="5"}`) {
		t.Errorf("metrics lack the contrast at 5 λ/D:\n%s", body)
	}
}
