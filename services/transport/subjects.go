// Package transport is how the services talk: the NATS subject layout, the
// connection settings every stage uses, and the embedded NATS server of the
// all-in-one stack.
package transport

import (
	"fmt"
	"regexp"
	"strconv"
	"strings"
)

// DefaultPrefix is the subject prefix when none is configured.
const DefaultPrefix = "bunchsieve"

var prefixRe = regexp.MustCompile(`^[A-Za-z0-9_-]+(\.[A-Za-z0-9_-]+)*$`)

// Subjects names the NATS subjects of one deployment. Two runs share a NATS
// server safely when their prefixes differ. The zero value uses
// DefaultPrefix.
//
//	<prefix>.frag.<partition>.<source>   fragment batches, one subject per source and builder share
//	<prefix>.built                       built-event batches (selection workers form a queue group)
//	<prefix>.built.end                   each builder's end-of-run batch again, for every worker
//	<prefix>.select.progress             selection workers' decided counts, to end a run together
//	<prefix>.decisions                   decision batches
type Subjects struct {
	Prefix string
}

func (s Subjects) prefix() string {
	if s.Prefix == "" {
		return DefaultPrefix
	}
	return s.Prefix
}

// Validate reports a prefix that is not a valid literal NATS subject.
func (s Subjects) Validate() error {
	if s.Prefix != "" && !prefixRe.MatchString(s.Prefix) {
		return fmt.Errorf("transport: subject prefix %q: want dot-separated tokens of letters, digits, '-' or '_'", s.Prefix)
	}
	return nil
}

// Fragments returns the subject of source's batches for builder share
// partition.
func (s Subjects) Fragments(partition int, source uint32) string {
	return s.prefix() + ".frag." + strconv.Itoa(partition) + "." + strconv.FormatUint(uint64(source), 10)
}

// FragmentsOf returns the wildcard subject of every source's batches for one
// builder share.
func (s Subjects) FragmentsOf(partition int) string {
	return s.prefix() + ".frag." + strconv.Itoa(partition) + ".*"
}

// AllFragments returns the wildcard subject of every source's batches to
// every builder share.
func (s Subjects) AllFragments() string { return s.prefix() + ".frag.>" }

// ParseFragments reads the builder share and source from a fragment
// subject of s (as Fragments makes them); ok is false for any other
// subject.
func (s Subjects) ParseFragments(subject string) (partition int, source uint32, ok bool) {
	rest, ok := strings.CutPrefix(subject, s.prefix()+".frag.")
	if !ok {
		return 0, 0, false
	}
	ps, ss, ok := strings.Cut(rest, ".")
	if !ok {
		return 0, 0, false
	}
	p, err1 := strconv.ParseUint(ps, 10, 16)
	src, err2 := strconv.ParseUint(ss, 10, 32)
	if err1 != nil || err2 != nil {
		return 0, 0, false
	}
	return int(p), uint32(src), true
}

// Built returns the subject of built-event batches.
func (s Subjects) Built() string { return s.prefix() + ".built" }

// BuiltEnd returns the subject on which every builder publishes its
// end-of-run batch a second time. It is not a queue subject: every
// selection worker receives every builder's end, which the queue group
// hands to one worker only.
func (s Subjects) BuiltEnd() string { return s.prefix() + ".built.end" }

// SelectProgress returns the subject on which selection workers sharing
// the queue group tell each other how many events they decided.
func (s Subjects) SelectProgress() string { return s.prefix() + ".select.progress" }

// Decisions returns the subject of decision batches.
func (s Subjects) Decisions() string { return s.prefix() + ".decisions" }

// SelectQueue is the queue group selection workers share.
func (s Subjects) SelectQueue() string { return s.prefix() + "-select" }
