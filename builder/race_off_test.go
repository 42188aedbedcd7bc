//go:build !race

package builder

const raceEnabled = false
