// Package proto holds the wire schemas of bunchsieve (package bunchsieve.v1).
// The generated Go code lives in proto/bunchsieve/v1; regenerate it with
// `go generate ./proto`, which runs generate.sh.
package proto

//go:generate bash generate.sh
