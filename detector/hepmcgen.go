package detector

import (
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"slices"
	"strings"

	"go-hep.org/x/hep/hepmc"
	"go-hep.org/x/hep/heppdt"
)

// ErrNoEvents is returned for a HepMC input without a single event.
var ErrNoEvents = errors.New("no events")

// hepEvent is one event of a generator file reduced to what the response
// needs: its final-state particles, its truth objects and its weight.
type hepEvent struct {
	parts   []particle
	objects []TruthObject
	weight  float64
}

// HepMCGenerator makes crossings from the events of a HepMC (ASCII,
// IO_GenEvent) generator file, read with go-hep's hepmc package: crossing n
// carries event n modulo the number of events, passed through the same
// detector response as the physics generator, with the minimum-bias overlay
// of its PhysicsConfig unless NoPileUp is set (the config's process and
// cross-section settings do not apply). The whole file is read at
// construction. Every crossing is a function of (seed, n) only. It is not
// safe for concurrent use.
type HepMCGenerator struct {
	*engine
	events []hepEvent
}

// LoadHepMCGenerator reads the HepMC file at path; see NewHepMCGenerator.
func LoadHepMCGenerator(d *Description, part *Partition, seed uint64, path string, cfg PhysicsConfig) (*HepMCGenerator, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("detector: %w", err)
	}
	defer f.Close()
	g, err := NewHepMCGenerator(d, part, seed, f, cfg)
	if err != nil {
		return nil, fmt.Errorf("%w (file %s)", err, path)
	}
	return g, nil
}

// NewHepMCGenerator reads every event of r, which must end with the
// listing's end line; momenta in MeV are converted to GeV. A malformed
// input is an error (and, go-hep's decoder having no way to stop it, may
// leave the decoder's reading goroutine blocked).
func NewHepMCGenerator(d *Description, part *Partition, seed uint64, r io.Reader, cfg PhysicsConfig) (*HepMCGenerator, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	cfg = cfg.withDefaults()
	events, err := readHepMC(r)
	if err != nil {
		return nil, err
	}
	e, err := newEngine(d, part, seed, cfg)
	if err != nil {
		return nil, err
	}
	return &HepMCGenerator{engine: e, events: events}, nil
}

// Events returns the number of events read.
func (g *HepMCGenerator) Events() int { return len(g.events) }

// Generate fills c with crossing n: event n mod Events() plus pile-up.
func (g *HepMCGenerator) Generate(n uint64, c *Crossing) {
	g.begin(n, c)
	g.overlay(c)
	ev := &g.events[n%uint64(len(g.events))]
	c.Truth.Hard = append(c.Truth.Hard, ProcessHepMC)
	c.Truth.Process = ProcessHepMC
	c.Truth.Weight = ev.weight
	c.Truth.Objects = append(c.Truth.Objects, ev.objects...)
	g.parts = append(g.parts, ev.parts...)
	c.Interactions++
	g.finish(c)
}

// hepmcEnd ends the event listing of an IO_GenEvent file.
const hepmcEnd = "HepMC::IO_GenEvent-END_EVENT_LISTING"

// readHepMC decodes every event of r. go-hep's decoder reads lines in a
// goroutine of its own that only ends once its last line has been taken,
// and it cannot take blank lines; so the input is read whole, blank lines
// are dropped, the listing must end with its end line, and after that line
// one more Decode lets the reading goroutine finish.
func readHepMC(r io.Reader) (events []hepEvent, err error) {
	data, err := io.ReadAll(r)
	if err != nil {
		return nil, fmt.Errorf("detector: hepmc input: %w", err)
	}
	var kept []string
	for line := range strings.Lines(string(data)) {
		if line = strings.TrimRight(line, " \t\r\n"); line != "" {
			kept = append(kept, line)
		}
	}
	if len(kept) == 0 {
		return nil, fmt.Errorf("detector: hepmc input: %w", ErrNoEvents)
	}
	if strings.TrimSpace(kept[len(kept)-1]) != hepmcEnd {
		return nil, fmt.Errorf("detector: hepmc input does not end with %s (truncated?)", hepmcEnd)
	}
	dec := hepmc.NewDecoder(strings.NewReader(strings.Join(kept, "\n") + "\n"))
	defer func() {
		if v := recover(); v != nil {
			events, err = nil, fmt.Errorf("detector: hepmc event %d: malformed input (%v)", len(events)+1, v)
		}
	}()
	for {
		var evt hepmc.Event
		err := dec.Decode(&evt)
		if errors.Is(err, io.EOF) {
			// The end line was taken; take the reader's end of input too.
			_ = dec.Decode(&hepmc.Event{})
			break
		}
		if err != nil {
			return nil, fmt.Errorf("detector: hepmc event %d: %v", len(events)+1, err)
		}
		ev, err := convertHepMC(&evt)
		if err != nil {
			return nil, fmt.Errorf("detector: hepmc event %d (number %d): %v", len(events)+1, evt.EventNumber, err)
		}
		events = append(events, ev)
	}
	if len(events) == 0 {
		return nil, fmt.Errorf("detector: hepmc input: %w", ErrNoEvents)
	}
	return events, nil
}

// convertHepMC keeps the final-state particles (status 1) and, as truth,
// final-state leptons and neutrinos and the last copy of every W, Z, top
// and tau.
func convertHepMC(evt *hepmc.Event) (hepEvent, error) {
	scale := 1.0
	if evt.MomentumUnit == hepmc.MEV {
		scale = 1e-3
	}
	ev := hepEvent{weight: 1}
	if len(evt.Weights.Slice) > 0 {
		ev.weight = evt.Weights.Slice[0]
	}
	// Map iteration order is random; walk barcodes in order so that a
	// file always gives the same particle order.
	codes := make([]int, 0, len(evt.Particles))
	for bc := range evt.Particles {
		codes = append(codes, bc)
	}
	slices.Sort(codes)
	for _, bc := range codes {
		p := evt.Particles[bc]
		m := &p.Momentum
		fm := FourMomentum{m.Px() * scale, m.Py() * scale, m.Pz() * scale, m.E() * scale}
		for _, v := range [4]float64{fm.Px, fm.Py, fm.Pz, fm.E} {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return ev, fmt.Errorf("particle %d has a non-finite momentum", bc)
			}
		}
		pdg := int32(p.PdgID)
		charge := heppdt.PID(p.PdgID).Charge()
		if pdg == PDGEmber || pdg == -PDGEmber {
			charge = math.Copysign(2.0/3, float64(pdg))
		}
		if p.Status == 1 {
			ev.parts = append(ev.parts, particle{p: fm, pdg: pdg, charge: charge, class: classOf(pdg)})
		}
		kind := truthKind(pdg)
		if kind == ObjectOther {
			continue
		}
		final := p.Status == 1
		lastCopy := p.EndVertex == nil || !hasDaughter(p.EndVertex, p.PdgID)
		switch kind {
		case ObjectElectron, ObjectMuon, ObjectNeutrino:
			if !final {
				continue
			}
		default:
			if !lastCopy {
				continue
			}
		}
		ev.objects = append(ev.objects, TruthObject{
			Kind: kind, PDG: pdg, Charge: charge, PT: fm.Pt(), Eta: fm.Eta(), Phi: fm.Phi(), Mass: massOf(fm),
		})
	}
	return ev, nil
}

func hasDaughter(v *hepmc.Vertex, pdg int64) bool {
	for _, d := range v.ParticlesOut {
		if d.PdgID == pdg {
			return true
		}
	}
	return false
}

func truthKind(pdg int32) ObjectKind {
	switch abs32(pdg) {
	case 11:
		return ObjectElectron
	case 13:
		return ObjectMuon
	case 15:
		return ObjectTau
	case 12, 14, 16:
		return ObjectNeutrino
	case 24:
		return ObjectW
	case 23:
		return ObjectZ
	case 6:
		return ObjectTop
	case PDGEmber:
		return ObjectEmber
	case PDGShade:
		return ObjectShade
	}
	return ObjectOther
}
