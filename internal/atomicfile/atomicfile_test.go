package atomicfile

import (
	"errors"
	"io"
	"os"
	"path/filepath"
	"testing"
)

func TestWriteReplacesOrKeeps(t *testing.T) {
	path := filepath.Join(t.TempDir(), "state.json")
	if err := Write(path, func(w io.Writer) error { _, err := io.WriteString(w, "old"); return err }); err != nil {
		t.Fatal(err)
	}
	boom := errors.New("boom")
	err := Write(path, func(w io.Writer) error {
		io.WriteString(w, "partial")
		return boom
	})
	if !errors.Is(err, boom) {
		t.Fatalf("error %v, want %v", err, boom)
	}
	got, _ := os.ReadFile(path)
	if string(got) != "old" {
		t.Fatalf("a failed write changed the file to %q", got)
	}
	left, _ := filepath.Glob(filepath.Join(filepath.Dir(path), ".*tmp*"))
	if len(left) != 0 {
		t.Fatalf("temporary files left behind: %v", left)
	}
}
