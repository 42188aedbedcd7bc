// Package examples ships the example run configuration and menus inside the
// binary, so that `bunchsieve up` runs on a fresh machine with no files.
package examples

import "embed"

// FS holds run.yaml and menus/*.yaml.
//
//go:embed run.yaml menus/*.yaml
var FS embed.FS

// StarterMenu is the path inside FS of the default menu.
const StarterMenu = "menus/starter.yaml"
