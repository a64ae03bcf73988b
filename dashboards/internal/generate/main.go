// Command generate writes the stillsky Grafana dashboards as JSON files.
// `go generate ./dashboards` runs it.
package main

import (
	"flag"
	"fmt"
	"os"
	"path/filepath"

	"stillsky/dashboards"
)

func main() {
	out := flag.String("out", "grafana", "directory to write the dashboard JSON files into")
	flag.Parse()
	if err := run(*out); err != nil {
		fmt.Fprintln(os.Stderr, err)
		os.Exit(1)
	}
}

func run(dir string) error {
	files, err := dashboards.Build()
	if err != nil {
		return err
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return fmt.Errorf("generate: out %s: %w", dir, err)
	}
	for _, f := range files {
		data, err := f.JSON()
		if err != nil {
			return err
		}
		if err := os.WriteFile(filepath.Join(dir, f.Name), data, 0o644); err != nil {
			return fmt.Errorf("generate: %w", err)
		}
	}
	return nil
}
