package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"math"
	"os"
	"sluice/internal/usermsg"
	"sluice/pkg/campaign"
	"strconv"
	"strings"
)

// parseInterspersed parses flags that may come before or after the
// positional arguments, and returns the positional arguments.
func parseInterspersed(fs *flag.FlagSet, args []string) ([]string, error) {
	var pos []string
	for {
		if err := fs.Parse(args); err != nil {
			return nil, err
		}
		rest := fs.Args()
		if len(rest) == 0 {
			return pos, nil
		}
		pos = append(pos, rest[0])
		args = rest[1:]
	}
}

// givenFlags returns the names of the flags given on the command line (as
// opposed to those left at their defaults), so that a flag overrides a
// config value only when the user typed it.
func givenFlags(fs *flag.FlagSet) map[string]bool {
	set := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	return set
}

// parseShape parses "Z,Y,X".
func parseShape(s string) ([3]int, error) {
	var out [3]int
	parts := strings.Split(s, ",")
	if len(parts) != 3 {
		return out, fmt.Errorf("bad shape %q (want Z,Y,X)", s)
	}
	for i, p := range parts {
		n, err := strconv.Atoi(strings.TrimSpace(p))
		if err != nil || n <= 0 {
			return out, fmt.Errorf("bad shape %q (want three positive integers Z,Y,X)", s)
		}
		out[i] = n
	}
	return out, nil
}

// exit codes
const (
	exitOK       = 0
	exitFailure  = 1
	exitBadInput = 2
)

// The command being run and the arguments the user gave it: what
// userMessage keeps however it is spelt.
var (
	runningCommand string
	userArgs       []string
)

// userMessage is msg as the user reads it: one line, without the prefixes
// of sluice's Go packages (usermsg.Clean), the command's name and the
// user's own arguments (file names …) left as they are.
func userMessage(msg string) string {
	return usermsg.Clean(msg, runningCommand, userArgs...)
}

// fail prints a one-line error and returns the exit status.
func fail(code int, format string, a ...any) int {
	fmt.Fprintln(os.Stderr, "sluice: "+userMessage(fmt.Sprintf(format, a...)))
	return code
}

// parseOrUsage parses a command's flags. With -h or --help it prints the
// command's help to stdout and returns exitOK; a bad flag gets one line on
// stderr (an unknown flag with the closest flag name) and exitBadInput.
// ok is true when the command should go on with the positional arguments.
func parseOrUsage(fs *flag.FlagSet, args []string) (pos []string, code int, ok bool) {
	// The flag package would print its own error and the whole flag
	// list on every mistake; we say it in one line instead.
	fs.SetOutput(io.Discard)
	fs.Usage = func() {}
	pos, err := parseInterspersed(fs, args)
	if err == nil {
		return pos, exitOK, true
	}
	if errors.Is(err, flag.ErrHelp) {
		printHelp(stdout, fs)
		return nil, exitOK, false
	}
	fmt.Fprintln(os.Stderr, flagError(fs, err))
	return nil, exitBadInput, false
}

// printHelp writes a command's help: the synopsis line, one sentence,
// notes, and its flags with their defaults.
func printHelp(w io.Writer, fs *flag.FlagSet) {
	h, ok := helpFor(fs.Name())
	if !ok {
		h = help{synopsis: fs.Name() + " [flags]"}
	}
	fmt.Fprintf(w, "usage: sluice %s\n", h.synopsis)
	if h.sentence != "" {
		fmt.Fprintf(w, "\n%s\n", h.sentence)
	}
	if h.notes != "" {
		fmt.Fprintf(w, "\n%s\n", h.notes)
	}
	n := 0
	fs.VisitAll(func(*flag.Flag) { n++ })
	if n > 0 {
		fmt.Fprintln(w, "\nflags:")
		fs.SetOutput(w)
		fs.PrintDefaults()
		fs.SetOutput(io.Discard)
	}
}

// flagError turns an error of the flag package into the one line we
// print: flags written with two dashes, an unknown flag with the closest
// defined name, and where to find the list.
func flagError(fs *flag.FlagSet, err error) string {
	prefix := "sluice " + fs.Name() + ": "
	msg := err.Error()
	if name, ok := strings.CutPrefix(msg, "flag provided but not defined: "); ok {
		name = strings.TrimLeft(name, "-")
		if near := closestFlag(fs, name); near != "" {
			return fmt.Sprintf("%sunknown flag --%s; did you mean --%s?", prefix, name, near)
		}
		return fmt.Sprintf("%sunknown flag --%s (sluice help %s lists the flags)", prefix, name, fs.Name())
	}
	// "invalid value … for flag -x: …", "flag needs an argument: -x"
	msg = strings.ReplaceAll(msg, "flag -", "flag --")
	msg = strings.ReplaceAll(msg, "argument: -", "argument: --")
	return prefix + flatten(msg)
}

// flatten puts a message on one line.
func flatten(s string) string { return strings.Join(strings.Fields(s), " ") }

// closestFlag returns the defined flag nearest to name by edit distance,
// or "" when none is near enough to be a slip of the keyboard: at most a
// third of the longer name's letters (and at least 1, at most 3) changed.
// Dashes and underscores are ignored, so --voxelsize finds --voxel-size.
func closestFlag(fs *flag.FlagSet, name string) string {
	var names []string
	fs.VisitAll(func(f *flag.Flag) { names = append(names, f.Name) })
	return campaign.Nearest(name, names)
}

// optionalInt is a flag that knows whether it was given, so that leaving
// it out can mean "from the config" and its help says so instead of
// showing a sentinel such as -1. Negative values are refused.
type optionalInt struct {
	v   int
	set bool
}

func (o *optionalInt) String() string {
	if o == nil || !o.set {
		return ""
	}
	return strconv.Itoa(o.v)
}

func (o *optionalInt) Set(s string) error {
	v, err := strconv.Atoi(s)
	if err != nil {
		return errors.New("not a whole number")
	}
	if v < 0 {
		return errors.New("must be 0 or more")
	}
	o.v, o.set = v, true
	return nil
}

// optionalFloat is optionalInt for a non-negative finite number.
type optionalFloat struct {
	v   float64
	set bool
}

func (o *optionalFloat) String() string {
	if o == nil || !o.set {
		return ""
	}
	return strconv.FormatFloat(o.v, 'g', -1, 64)
}

func (o *optionalFloat) Set(s string) error {
	v, err := strconv.ParseFloat(s, 64)
	if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
		return errors.New("not a finite number")
	}
	if v < 0 {
		return errors.New("must be 0 or more")
	}
	o.v, o.set = v, true
	return nil
}
