package scenario

import (
	"os"
	"path/filepath"
	"reflect"
	"testing"
)

// FuzzParse feeds Parse arbitrary YAML, seeded with the built-in scenarios. It
// must never panic, and a scenario it accepts must survive its own YAML
// encoding: Parse(s.YAML()) gives back an equal scenario (the contract of
// Scenario.YAML), so nothing accepted escapes validation by a value that only
// the first reading let through.
func FuzzParse(f *testing.F) {
	files, err := filepath.Glob(filepath.Join("builtin", "*.yaml"))
	if err != nil || len(files) == 0 {
		f.Fatalf("no built-in scenarios to seed from: %v", err)
	}
	for _, name := range files {
		b, err := os.ReadFile(name)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(b)
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		s, err := Parse(data)
		if err != nil {
			if s != nil {
				t.Fatalf("Parse returned a scenario with the error %v", err)
			}
			return
		}
		out, err := s.YAML()
		if err != nil {
			t.Fatalf("accepted scenario does not encode: %v", err)
		}
		back, err := Parse(out)
		if err != nil {
			t.Fatalf("accepted scenario's own YAML is refused: %v\n%s", err, out)
		}
		if !reflect.DeepEqual(s, back) {
			t.Fatalf("scenario changed through its YAML:\n%+v\n%+v", s, back)
		}
	})
}
