package cli

import (
	"context"
	"fmt"

	"github.com/bunchsieve/bunchsieve/trigger"
)

func runMenu(_ context.Context, e *env, args []string) error {
	fs := newFlags(e, "menu", "SUBCOMMAND")
	fs.Usage = func() {
		fmt.Fprintln(e.stdout, "usage: bunchsieve menu check FILE")
		fmt.Fprintln(e.stdout, "\nsubcommands:")
		fmt.Fprintln(e.stdout, "  check FILE  validate the menu FILE and list its rules (see bunchsieve menu check --help)")
	}
	// Flags before the subcommand are only --help; the subcommand parses
	// its own.
	if err := parse(fs, args, len(args)); err != nil {
		return err
	}
	args = fs.Args()
	if len(args) == 0 {
		return usagef("missing subcommand; use `bunchsieve menu check FILE`")
	}
	switch args[0] {
	case "check":
		fs := newActionFlags(e, "menu check", "FILE",
			"Validate the menu FILE and list its features, prescale sets and rules with their streams;\n"+
				"a mistake is reported with its line and column, and exit status 1.", "")
		file, err := parseOne(fs, args[1:], "menu check takes one menu FILE")
		if err != nil {
			return err
		}
		m, err := trigger.LoadMenu(file)
		if err != nil {
			return err
		}
		return m.Describe(e.stdout)
	default:
		return usagef("unknown menu subcommand %q; use `bunchsieve menu check FILE`", args[0])
	}
}
