package python

import (
	"bytes"
	"io/fs"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"stillsky/internal/testtool"
)

// TestGeneratedCodeIsCurrent regenerates the Python protocol code into a temporary
// directory with generate.sh and compares it with the committed files, so a .proto
// edited without regenerating fails CI, as the Go code's test does.
func TestGeneratedCodeIsCurrent(t *testing.T) {
	testtool.Require(t, "protoc", "protobuf-compiler")
	testtool.Require(t, "grpc_python_plugin", "protobuf-compiler-grpc")
	dependOnSources(t)
	dir := t.TempDir()
	if out, err := exec.Command("sh", "generate.sh", dir).CombinedOutput(); err != nil {
		t.Fatalf("generate.sh: %v\n%s", err, out)
	}
	list := func(root string) []string {
		files, err := filepath.Glob(filepath.Join(root, "stillsky", "v1", "*_pb2*.py*"))
		if err != nil {
			t.Fatal(err)
		}
		for i, f := range files {
			files[i] = filepath.Base(f)
		}
		slices.Sort(files)
		return files
	}
	committed, fresh := list("."), list(dir)
	if len(fresh) == 0 {
		t.Fatal("generate.sh wrote no files")
	}
	if !slices.Equal(committed, fresh) {
		t.Fatalf("generated files %v, committed %v: run clients/python/generate.sh and commit the result", fresh, committed)
	}
	for _, f := range committed {
		got, _ := os.ReadFile(filepath.Join("stillsky", "v1", f))
		want, _ := os.ReadFile(filepath.Join(dir, "stillsky", "v1", f))
		if !bytes.Equal(got, want) {
			t.Errorf("stillsky/v1/%s is stale: run clients/python/generate.sh and commit the result", f)
		}
	}
}

// TestPythonClient runs the client's unittest suite (tests/) with Debian's Python,
// against the stillsky binary built from this tree.
func TestPythonClient(t *testing.T) {
	if testing.Short() {
		t.Skip("skipping in -short mode: starts three benches and loop daemons")
	}
	py := python(t)
	dependOnSources(t)
	bin := filepath.Join(t.TempDir(), "stillsky")
	if out, err := exec.Command("go", "build", "-o", bin, "stillsky/cmd/stillsky").CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	cmd := exec.Command(py, "-m", "unittest", "discover", "-v", "-s", "tests", "-t", ".")
	cmd.Env = append(os.Environ(), "STILLSKY_BIN="+bin, "PYTHONDONTWRITEBYTECODE=1")
	out, err := cmd.CombinedOutput()
	if err != nil {
		t.Fatalf("python unittest: %v\n%s", err, out)
	}
	// unittest's verbose log on stderr names each test; keep it for -v.
	t.Logf("%s", out)
	if !strings.Contains(string(out), "\nOK") {
		t.Fatalf("unittest did not report OK:\n%s", out)
	}
}

// python returns a Python interpreter that imports the client's runtime (the
// Debian packages python3-grpcio, python3-protobuf, python3-numpy). Debian's
// interpreter comes first: another python3 on PATH may lack those packages.
func python(t *testing.T) string {
	for _, p := range []string{"/usr/bin/python3", "python3"} {
		if bin, err := exec.LookPath(p); err == nil {
			if exec.Command(bin, "-c", "import grpc, google.protobuf, numpy").Run() == nil {
				return bin
			}
		}
	}
	testtool.Missing(t, "python3 cannot import grpc, google.protobuf and numpy (Debian packages python3-grpcio, python3-protobuf, python3-numpy)")
	return ""
}

// dependOnSources reads every source file of the repository in the test's own
// process: go test caches a passing result until a file the test opened
// changes, and the work here happens in subprocesses (protoc, go build,
// python3) whose reads the cache cannot see.
func dependOnSources(t *testing.T) {
	t.Helper()
	err := filepath.WalkDir("../..", func(path string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		if d.IsDir() {
			if name := d.Name(); name == ".git" || name == "__pycache__" || name == "testdata" {
				return filepath.SkipDir
			}
			return nil
		}
		switch filepath.Ext(path) {
		case ".go", ".s", ".proto", ".py", ".pyi", ".sh", ".yaml", ".mod", ".sum":
			_, err = os.ReadFile(path)
		}
		return err
	})
	if err != nil {
		t.Fatal(err)
	}
}
