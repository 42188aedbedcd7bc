package cli

import (
	"context"

	"github.com/bunchsieve/bunchsieve/trigger"
)

func runMenu(_ context.Context, e *env, args []string) error {
	if len(args) == 0 {
		return usagef("missing subcommand; use `bunchsieve menu check FILE`")
	}
	switch args[0] {
	case "check":
		fs := newFlags(e, "menu check", "FILE")
		if err := parse(fs, args[1:], 1); err != nil {
			return err
		}
		if fs.NArg() != 1 {
			return usagef("menu check takes one menu FILE")
		}
		m, err := trigger.LoadMenu(fs.Arg(0))
		if err != nil {
			return err
		}
		return m.Describe(e.stdout)
	default:
		return usagef("unknown menu subcommand %q; use `bunchsieve menu check FILE`", args[0])
	}
}
