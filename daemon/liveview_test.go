package daemon_test

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"image"
	"image/png"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"testing"
	"time"

	"google.golang.org/grpc"

	"stillsky/daemon"
	"stillsky/internal/rpc"
	"stillsky/internal/testtool"
	stillskyv1 "stillsky/proto/stillsky/v1"
	"stillsky/sim/bench"
)

// startLiveRig starts a bench and a loop on the small scenario with the loop's
// BenchURL pointing at the bench's live view (the rig links them), calibrates and
// closes the loop.
func startLiveRig(t *testing.T, opt bench.Options) *loopRig {
	t.Helper()
	r := startRig(t, "small", opt, daemon.Config{})
	r.calibrate(t)
	if _, err := r.client.CloseLoop(context.Background(), &stillskyv1.CloseLoopRequest{}); err != nil {
		t.Fatal(err)
	}
	r.waitFrames(t, 100)
	return r
}

func decodePNG(t *testing.T, url string) image.Image {
	t.Helper()
	body := fetch(t, url)
	img, err := png.Decode(bytes.NewReader(body))
	if err != nil {
		t.Fatalf("%s: %v", url, err)
	}
	return img
}

// colours counts the pixels of each colour.
func colours(img image.Image) map[[4]uint32]int {
	out := map[[4]uint32]int{}
	b := img.Bounds()
	for y := b.Min.Y; y < b.Max.Y; y++ {
		for x := b.Min.X; x < b.Max.X; x++ {
			r, g, bl, a := img.At(x, y).RGBA()
			out[[4]uint32{r, g, bl, a}]++
		}
	}
	return out
}

// TestSnapshots reads the live view's PNG snapshots and JSON feed from a closed
// loop and checks them against the devices' own description (their Describe
// answers, asked here directly of the bench): one coloured cell per actuator
// the mirror drives, one cell per valid subaperture of the camera. The PNGs are
// decoded with the standard library's decoder.
func TestSnapshots(t *testing.T) {
	r := startLiveRig(t, bench.Options{Lockstep: true})
	ctx := context.Background()
	mir, err := stillskyv1.NewMirrorServiceClient(dialDevice(t, r.rig.Devices.Mirror)).Describe(ctx, &stillskyv1.MirrorServiceDescribeRequest{})
	if err != nil {
		t.Fatal(err)
	}
	cam, err := stillskyv1.NewCameraServiceClient(dialDevice(t, r.rig.Devices.Camera)).Describe(ctx, &stillskyv1.CameraServiceDescribeRequest{})
	if err != nil {
		t.Fatal(err)
	}
	base := "http://" + r.d.MetricsAddr()

	var live struct {
		Geometry *struct {
			ID              int   `json:"id"`
			Subapertures    int   `json:"subapertures"`
			Valid           []int `json:"valid_subapertures"`
			ActuatorsAcross int   `json:"actuators_across"`
			Cells           []int `json:"actuator_cells"`
		} `json:"geometry"`
		GeometryID int  `json:"geometry_id"`
		PSF        bool `json:"psf"`
		Sample     struct {
			Frame    uint64    `json:"frame"`
			State    string    `json:"state"`
			Slopes   []float32 `json:"slopes"`
			Commands []float32 `json:"commands"`
		} `json:"sample"`
	}
	if err := json.Unmarshal(fetch(t, base+"/live.json"), &live); err != nil {
		t.Fatal(err)
	}
	g := live.Geometry
	if g == nil {
		t.Fatal("live.json: no geometry on the first request")
	}
	if g.Subapertures != int(cam.GetSubapertures()) || len(g.Valid) != len(cam.GetValidSubapertures()) ||
		g.ActuatorsAcross != int(mir.GetActuatorsAcross()) || len(g.Cells) != int(mir.GetActuatorCount()) {
		t.Errorf("live.json geometry %d subapertures (%d valid), %d actuators across (%d driven); devices describe %d (%d), %d (%d)",
			g.Subapertures, len(g.Valid), g.ActuatorsAcross, len(g.Cells),
			cam.GetSubapertures(), len(cam.GetValidSubapertures()), mir.GetActuatorsAcross(), mir.GetActuatorCount())
	}
	seen := map[int]bool{}
	for _, c := range g.Cells {
		seen[c] = true
	}
	if len(seen) != len(g.Cells) {
		t.Errorf("actuator positions map to %d distinct grid cells for %d actuators", len(seen), len(g.Cells))
	}
	if s := live.Sample; s.State != "closed" || s.Frame == 0 || len(s.Slopes) != int(cam.GetSlopeCount()) || len(s.Commands) != int(mir.GetActuatorCount()) {
		t.Errorf("live.json sample: state %q, frame %d, %d slopes, %d commands", s.State, s.Frame, len(s.Slopes), len(s.Commands))
	}
	if !live.PSF {
		t.Error("live.json: psf false with a bench URL configured")
	}
	live.Geometry = nil
	if err := json.Unmarshal(fetch(t, base+"/live.json?geometry="+strconv.Itoa(live.GeometryID)), &live); err != nil {
		t.Fatal(err)
	}
	if live.Geometry != nil {
		t.Error("live.json sent the geometry the client already holds")
	}

	for _, c := range []struct {
		path          string
		across, cells int
		minColours    int
	}{
		// Closed-loop commands differ from actuator to actuator: many shades.
		{"/snapshot/commands.png", g.ActuatorsAcross, len(g.Cells), 10},
		// Background, cell, arrow colour.
		{"/snapshot/slopes.png", g.Subapertures, len(g.Valid), 3},
	} {
		t.Run(c.path, func(t *testing.T) {
			img := decodePNG(t, base+c.path)
			b := img.Bounds()
			if b.Dx() != b.Dy() || b.Dx()%c.across != 0 || b.Dx() < 200 {
				t.Errorf("%s: %v: want a square of %d whole cells, >= 200 px", c.path, b, c.across)
				return
			}
			cols := colours(img)
			if len(cols) < c.minColours {
				t.Errorf("%s: %d colours, want >= %d", c.path, len(cols), c.minColours)
			}
			// Count the cells whose corner (inside the gap) is not the background.
			s := b.Dx() / c.across
			bg := img.At(0, 0)
			drawn := 0
			for row := range c.across {
				for col := range c.across {
					if img.At(col*s+s/4, row*s+s/4) != bg {
						drawn++
					}
				}
			}
			if drawn != c.cells {
				t.Errorf("%s: %d cells drawn, want %d (the devices' description)", c.path, drawn, c.cells)
			}
		})
	}

	psf := decodePNG(t, base+"/snapshot/psf.png")
	if psf.Bounds().Dx() < 256 || len(colours(psf)) < 10 {
		t.Errorf("relayed PSF: %v, %d colours", psf.Bounds(), len(colours(psf)))
	}
	var contrast struct {
		Separations []int     `json:"separations_lambda_over_d"`
		Contrast    []float64 `json:"contrast"`
	}
	if err := json.Unmarshal(fetch(t, base+"/snapshot/contrast.json"), &contrast); err != nil || len(contrast.Separations) != len(contrast.Contrast) {
		t.Errorf("relayed contrast: %v, %+v", err, contrast)
	}
	page := string(fetch(t, base+"/"))
	js := string(fetch(t, base+"/assets/live.js"))
	if !bytes.Contains([]byte(page), []byte(`src="assets/live.js"`)) || !bytes.Contains([]byte(js), []byte("live.json")) {
		t.Error("the page does not load its script, or the script does not poll live.json")
	}
}

// TestPSFRelayStatus checks the answers of /snapshot/psf.png without a usable
// bench: 404 with no bench URL configured, 502 when the bench does not answer.
func TestPSFRelayStatus(t *testing.T) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	closed := "http://" + l.Addr().String()
	l.Close()
	for _, c := range []struct {
		benchURL string
		want     int
	}{
		{"", http.StatusNotFound},
		{closed, http.StatusBadGateway},
	} {
		t.Run(fmt.Sprintf("bench URL %q", c.benchURL), func(t *testing.T) {
			d, err := daemon.New(daemon.Config{CameraAddr: "127.0.0.1:1", MirrorAddr: "127.0.0.1:1", ListenAddr: "127.0.0.1:0", MetricsAddr: "127.0.0.1:0", BenchURL: c.benchURL})
			if err != nil {
				t.Fatal(err)
			}
			ctx, cancel := context.WithCancel(context.Background())
			done := make(chan error, 1)
			go func() { done <- d.Run(ctx) }()
			resp, err := http.Get("http://" + d.MetricsAddr() + "/snapshot/psf.png")
			if err != nil {
				t.Fatal(err)
			}
			resp.Body.Close()
			if resp.StatusCode != c.want {
				t.Errorf("bench URL %q: %s, want %d", c.benchURL, resp.Status, c.want)
			}
			// Before the devices are described there is nothing to draw.
			resp, err = http.Get("http://" + d.MetricsAddr() + "/snapshot/commands.png")
			if err != nil {
				t.Fatal(err)
			}
			resp.Body.Close()
			if resp.StatusCode != http.StatusServiceUnavailable {
				t.Errorf("commands.png without devices: %s, want 503", resp.Status)
			}
			cancel()
			<-done
		})
	}
}

// TestLiveViewInChromium loads the live view in headless Chromium twice during a
// closed-loop run and checks the screenshots: the page has drawn (more than 1 %
// of the pixels differ from the page background) and it moves (the two
// screenshots differ).
func TestLiveViewInChromium(t *testing.T) {
	if testing.Short() {
		t.Skip("headless browser run takes ~15 s")
	}
	chromium := testtool.Require(t, "chromium", "chromium")
	// Lockstep keeps the loop closed however the browser loads the machine: a
	// free-running loop starved of CPU sees frames late and may trip.
	r := startLiveRig(t, bench.Options{Lockstep: true})
	url := "http://" + r.d.MetricsAddr() + "/"
	dir := t.TempDir()
	shots := make([]image.Image, 2)
	for i := range shots {
		if i > 0 {
			r.waitFrames(t, 500)
		}
		file := filepath.Join(dir, "shot"+strconv.Itoa(i)+".png")
		shots[i] = screenshot(t, chromium, dir, url, file)
	}
	if st := r.status(t); st.GetState() != stillskyv1.LoopState_LOOP_STATE_CLOSED {
		t.Errorf("loop %v after the run (last interlock %q), want closed", st.GetState(), st.GetLastInterlock())
	}
	b := shots[0].Bounds()
	bg := shots[0].At(b.Max.X-1, b.Max.Y-1)
	drawn, changed := 0, 0
	for y := b.Min.Y; y < b.Max.Y; y++ {
		for x := b.Min.X; x < b.Max.X; x++ {
			if shots[0].At(x, y) != bg {
				drawn++
			}
			if shots[0].At(x, y) != shots[1].At(x, y) {
				changed++
			}
		}
	}
	total := b.Dx() * b.Dy()
	t.Logf("%d×%d screenshots: %.1f %% drawn, %.2f %% changed", b.Dx(), b.Dy(), 100*float64(drawn)/float64(total), 100*float64(changed)/float64(total))
	if drawn*100 < total {
		t.Errorf("screenshot blank: %d of %d pixels differ from the background", drawn, total)
	}
	if changed*1000 < total {
		t.Errorf("screenshots barely differ: %d of %d pixels", changed, total)
	}
}

// screenshot runs headless Chromium on url and decodes its screenshot. The
// flags keep it off the network (the machine has no outside access) and give it
// virtual time to run a few polls of the page before the picture is taken.
func screenshot(t *testing.T, chromium, dir, url, file string) image.Image {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	cmd := exec.CommandContext(ctx, chromium,
		"--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
		"--disable-background-networking", "--disable-component-update", "--disable-sync",
		"--disable-dev-shm-usage", "--hide-scrollbars",
		"--user-data-dir="+filepath.Join(dir, "profile"),
		"--window-size=1000,800", "--virtual-time-budget=3000",
		"--screenshot="+file, url)
	out, err := cmd.CombinedOutput()
	if err != nil {
		t.Fatalf("chromium: %v\n%s", err, out)
	}
	f, err := os.Open(file)
	if err != nil {
		t.Fatalf("chromium wrote no screenshot: %v\n%s", err, out)
	}
	defer f.Close()
	img, err := png.Decode(f)
	if err != nil {
		t.Fatal(err)
	}
	return img
}

func dialDevice(t *testing.T, addr string) *grpc.ClientConn {
	t.Helper()
	c, err := rpc.Dial(addr)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { c.Close() })
	return c
}
