package builder

import (
	"fmt"
	"math"
	"slices"

	"github.com/bunchsieve/bunchsieve/detector"
)

// Policy says what Add does with a fragment that needs a new crossing while
// the window of tracked crossings is full.
type Policy int

const (
	// EvictOldest makes room by emitting the oldest open crossing at once,
	// incomplete and flagged EVICTED. Nothing is refused.
	EvictOldest Policy = iota
	// Block refuses the fragment with ErrWindowFull without consuming it;
	// the caller applies back-pressure and offers it again after Advance.
	Block
)

// String returns "evict-oldest" or "block".
func (p Policy) String() string {
	switch p {
	case EvictOldest:
		return "evict-oldest"
	case Block:
		return "block"
	}
	return fmt.Sprintf("Policy(%d)", int(p))
}

// Mode says how a fragment is matched to its bunch crossing.
type Mode int

const (
	// ByCounter keys a fragment by its orbit and bcid counters; a non-zero
	// timestamp is checked against the crossing's nominal time.
	ByCounter Mode = iota
	// ByTimestamp keys a fragment by the slot its timestamp falls in, for
	// sources that send only timestamps. Non-zero counters are checked
	// against that slot unless Config.IgnoreCounters is set.
	ByTimestamp
)

// String returns "by-counter" or "by-timestamp".
func (m Mode) String() string {
	switch m {
	case ByCounter:
		return "by-counter"
	case ByTimestamp:
		return "by-timestamp"
	}
	return fmt.Sprintf("Mode(%d)", int(m))
}

// Defaults applied to zero Config fields.
const (
	// DefaultToleranceNs is the default timestamp tolerance: a fifth of a
	// 25 ns slot, wide enough for clock jitter and rounding to whole ns,
	// far too narrow to confuse neighbouring crossings.
	DefaultToleranceNs = 5
	// DefaultLatenessNs is the default allowed lateness in event time,
	// 100 us: a little over one orbit (88.9 us), so a source running a
	// whole orbit behind the others still lands its fragments.
	DefaultLatenessNs = 100_000
	// DefaultDeadAfterNs is the default silence, in arrival time, after
	// which a source is declared dead: 2 s.
	DefaultDeadAfterNs = 2_000_000_000
	// DefaultWindow is the default number of crossings tracked at once.
	DefaultWindow = 8192
)

const (
	// maxWindow bounds Config.Window so pool indices fit in int32 with room.
	maxWindow = 1 << 24
	// maxCells bounds Window x len(Sources), the fragment pointers the
	// builder preallocates (2 GiB of pointers).
	maxCells = 1 << 28
	// maxTimeNs is the largest nominal crossing time the builder handles,
	// about 52 days of run time. Below 2^52 a float64 holds every ns
	// exactly, so nominal times are exact and strictly increasing.
	maxTimeNs = 1 << 52
)

// Config sets up a Builder. Every field's zero value has a meaning (given
// in its comment) except Sources, which must list the expected sources.
type Config struct {
	// Run is the run number every fragment must carry. Zero is run 0.
	Run uint32
	// Sources lists the expected source ids: non-empty, unique, each > 0.
	// The order does not matter; events list fragments by ascending id.
	Sources []uint32
	// Clock numbers the crossings. The zero value means
	// detector.DefaultClock(). Its slot length must be at least 1 ns.
	Clock detector.Clock
	// Mode says how fragments are matched to crossings; zero is ByCounter.
	Mode Mode
	// Tolerance is how far, in ns, a timestamp may be from the nominal time
	// of its crossing. Zero means DefaultToleranceNs (5 ns). In ByTimestamp
	// mode it must be below half a slot so a timestamp matches at most one
	// crossing.
	Tolerance int64
	// Lateness is the allowed lateness in event-time ns: a crossing at time
	// t waits for missing sources until the watermark exceeds t+Lateness.
	// Zero means DefaultLatenessNs (100 us).
	Lateness int64
	// DeadAfter is the silence, in ns of arrival time, after which a
	// source is declared dead and leaves the watermark. Zero means
	// DefaultDeadAfterNs (2 s).
	DeadAfter int64
	// Window is the most crossings tracked at once, open ones and emitted
	// ones still remembered. Zero means DefaultWindow (8192).
	Window int
	// WhenFull is what happens when the window is full; zero is
	// EvictOldest.
	WhenFull Policy
	// SkipChecksum turns off checksum verification, for trusted
	// in-process paths whose fragments never crossed a wire. Zero (false)
	// verifies every fragment.
	SkipChecksum bool
	// IgnoreCounters, in ByTimestamp mode only, skips checking non-zero
	// orbit and bcid counters against the timestamp, for sources whose
	// counters are not trusted. Zero (false) checks them.
	IgnoreCounters bool
}

// withDefaults returns cfg with zero fields replaced by their defaults and
// checks it. The error names the offending field.
func (cfg Config) withDefaults() (Config, error) {
	if cfg.Clock == (detector.Clock{}) {
		cfg.Clock = detector.DefaultClock()
	}
	if cfg.Tolerance == 0 {
		cfg.Tolerance = DefaultToleranceNs
	}
	if cfg.Lateness == 0 {
		cfg.Lateness = DefaultLatenessNs
	}
	if cfg.DeadAfter == 0 {
		cfg.DeadAfter = DefaultDeadAfterNs
	}
	if cfg.Window == 0 {
		cfg.Window = DefaultWindow
	}

	if len(cfg.Sources) == 0 {
		return cfg, fmt.Errorf("builder: Config.Sources is empty, want at least one source id")
	}
	ids := slices.Clone(cfg.Sources)
	slices.Sort(ids)
	for i, id := range ids {
		if id == 0 {
			return cfg, fmt.Errorf("builder: Config.Sources holds source id 0, want ids > 0")
		}
		if i > 0 && ids[i-1] == id {
			return cfg, fmt.Errorf("builder: Config.Sources lists source %d twice", id)
		}
	}
	cfg.Sources = ids
	if err := cfg.Clock.Validate(); err != nil {
		return cfg, fmt.Errorf("builder: Config.Clock: %w", err)
	}
	if cfg.Clock.SlotNs < 1 {
		return cfg, fmt.Errorf("builder: Config.Clock.SlotNs is %v, want at least 1 ns so crossings have distinct times", cfg.Clock.SlotNs)
	}
	if math.IsNaN(cfg.Clock.PhaseNs) || math.Abs(cfg.Clock.PhaseNs) > maxTimeNs/2 {
		return cfg, fmt.Errorf("builder: Config.Clock.PhaseNs is %v, want a finite value within +-2^51 ns", cfg.Clock.PhaseNs)
	}
	switch cfg.Mode {
	case ByCounter, ByTimestamp:
	default:
		return cfg, fmt.Errorf("builder: Config.Mode is %d, want ByCounter (0) or ByTimestamp (1)", int(cfg.Mode))
	}
	if cfg.Tolerance < 0 {
		return cfg, fmt.Errorf("builder: Config.Tolerance is %d ns, want >= 0", cfg.Tolerance)
	}
	if cfg.Mode == ByTimestamp && float64(2*cfg.Tolerance) >= cfg.Clock.SlotNs {
		return cfg, fmt.Errorf("builder: Config.Tolerance is %d ns with Mode ByTimestamp, want below half a slot (%.3f ns)", cfg.Tolerance, cfg.Clock.SlotNs/2)
	}
	if cfg.IgnoreCounters && cfg.Mode != ByTimestamp {
		return cfg, fmt.Errorf("builder: Config.IgnoreCounters needs Mode ByTimestamp, have %v", cfg.Mode)
	}
	if cfg.Lateness < 0 {
		return cfg, fmt.Errorf("builder: Config.Lateness is %d ns, want >= 0", cfg.Lateness)
	}
	if cfg.DeadAfter < 0 {
		return cfg, fmt.Errorf("builder: Config.DeadAfter is %d ns, want >= 0", cfg.DeadAfter)
	}
	if cfg.Window < 0 || cfg.Window > maxWindow {
		return cfg, fmt.Errorf("builder: Config.Window is %d, want 1..%d", cfg.Window, maxWindow)
	}
	if cells := (cfg.Window + 1) * len(cfg.Sources); cells > maxCells {
		return cfg, fmt.Errorf("builder: Config.Window %d x %d sources needs %d fragment cells, more than %d", cfg.Window, len(cfg.Sources), cells, maxCells)
	}
	switch cfg.WhenFull {
	case EvictOldest, Block:
	default:
		return cfg, fmt.Errorf("builder: Config.WhenFull is %d, want EvictOldest (0) or Block (1)", int(cfg.WhenFull))
	}
	return cfg, nil
}
