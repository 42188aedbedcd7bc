// Package summary is the end-of-run summary that `bunchsieve up` prints and
// writes as JSON. Its field names are a contract: scripts rely on them.
package summary

import (
	"encoding/json"
	"fmt"
	"io"
	"os"
	"text/tabwriter"
)

// Summary is the accounting of one run.
type Summary struct {
	Run              uint32    `json:"run"`
	Seed             uint64    `json:"seed"`
	Sources          int       `json:"sources"`
	DurationS        float64   `json:"duration_s"`
	Crossings        uint64    `json:"crossings"`
	EventsBuilt      uint64    `json:"events_built"`
	EventsComplete   uint64    `json:"events_complete"`
	EventsIncomplete uint64    `json:"events_incomplete"`
	EventsDecided    uint64    `json:"events_decided"`
	Fragments        Fragments `json:"fragments"`
	Transport        Transport `json:"transport"`
	Accepted         uint64    `json:"accepted"`
	Menu             string    `json:"menu"`
	MenuHash         string    `json:"menu_hash"`
	PrescaleSet      string    `json:"prescale_set"`
	Rules            []Rule    `json:"rules"`
	Latency          Latency   `json:"latency"`
}

// Fragments is the builder's accounting: Received equals the sum of the
// other fields once the run is flushed.
type Fragments struct {
	Received      uint64 `json:"received"`
	InEvents      uint64 `json:"in_events"`
	Duplicate     uint64 `json:"duplicate"`
	Late          uint64 `json:"late"`
	Malformed     uint64 `json:"malformed"`
	UnknownSource uint64 `json:"unknown_source"`
	OutOfTime     uint64 `json:"out_of_time"`
}

// Closed reports whether every received fragment is accounted for.
func (f Fragments) Closed() bool {
	return f.Received == f.InEvents+f.Duplicate+f.Late+f.Malformed+f.UnknownSource+f.OutOfTime
}

// String is the summaries' fragment line: the received count as the sum
// of its parts, and whether the account closes.
func (f Fragments) String() string {
	closed := "closed"
	if !f.Closed() {
		closed = "NOT CLOSED"
	}
	return fmt.Sprintf("fragments received %d = in events %d + duplicate %d + late %d + malformed %d + unknown source %d + out of time %d (%s)",
		f.Received, f.InEvents, f.Duplicate, f.Late, f.Malformed, f.UnknownSource, f.OutOfTime, closed)
}

// Transport counts what NATS dropped or could not be decoded: messages that
// never reached the builder or the selection.
type Transport struct {
	FragmentBatchesDropped     uint64 `json:"fragment_batches_dropped"`
	EventBatchesDropped        uint64 `json:"event_batches_dropped"`
	FragmentBatchesUndecodable uint64 `json:"fragment_batches_undecodable"`
	EventBatchesUndecodable    uint64 `json:"event_batches_undecodable"`
	// EventsLost counts events the builders announced that never reached
	// the selection (lost while a NATS connection was down, say).
	EventsLost uint64 `json:"events_lost"`
}

// Rule is one rule's counts. Accepted == Passed / Prescale rounded down
// while the prescale did not change during the run.
type Rule struct {
	Name     string `json:"name"`
	Prescale int    `json:"prescale"`
	Passed   uint64 `json:"passed"`
	Accepted uint64 `json:"accepted"`
}

// Latency holds percentiles in seconds.
type Latency struct {
	BuildP50S    float64 `json:"build_p50_s"`
	BuildP99S    float64 `json:"build_p99_s"`
	EndToEndP50S float64 `json:"end_to_end_p50_s"`
	EndToEndP99S float64 `json:"end_to_end_p99_s"`
	EndToEndMaxS float64 `json:"end_to_end_max_s"`
}

// WriteJSON writes s as indented JSON to path.
func (s *Summary) WriteJSON(path string) error {
	data, err := json.MarshalIndent(s, "", "  ")
	if err != nil {
		return fmt.Errorf("summary: %w", err)
	}
	if err := os.WriteFile(path, append(data, '\n'), 0o644); err != nil {
		return fmt.Errorf("summary: %w", err)
	}
	return nil
}

// Print writes a human-readable summary.
func (s *Summary) Print(w io.Writer) {
	rate := s.rate
	fmt.Fprintf(w, "run %d  seed %d  %d sources  %.2f s\n", s.Run, s.Seed, s.Sources, s.DurationS)
	fmt.Fprintf(w, "crossings %d (%.0f/s)  built %d (complete %d, incomplete %d)  decided %d  accepted %d (%.1f/s)\n",
		s.Crossings, rate(s.Crossings), s.EventsBuilt, s.EventsComplete, s.EventsIncomplete, s.EventsDecided, s.Accepted, rate(s.Accepted))
	fmt.Fprintln(w, s.Fragments)
	t := s.Transport
	if t != (Transport{}) {
		fmt.Fprintf(w, "transport losses: fragment batches dropped %d, event batches dropped %d, undecodable %d+%d, events lost %d\n",
			t.FragmentBatchesDropped, t.EventBatchesDropped, t.FragmentBatchesUndecodable, t.EventBatchesUndecodable, t.EventsLost)
	}
	fmt.Fprintf(w, "latency: build p50 %s p99 %s; end to end p50 %s p99 %s max %s\n",
		ms(s.Latency.BuildP50S), ms(s.Latency.BuildP99S), ms(s.Latency.EndToEndP50S), ms(s.Latency.EndToEndP99S), ms(s.Latency.EndToEndMaxS))
	s.printMenu(w)
}

// PrintBuild is Print for a builder alone, which has no seed, offered
// crossings, decisions or menu to show: what the builder counted.
func (s *Summary) PrintBuild(w io.Writer) {
	fmt.Fprintf(w, "run %d  %d sources  %.2f s\n", s.Run, s.Sources, s.DurationS)
	fmt.Fprintf(w, "built %d (%.0f/s; complete %d, incomplete %d)\n", s.EventsBuilt, s.rate(s.EventsBuilt), s.EventsComplete, s.EventsIncomplete)
	fmt.Fprintln(w, s.Fragments)
	if t := s.Transport; t.FragmentBatchesDropped != 0 || t.FragmentBatchesUndecodable != 0 {
		fmt.Fprintf(w, "transport losses: fragment batches dropped %d, undecodable %d\n", t.FragmentBatchesDropped, t.FragmentBatchesUndecodable)
	}
	fmt.Fprintf(w, "latency: build p50 %s p99 %s\n", ms(s.Latency.BuildP50S), ms(s.Latency.BuildP99S))
}

// PrintSelection is Print for a selection worker alone, which has no
// crossings, fragments or building to show: its decisions, what NATS lost
// of its event batches, its end-to-end latency and the menu's rules.
func (s *Summary) PrintSelection(w io.Writer) {
	fmt.Fprintf(w, "run %d  %.2f s\n", s.Run, s.DurationS)
	fmt.Fprintf(w, "decided %d (%.0f/s)  accepted %d (%.1f/s)\n", s.EventsDecided, s.rate(s.EventsDecided), s.Accepted, s.rate(s.Accepted))
	if t := s.Transport; t.EventBatchesDropped != 0 || t.EventBatchesUndecodable != 0 || t.EventsLost != 0 {
		fmt.Fprintf(w, "transport losses: event batches dropped %d, undecodable %d, events lost %d\n", t.EventBatchesDropped, t.EventBatchesUndecodable, t.EventsLost)
	}
	fmt.Fprintf(w, "latency: end to end p50 %s p99 %s max %s\n", ms(s.Latency.EndToEndP50S), ms(s.Latency.EndToEndP99S), ms(s.Latency.EndToEndMaxS))
	s.printMenu(w)
}

// rate is n per second of the summary's duration.
func (s *Summary) rate(n uint64) float64 {
	if s.DurationS <= 0 {
		return 0
	}
	return float64(n) / s.DurationS
}

// printMenu writes the menu line and the table of rules.
func (s *Summary) printMenu(w io.Writer) {
	fmt.Fprintf(w, "menu %s (%s), prescale set %s\n", s.Menu, s.MenuHash, s.PrescaleSet)
	tw := tabwriter.NewWriter(w, 2, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "rule\tprescale\tpassed\taccepted\taccepted/s\t")
	for _, r := range s.Rules {
		fmt.Fprintf(tw, "%s\t%d\t%d\t%d\t%.1f\t\n", r.Name, r.Prescale, r.Passed, r.Accepted, s.rate(r.Accepted))
	}
	tw.Flush()
}

func ms(s float64) string { return fmt.Sprintf("%.2fms", s*1e3) }
