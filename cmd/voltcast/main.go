// Command voltcast is the command-line tool of voltcast: offline work on the battery
// model and lab CSV files (simulate, forecast, plan a charge, fit, estimate, project
// lifetime), and a client of a running voltcastd server.
//
// Each subcommand lives in its own file and registers itself in [commands] from an init
// function; main only dispatches, and turns an error into one line on stderr and a
// non-zero exit status.
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"math"
	"os"
	"os/signal"
	"sort"
	"strings"
	"syscall"
)

// command is one subcommand of the tool.
type command struct {
	summary string
	// run executes the subcommand with its arguments (after the subcommand name).
	// Output goes to stdout, progress and diagnostics to stderr.
	run func(ctx context.Context, args []string, stdout, stderr io.Writer) error
}

var commands = map[string]command{}

// register adds a subcommand; it panics on a duplicate name (a programming error).
func register(name string, c command) {
	if _, dup := commands[name]; dup {
		panic("voltcast: duplicate command " + name)
	}
	commands[name] = c
}

// errUsage marks an error whose message already explains correct use.
var errUsage = errors.New("usage")

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	code := run(ctx, os.Args[1:], os.Stdout, os.Stderr)
	stop()
	os.Exit(code)
}

// run dispatches to a subcommand and returns the process exit code.
func run(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 || args[0] == "-h" || args[0] == "--help" || args[0] == "help" {
		usage(stderr)
		if len(args) == 0 {
			return 2
		}
		return 0
	}
	c, ok := commands[args[0]]
	if !ok {
		fmt.Fprintf(stderr, "voltcast: unknown command %q (run voltcast help)\n", args[0])
		return 2
	}
	if err := c.run(ctx, args[1:], stdout, stderr); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return 0
		}
		// One line, whatever the error: callers script against this tool.
		msg := strings.ReplaceAll(err.Error(), "\n", "; ")
		fmt.Fprintf(stderr, "voltcast %s: %s\n", args[0], msg)
		if errors.Is(err, errUsage) {
			return 2
		}
		return 1
	}
	return 0
}

func usage(w io.Writer) {
	fmt.Fprintln(w, "usage: voltcast <command> [flags]")
	fmt.Fprintln(w)
	fmt.Fprintln(w, "Current is positive when it leaves the battery (discharge), negative on charge.")
	fmt.Fprintln(w, "Charge advice is a model estimate: the cell maker's datasheet, local codes and")
	fmt.Fprintln(w, "licensed practice always take precedence.")
	fmt.Fprintln(w)
	fmt.Fprintln(w, "commands:")
	names := make([]string, 0, len(commands))
	for n := range commands {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, n := range names {
		fmt.Fprintf(w, "  %-14s %s\n", n, commands[n].summary)
	}
}

// newFlagSet returns a flag set for a subcommand that reports errors instead of exiting.
func newFlagSet(name string, stderr io.Writer) *flag.FlagSet {
	fs := flag.NewFlagSet("voltcast "+name, flag.ContinueOnError)
	fs.SetOutput(stderr)
	return fs
}

// parseFlags parses args and wraps a parse failure as a usage error.
func parseFlags(fs *flag.FlagSet, args []string) error {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return err
		}
		return fmt.Errorf("%w: %v", errUsage, err)
	}
	if fs.NArg() > 0 {
		return fmt.Errorf("%w: unexpected argument %q", errUsage, fs.Arg(0))
	}
	return nil
}

// flagGiven reports whether the flag name was set on the command line. Flags whose
// default NaN means "not given" use it to refuse a NaN typed in.
func flagGiven(fs *flag.FlagSet, name string) bool {
	given := false
	fs.Visit(func(f *flag.Flag) { given = given || f.Name == name })
	return given
}

// checkGivenNaN returns a usage error if any of the named flags was given as NaN; each
// value pairs with the name at the same index.
func checkGivenNaN(fs *flag.FlagSet, names []string, values ...float64) error {
	for i, n := range names {
		if math.IsNaN(values[i]) && flagGiven(fs, n) {
			return fmt.Errorf("%w: --%s must be a number, got NaN", errUsage, n)
		}
	}
	return nil
}

// writeFileFrom creates (or truncates) the file at path and writes w's content to it,
// for the plots the subcommands write.
func writeFileFrom(path string, w io.WriterTo) error {
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	if _, err := w.WriteTo(f); err != nil {
		f.Close()
		return err
	}
	return f.Close()
}
