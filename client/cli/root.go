// Package cli holds the commands of the gliss command-line tool. cmd/gliss is
// only a main that calls Run. Each file registers its command group in an
// init function; a command parses its flags with the standard flag package
// and talks to the daemon through the client package.
//
// Exit status: 0 success, 1 failure while running, 2 bad usage or bad input
// (one line naming the flag, the value and the allowed range).
package cli

import (
	"bytes"
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"sort"
	"strings"
)

// Env is what a command runs with; tests substitute their own streams.
type Env struct {
	Stdout io.Writer
	Stderr io.Writer
	Stdin  io.Reader
	// Getenv reads the environment (GLISS_SERVER).
	Getenv func(string) string
}

// Command is one leaf command such as "gliss model point".
type Command struct {
	// Name is the word after the group ("point").
	Name string
	// Summary is one line for the group's listing.
	Summary string
	// Usage is the synopsis after "gliss GROUP NAME" (flags, arguments).
	Usage string
	// Example is shown by --help; every command has one.
	Example string
	// Run parses args (after the command words) and does the work.
	Run func(ctx context.Context, env *Env, args []string) error
}

// Group is a first-level word such as "model" or "scan". A group with a
// Default command runs it when no sub-command is given ("gliss bench").
type Group struct {
	Name     string
	Summary  string
	Commands map[string]*Command
	Default  string
}

var groups = map[string]*Group{}

// register adds a command to a group, creating the group on first use.
func register(group, groupSummary string, c *Command) {
	g := groups[group]
	if g == nil {
		g = &Group{Name: group, Summary: groupSummary, Commands: map[string]*Command{}}
		groups[group] = g
	}
	if g.Summary == "" {
		g.Summary = groupSummary
	}
	if _, dup := g.Commands[c.Name]; dup {
		panic("cli: duplicate command " + group + " " + c.Name)
	}
	g.Commands[c.Name] = c
}

// setDefault makes name the command run by "gliss GROUP" alone.
func setDefault(group, name string) { groups[group].Default = name }

// UsageError is bad usage or bad input: exit status 2.
type UsageError struct{ Msg string }

func (e *UsageError) Error() string { return e.Msg }

// Usagef makes a UsageError.
func Usagef(format string, a ...any) error { return &UsageError{Msg: fmt.Sprintf(format, a...)} }

// ExitCode maps an error from Run to the process exit status.
func ExitCode(err error) int {
	if err == nil {
		return 0
	}
	var u *UsageError
	if errors.As(err, &u) || errors.Is(err, flag.ErrHelp) {
		if errors.Is(err, flag.ErrHelp) {
			return 0
		}
		return 2
	}
	return 1
}

// Run runs the command line args (without the program name).
func Run(ctx context.Context, env *Env, args []string) error {
	if env.Getenv == nil {
		env.Getenv = os.Getenv
	}
	if len(args) == 0 || args[0] == "help" || args[0] == "-h" || args[0] == "--help" {
		printTop(env.Stdout)
		if len(args) == 0 {
			return Usagef("gliss: no command given (see the list above)")
		}
		return nil
	}
	g := groups[args[0]]
	if g == nil {
		printTop(env.Stderr)
		return Usagef("gliss: unknown command %q%s", args[0], suggest(args[0], groupNames()))
	}
	rest := args[1:]
	var c *Command
	if len(rest) > 0 && !strings.HasPrefix(rest[0], "-") {
		c = g.Commands[rest[0]]
		if c == nil {
			printGroup(env.Stderr, g)
			return Usagef("gliss %s: unknown command %q%s", g.Name, rest[0], suggest(rest[0], commandNames(g)))
		}
		rest = rest[1:]
	} else if g.Default != "" && !(len(rest) > 0 && (rest[0] == "-h" || rest[0] == "--help")) {
		c = g.Commands[g.Default]
	} else {
		printGroup(env.Stdout, g)
		if len(rest) == 0 {
			return Usagef("gliss %s: no command given (see the list above)", g.Name)
		}
		return nil
	}
	return c.Run(ctx, env, rest)
}

// NewFlagSet makes a flag set for a command whose --help prints the usage,
// the flags with their defaults, and the example.
func NewFlagSet(env *Env, group string, c *Command) *flag.FlagSet {
	fs := flag.NewFlagSet("gliss "+group+" "+c.Name, flag.ContinueOnError)
	fs.SetOutput(env.Stderr)
	fs.Usage = func() {
		w := fs.Output()
		fmt.Fprintf(w, "%s\n\nUsage: gliss %s %s %s\n\nFlags:\n", c.Summary, group, c.Name, c.Usage)
		fs.PrintDefaults()
		if c.Example != "" {
			fmt.Fprintf(w, "\nExample:\n  %s\n", strings.ReplaceAll(c.Example, "\n", "\n  "))
		}
	}
	return fs
}

// Parse parses flags; a parse failure becomes a UsageError of one line (the
// full usage is printed only for --help, which returns flag.ErrHelp).
func Parse(fs *flag.FlagSet, args []string) error {
	out := fs.Output()
	var buf bytes.Buffer
	fs.SetOutput(&buf)
	err := fs.Parse(args)
	fs.SetOutput(out)
	if err != nil {
		if errors.Is(err, flag.ErrHelp) {
			_, _ = out.Write(buf.Bytes())
			return err
		}
		return &UsageError{Msg: fs.Name() + ": " + err.Error() + " (see " + fs.Name() + " --help)"}
	}
	return nil
}

func printTop(w io.Writer) {
	fmt.Fprintln(w, "gliss: run and script quantum-dot optics scans (see gliss GROUP --help)")
	fmt.Fprintln(w, "\nCommands:")
	for _, n := range groupNames() {
		fmt.Fprintf(w, "  %-8s %s\n", n, groups[n].Summary)
	}
}

func printGroup(w io.Writer, g *Group) {
	fmt.Fprintf(w, "gliss %s: %s\n\nCommands:\n", g.Name, g.Summary)
	for _, n := range commandNames(g) {
		fmt.Fprintf(w, "  %-10s %s\n", n, g.Commands[n].Summary)
	}
}

func groupNames() []string {
	out := make([]string, 0, len(groups))
	for n := range groups {
		out = append(out, n)
	}
	sort.Strings(out)
	return out
}

func commandNames(g *Group) []string {
	out := make([]string, 0, len(g.Commands))
	for n := range g.Commands {
		out = append(out, n)
	}
	sort.Strings(out)
	return out
}

// suggest proposes the closest known word, if one is close.
func suggest(word string, known []string) string {
	best, bestD := "", 3
	for _, k := range known {
		if d := editDistance(word, k); d < bestD {
			best, bestD = k, d
		}
	}
	if best == "" {
		return ""
	}
	return fmt.Sprintf(" (did you mean %q?)", best)
}

func editDistance(a, b string) int {
	prev := make([]int, len(b)+1)
	cur := make([]int, len(b)+1)
	for j := range prev {
		prev[j] = j
	}
	for i := 1; i <= len(a); i++ {
		cur[0] = i
		for j := 1; j <= len(b); j++ {
			cost := 1
			if a[i-1] == b[j-1] {
				cost = 0
			}
			cur[j] = min(prev[j]+1, cur[j-1]+1, prev[j-1]+cost)
		}
		prev, cur = cur, prev
	}
	return prev[len(b)]
}
