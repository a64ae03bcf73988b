package main

import (
	"fmt"
	"os"
	"runtime"

	"stillsky/internal/buildinfo"
)

func init() {
	register("version", "print the module version, the commit and the Go version of this binary", runVersion)
}

func runVersion(args []string) error {
	if err := parseFlags(newFlagSet("version"), args); err != nil {
		return err
	}
	fmt.Fprintf(os.Stdout, "stillsky %s\ncommit %s\n%s %s/%s\n", buildinfo.Version(), buildinfo.Commit(), runtime.Version(), runtime.GOOS, runtime.GOARCH)
	return nil
}
