package main

import (
	"errors"
	"os"

	"stillsky/cmd/stillsky/internal/report"
)

func init() {
	register("report", "write an HTML report with plots of a telemetry recording: report FILE.fits --out DIR", runReport)
}

func runReport(args []string) error {
	fs := newFlagSet("report")
	out := fs.String("out", "", "directory for index.html and its PNG plots (created if missing)")
	// The recording may come before the flags, as the usage shows.
	var file string
	if len(args) > 0 && len(args[0]) > 0 && args[0][0] != '-' {
		file, args = args[0], args[1:]
	}
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if file == "" && fs.NArg() == 1 {
		file = fs.Arg(0)
	} else if fs.NArg() > 0 {
		return errors.New("report takes one recording: report FILE.fits --out DIR")
	}
	if file == "" || *out == "" {
		return errors.New("report needs a recording and --out: report FILE.fits --out DIR")
	}
	return report.Write(file, *out, os.Stdout)
}
