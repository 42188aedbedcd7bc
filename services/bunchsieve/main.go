// Command bunchsieve runs the readout emulation, event building and
// selection chain, together (`up`) or as separate services.
package main

import (
	"os"

	"github.com/bunchsieve/bunchsieve/services/cli"
)

func main() { os.Exit(cli.Main(os.Args[1:], os.Stdout, os.Stderr)) }
