// Package cli gives the tools' command lines one habit: flags written and
// shown as --flag, help with a synopsis, examples and each default printed
// once, and every usage error (a bad or missing flag, a stray argument)
// told on stderr with a pointer to --help and exited with status 2.
package cli

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"strconv"
	"strings"
	"time"
)

// ErrUsage marks a usage error already explained on stderr; the binary
// exits 2 on it.
var ErrUsage = errors.New("usage")

// Command describes a command line for its help.
type Command struct {
	// Name is how it is called, for example "plumbline evaluate".
	Name string
	// Synopsis follows the name in the usage line, for example
	// "--input FILE --label COL [flags]".
	Synopsis string
	// Summary says what it does, in a sentence or two.
	Summary string
	// Examples are shell lines; a line starting with # is a comment.
	Examples []string
}

// NewFlagSet is a flag set for c whose help is printed to w in the form of
// Help.
func NewFlagSet(c Command, w io.Writer) *flag.FlagSet {
	fs := flag.NewFlagSet(c.Name, flag.ContinueOnError)
	fs.SetOutput(w)
	fs.Usage = func() { Help(w, c, fs) }
	return fs
}

// Help prints c's help: usage line, summary, examples and flags.
func Help(w io.Writer, c Command, fs *flag.FlagSet) {
	fmt.Fprintf(w, "%s\n\nUsage:\n  %s %s\n", c.Summary, c.Name, c.Synopsis)
	if len(c.Examples) > 0 {
		fmt.Fprintln(w, "\nExamples:")
		for _, e := range c.Examples {
			fmt.Fprintf(w, "  %s\n", e)
		}
	}
	if fs == nil {
		return
	}
	var rows [][2]string
	width := 0
	fs.VisitAll(func(f *flag.Flag) {
		name, usage := flag.UnquoteUsage(f)
		left := "--" + f.Name
		if name != "" {
			left += " " + name
		}
		if d := defaultText(f); d != "" && !strings.Contains(usage, "(default") {
			usage += " (default " + d + ")"
		}
		width = max(width, len(left))
		rows = append(rows, [2]string{left, usage})
	})
	if len(rows) == 0 {
		return
	}
	fmt.Fprintln(w, "\nFlags:")
	for _, r := range rows {
		fmt.Fprintf(w, "  %-*s  %s\n", width, r[0], r[1])
	}
}

// defaultText is a flag's default as help shows it, quoted when it is
// text; empty for a zero value.
func defaultText(f *flag.Flag) string {
	d := f.DefValue
	switch d {
	case "", "0", "false", "[]", "0s":
		return ""
	case "true":
		return d
	}
	if _, err := strconv.ParseFloat(d, 64); err == nil {
		return d
	}
	if _, err := time.ParseDuration(d); err == nil {
		return d
	}
	return strconv.Quote(d)
}

// Parse parses args into fs and refuses positional arguments beyond most
// (-1: any). It returns flag.ErrHelp for -h/--help (help already printed),
// ErrUsage for a usage error (already explained), else nil.
func Parse(fs *flag.FlagSet, args []string, most int) error {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return err
		}
		// The flag package printed the error and the whole help; point
		// at the help again in the last line a person sees.
		fmt.Fprintf(fs.Output(), "\nRun '%s --help' for usage.\n", fs.Name())
		return ErrUsage
	}
	if most >= 0 && fs.NArg() > most {
		return Usagef(fs, "unexpected argument %q", fs.Arg(most))
	}
	return nil
}

// Usagef explains a usage error on fs's output, with a pointer to --help,
// and returns ErrUsage.
func Usagef(fs *flag.FlagSet, format string, args ...any) error {
	fmt.Fprintf(fs.Output(), "error: %s\nRun '%s --help' for usage.\n", fmt.Sprintf(format, args...), fs.Name())
	return ErrUsage
}

// IsSet reports whether the command line gave the named flag (a default
// left alone is not given).
func IsSet(fs *flag.FlagSet, name string) bool {
	set := false
	fs.Visit(func(f *flag.Flag) { set = set || f.Name == name })
	return set
}

// Required refuses, as a usage error, the first of the named flags left
// empty.
func Required(fs *flag.FlagSet, names ...string) error {
	for _, n := range names {
		if f := fs.Lookup(n); f != nil && f.Value.String() == "" {
			return Usagef(fs, "--%s is required", n)
		}
	}
	return nil
}
