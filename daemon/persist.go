package daemon

import (
	"encoding/json"
	"errors"
	"io"
	"os"
	"path/filepath"
	"sync"

	"stillsky/controller"
	"stillsky/internal/atomicfile"
)

// Files in Config.StateDir. Each is replaced atomically, so a daemon killed at any
// moment restarts with the last committed reconstructor and settings; a
// calibration that did not finish never reaches the disk.
const (
	reconstructorFile = "reconstructor.fits"
	settingsFile      = "settings.json"
)

type settings struct {
	Gain float64 `json:"gain"`
	Leak float64 `json:"leak"`
}

var restoreMu sync.Mutex

// restoreOnce loads the committed state the first time the geometry is known.
func (d *Daemon) restoreOnce(g *geometry) {
	restoreMu.Lock()
	defer restoreMu.Unlock()
	if d.cfg.StateDir == "" || d.restored {
		return
	}
	d.restored = true
	// A daemon killed while writing leaves its temporary file behind; the
	// committed files were never touched, so the leftovers can go.
	if stale, err := filepath.Glob(filepath.Join(d.cfg.StateDir, ".*.tmp*")); err == nil {
		for _, f := range stale {
			os.Remove(f)
		}
	}
	if b, err := os.ReadFile(filepath.Join(d.cfg.StateDir, settingsFile)); err == nil {
		var s settings
		if err := json.Unmarshal(b, &s); err != nil {
			d.log.Warn("ignoring unreadable settings", "file", settingsFile, "err", err)
		} else if err := validGainLeak(s.Gain, s.Leak); err != nil {
			d.log.Warn("ignoring invalid settings", "file", settingsFile, "err", err)
		} else {
			d.paramsMu.Lock()
			d.gain, d.leak = s.Gain, s.Leak
			d.paramsMu.Unlock()
			d.m.gain.Set(s.Gain)
			d.m.leak.Set(s.Leak)
		}
	}
	f, err := os.Open(filepath.Join(d.cfg.StateDir, reconstructorFile))
	if errors.Is(err, os.ErrNotExist) {
		return
	}
	if err != nil {
		d.log.Warn("cannot open the committed reconstructor", "err", err)
		return
	}
	defer f.Close()
	r, err := controller.ReadReconstructor(f)
	if err != nil {
		d.log.Warn("ignoring the committed reconstructor", "err", err)
		return
	}
	if err := d.installReconstructor(r, false); err != nil {
		d.log.Warn("committed reconstructor does not fit the devices", "err", err)
		return
	}
	d.log.Info("restored committed reconstructor and settings", "dir", d.cfg.StateDir)
}

func (d *Daemon) persistReconstructor(r *controller.Reconstructor) {
	if d.cfg.StateDir == "" {
		return
	}
	err := atomicfile.Write(filepath.Join(d.cfg.StateDir, reconstructorFile), func(w io.Writer) error {
		return controller.WriteReconstructor(w, r)
	})
	if err != nil {
		d.log.Error("cannot commit the reconstructor", "err", err)
	}
}

// persistSettings writes the gain and leak; d.paramsMu must be held.
func (d *Daemon) persistSettings() {
	if d.cfg.StateDir == "" {
		return
	}
	b, _ := json.Marshal(settings{Gain: d.gain, Leak: d.leak})
	err := atomicfile.Write(filepath.Join(d.cfg.StateDir, settingsFile), func(w io.Writer) error {
		_, err := w.Write(b)
		return err
	})
	if err != nil {
		d.log.Error("cannot commit the settings", "err", err)
	}
}
