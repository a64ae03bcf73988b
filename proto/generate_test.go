package proto

import (
	"bytes"
	"os"
	"os/exec"
	"path/filepath"
	"testing"
)

// TestGeneratedCodeIsCurrent regenerates the Go code with the pinned tools into a
// temporary directory and compares it with the committed files, so a .proto edited
// without `go generate ./proto/...` fails CI. It also runs the STANDARD lint rules.
func TestGeneratedCodeIsCurrent(t *testing.T) {
	if testing.Short() {
		t.Skip("skipping in -short mode: building buf from the module proxy takes minutes on a fresh machine")
	}
	buf := []string{"run", "github.com/bufbuild/buf/cmd/buf@v1.75.0"}
	run := func(args ...string) {
		t.Helper()
		cmd := exec.Command("go", append(append([]string{}, buf...), args...)...)
		var out bytes.Buffer
		cmd.Stdout, cmd.Stderr = &out, &out
		if err := cmd.Run(); err != nil {
			t.Fatalf("buf %v: %v\n%s", args, err, out.String())
		}
	}
	run("lint")
	dir := t.TempDir()
	run("generate", "-o", dir)
	committed, err := filepath.Glob("stillsky/v1/*.pb.go")
	if err != nil || len(committed) == 0 {
		t.Fatalf("no committed generated files found (%v)", err)
	}
	fresh, _ := filepath.Glob(filepath.Join(dir, "stillsky/v1/*.pb.go"))
	if len(fresh) != len(committed) {
		t.Fatalf("generation produced %d files, %d are committed", len(fresh), len(committed))
	}
	for _, f := range committed {
		want, err := os.ReadFile(filepath.Join(dir, f))
		if err != nil {
			t.Fatalf("regenerated %s: %v", f, err)
		}
		got, _ := os.ReadFile(f)
		if !bytes.Equal(got, want) {
			t.Errorf("%s is stale: run `go generate ./proto/...` and commit the result", f)
		}
	}
}
