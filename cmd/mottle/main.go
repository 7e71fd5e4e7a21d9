// Command mottle measures full-field displacement, deformation gradient,
// strain and rotation from speckle images of a loaded specimen.
//
// Usage:
//
//	mottle <command> [flags]
//
// Run "mottle help" for the list of commands and "mottle <command> --help"
// for the flags of one.
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"os/signal"
	"strings"
	"syscall"

	"golang.org/x/term"
)

// env is what a command may touch of the outside world, so commands can be
// run from tests with buffers in place of the terminal.
type env struct {
	stdout, stderr io.Writer
	// tty is true when stderr is a terminal: progress bars are drawn only then.
	tty bool
}

// command is one subcommand of mottle.
type command struct {
	name    string
	summary string
	run     func(ctx context.Context, e *env, args []string) error
}

func commands() []command {
	return []command{
		{"demo", "render the built-in demo specimen, analyse it and compare with the truth", runDemo},
		{"synth", "render exact synthetic speckle images and their true motion", runSynth},
		{"analyze", "correlate a reference and a deformed image and write a results folder", runAnalyze},
		{"map", "re-render a PNG map of any quantity from a results folder", runMap},
		{"export", "write more result formats (CSV, VTS, JSON, …) from a results folder", runExport},
		{"series", "analyse a series of frames: curves, gauges, material properties, report", runSeries},
		{"target", "write a printable calibration target and its geometry", runTarget},
		{"pattern", "write a printable random speckle pattern", runPattern},
		{"calibrate", "calibrate the camera and its lens distortion from target images", runCalibrate},
		{"stereo", "measure 3D shape, displacement and surface strain with two calibrated cameras", runStereo},
		{"serve", "run the HTTP service and the browser preview", runServe},
		{"token", "add, list and revoke the service's bearer tokens (principals, projects, roles)", runToken},
		{"worker", "compute jobs from a NATS JetStream backend shared with mottle serve", runWorker},
		{"version", "print the version", runVersion},
	}
}

// errUsage marks an error already explained by a usage message.
var errUsage = errors.New("usage")

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	e := &env{stdout: os.Stdout, stderr: os.Stderr, tty: term.IsTerminal(int(os.Stderr.Fd()))}
	os.Exit(run(ctx, e, os.Args[1:]))
}

// run dispatches to a subcommand and returns the process exit code:
// 0 success, 1 failure, 2 usage error.
func run(ctx context.Context, e *env, args []string) int {
	if len(args) == 0 || args[0] == "help" || args[0] == "-h" || args[0] == "--help" {
		if len(args) > 1 {
			return run(ctx, e, []string{args[1], "--help"})
		}
		usage(e.stdout)
		if len(args) == 0 {
			return 2
		}
		return 0
	}
	for _, c := range commands() {
		if c.name != args[0] {
			continue
		}
		err := c.run(ctx, e, args[1:])
		switch {
		case err == nil, errors.Is(err, flag.ErrHelp):
			return 0
		case errors.Is(err, errUsage):
			return 2
		case errors.As(err, new(usageError)):
			fmt.Fprintf(e.stderr, "mottle %s: %v\n", c.name, err)
			return 2
		default:
			fmt.Fprintf(e.stderr, "mottle %s: %v\n", c.name, err)
			return 1
		}
	}
	fmt.Fprintf(e.stderr, "mottle: unknown command %q\n\n", args[0])
	usage(e.stderr)
	return 2
}

func usage(w io.Writer) {
	fmt.Fprintln(w, "Mottle: digital image correlation for materials testing.")
	fmt.Fprintln(w, "\nUsage: mottle <command> [flags]\n\nCommands:")
	cmds := commands()
	width := 0
	for _, c := range cmds {
		width = max(width, len(c.name))
	}
	for _, c := range cmds {
		fmt.Fprintf(w, "  %-*s  %s\n", width, c.name, c.summary)
	}
	fmt.Fprintln(w, "\nRun \"mottle <command> --help\" for the flags of a command.")
}

// newFlags returns a flag set whose --help prints the synopsis, a
// description and the flags to e.stdout; a command without flags gets no
// "Flags:" heading, and an empty synopsis leaves no trailing space.
func newFlags(e *env, name, synopsis, description string) *flag.FlagSet {
	fs := flag.NewFlagSet("mottle "+name, flag.ContinueOnError)
	fs.SetOutput(e.stderr)
	fs.Usage = func() {
		line := strings.TrimSpace("mottle " + name + " " + synopsis)
		fmt.Fprintf(fs.Output(), "Usage: %s\n\n%s\n", line, description)
		n := 0
		fs.VisitAll(func(*flag.Flag) { n++ })
		if n > 0 {
			fmt.Fprint(fs.Output(), "\nFlags:\n")
			fs.PrintDefaults()
		}
	}
	return fs
}

// parseFlags parses args, printing help to stdout for --help and turning
// other parse errors into errUsage.
func parseFlags(e *env, fs *flag.FlagSet, args []string) error {
	for _, a := range args {
		if a == "-h" || a == "-help" || a == "--help" {
			fs.SetOutput(e.stdout)
			fs.Usage()
			return flag.ErrHelp
		}
	}
	if err := fs.Parse(args); err != nil {
		return errUsage
	}
	return nil
}

// parseArgs is parseFlags for commands that take positional arguments: flags
// may come before, between or after them (as in "mottle series DIR --ext
// …"), and "--" ends the flags. It returns the positional arguments in
// order.
func parseArgs(e *env, fs *flag.FlagSet, args []string) ([]string, error) {
	var pos []string
	for i, a := range args {
		if a == "--" {
			break
		}
		if a == "-h" || a == "-help" || a == "--help" {
			return nil, parseFlags(e, fs, args[i:i+1])
		}
	}
	for {
		if err := fs.Parse(args); err != nil {
			return nil, errUsage
		}
		rest := fs.Args()
		if used := len(args) - len(rest); used > 0 && args[used-1] == "--" {
			return append(pos, rest...), nil
		}
		if len(rest) == 0 {
			return pos, nil
		}
		pos, args = append(pos, rest[0]), rest[1:]
	}
}

// noArgs parses flags for a command that takes no positional argument and
// refuses stray ones, which would otherwise hide the flags after them.
func noArgs(e *env, fs *flag.FlagSet, name string, args []string) error {
	pos, err := parseArgs(e, fs, args)
	if err != nil {
		return err
	}
	if len(pos) > 0 {
		fmt.Fprintf(e.stderr, "mottle %s: unexpected argument %q (every input is given by a flag; run \"mottle %s --help\")\n", name, pos[0], name)
		return errUsage
	}
	return nil
}

// usageError is a malformed command line: run prints it and exits 2.
type usageError struct{ err error }

func (u usageError) Error() string { return u.err.Error() }
func (u usageError) Unwrap() error { return u.err }

// usagef returns a usageError with a formatted message.
func usagef(format string, a ...any) error { return usageError{fmt.Errorf(format, a...)} }
