// Command stillsky is the one binary of the project: the simulated bench, the loop
// daemon, the demo, the control client, the latency benchmark and the phase-screen
// writer. Each subcommand parses its flags, builds a configuration and calls a
// package; the logic lives in those packages.
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"os"
	"os/signal"
	"runtime"
	"sort"
	"syscall"
)

// subcommand is one verb of the binary. run receives the arguments after the verb
// and returns an error to be printed on one line.
type subcommand struct {
	summary string
	run     func(args []string) error
}

// subcommands is filled by the init functions of the files beside this one.
var subcommands = map[string]subcommand{}

func register(name, summary string, run func(args []string) error) {
	subcommands[name] = subcommand{summary: summary, run: run}
}

// aliases maps a command's former name to its current one. A former name still runs
// the command for one release, after a one-line notice on standard error; usage does
// not list it.
var aliases = map[string]string{}

func registerAlias(old, current string) {
	aliases[old] = current
}

// lookup resolves a command name, following a former name to the current one and
// writing the deprecation notice to w. It returns the current name.
func lookup(name string, w io.Writer) (string, subcommand, bool) {
	if current, ok := aliases[name]; ok {
		fmt.Fprintf(w, "stillsky: %q is deprecated and will be removed in the next release; use 'stillsky %s'\n", name, current)
		name = current
	}
	cmd, ok := subcommands[name]
	return name, cmd, ok
}

func usage() {
	fmt.Fprintln(os.Stderr, "usage: stillsky <command> [flags]\n\ncommands:")
	names := make([]string, 0, len(subcommands))
	for n := range subcommands {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, n := range names {
		fmt.Fprintf(os.Stderr, "  %-8s %s\n", n, subcommands[n].summary)
	}
	fmt.Fprintln(os.Stderr, "\nRun 'stillsky <command> -h' for the flags of a command.")
}

func main() {
	if len(os.Args) < 2 || os.Args[1] == "-h" || os.Args[1] == "--help" || os.Args[1] == "help" {
		usage()
		if len(os.Args) < 2 {
			os.Exit(2)
		}
		return
	}
	name, cmd, ok := lookup(os.Args[1], os.Stderr)
	if !ok {
		fmt.Fprintf(os.Stderr, "stillsky: unknown command %q (run 'stillsky help')\n", os.Args[1])
		os.Exit(2)
	}
	if err := cmd.run(os.Args[2:]); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return
		}
		fmt.Fprintf(os.Stderr, "stillsky %s: %v\n", name, err)
		os.Exit(1)
	}
}

// newFlagSet returns a flag set that reports errors instead of exiting, so that
// every subcommand fails the same way: one line and a non-zero exit.
func newFlagSet(name string) *flag.FlagSet {
	fs := flag.NewFlagSet("stillsky "+name, flag.ContinueOnError)
	return fs
}

// parseFlags parses args and refuses stray positional arguments.
func parseFlags(fs *flag.FlagSet, args []string) error {
	if err := fs.Parse(args); err != nil {
		return err
	}
	if fs.NArg() > 0 {
		return fmt.Errorf("unexpected argument %q", fs.Arg(0))
	}
	return nil
}

// newLogger returns a text logger on standard error at the named level.
func newLogger(level string) (*slog.Logger, error) {
	var l slog.Level
	if err := l.UnmarshalText([]byte(level)); err != nil {
		return nil, fmt.Errorf("log level %q: want debug, info, warn or error", level)
	}
	return slog.New(slog.NewTextHandler(os.Stderr, &slog.HandlerOptions{Level: l})), nil
}

// signalContext ends on SIGINT or SIGTERM, for a clean shutdown. A second
// signal, while the command winds down, ends the process at once.
func signalContext() (context.Context, context.CancelFunc) {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	go func() {
		<-ctx.Done()
		stop()
	}()
	return ctx, stop
}

// shareProcessWithSimulator raises GOMAXPROCS for a process that runs the
// simulated bench beside the loop (the latency benchmark, the design studies). The bench's
// physics keeps a processor busy for most of a frame, and a goroutine woken by
// the network waits for a free processor; with only one per core it may wait a
// whole scheduler quantum (10 ms). With more processors than cores the woken
// goroutine's thread runs at once and the kernel shares the cores instead, at
// the granularity of its own scheduler. A GOMAXPROCS environment variable wins.
func shareProcessWithSimulator() {
	if os.Getenv("GOMAXPROCS") == "" {
		runtime.GOMAXPROCS(max(4, 2*runtime.NumCPU()))
	}
}
