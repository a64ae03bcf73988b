// Package atomicfile replaces a file so that a reader, or a process restarted after
// a crash, sees either the old content or the complete new one, never a part:
// write a temporary file in the same directory, fsync it, rename it over the
// target, fsync the directory.
package atomicfile

import (
	"fmt"
	"io"
	"os"
	"path/filepath"
)

// Write replaces path with what fill writes. On any error the target is untouched
// and the temporary file removed.
func Write(path string, fill func(w io.Writer) error) (err error) {
	dir := filepath.Dir(path)
	f, err := os.CreateTemp(dir, "."+filepath.Base(path)+".tmp*")
	if err != nil {
		return err
	}
	tmp := f.Name()
	defer func() {
		if err != nil {
			f.Close()
			os.Remove(tmp)
		}
	}()
	if err = fill(f); err != nil {
		return err
	}
	if err = f.Chmod(0o644); err != nil {
		return err
	}
	if err = f.Sync(); err != nil {
		return err
	}
	if err = f.Close(); err != nil {
		return err
	}
	if err = os.Rename(tmp, path); err != nil {
		return fmt.Errorf("replacing %s: %w", path, err)
	}
	// Syncing the directory makes the rename durable; some file systems refuse to
	// sync a directory, which does not make the file any less complete.
	if d, derr := os.Open(dir); derr == nil {
		d.Sync()
		d.Close()
	}
	return nil
}
