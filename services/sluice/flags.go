package main

import (
	"flag"
	"fmt"
	"os"
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

// fail prints a one-line error and returns the exit status.
func fail(code int, format string, a ...any) int {
	msg := fmt.Sprintf(format, a...)
	msg = strings.ReplaceAll(msg, "\n", " ")
	fmt.Fprintln(os.Stderr, "sluice: "+msg)
	return code
}
