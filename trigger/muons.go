package trigger

import (
	"cmp"
	"errors"
	"fmt"
	"math"
	"slices"
)

// CurvatureGeV is the factor of pT[GeV] = CurvatureGeV * B[T] * R[m] for a
// particle of unit charge: c / 1e9 (PDG review "Particle detectors at
// accelerators", momentum measurement, wording from memory; R.K. Bock, W.
// Krischer, The Data Analysis BriefBook, Springer 1998).
const CurvatureGeV = 0.299792458

// MuonTrack is a muon candidate fitted through station hits.
type MuonTrack struct {
	// PT is the transverse momentum in GeV, from the curvature.
	PT float64
	// Eta is the pseudorapidity and Phi the azimuth of the momentum at the
	// beam line, in (-pi, pi].
	Eta, Phi float64
	// Charge is +1 or -1 (0 for a fit exactly straight).
	Charge int
	// Curvature is 1/R in 1/m of the fitted circle, and Z0 the z of the
	// track at the beam line, in mm.
	Curvature, Z0 float64
	// Stations is the number of hits (one per station) fitted.
	Stations int
}

// ErrMuonFit is returned (wrapped) by FitMuonTrack for hits that do not
// define a track.
var ErrMuonFit = errors.New("trigger: muon hits define no track")

// minCurvature (1/m) stands in for a fit straighter than R = 1000 km, so
// that pT stays finite.
const minCurvature = 1e-6

// maxHitMM bounds the hit coordinates taken, 1000 km: beyond it the
// fit's sums of fourth powers could overflow.
const maxHitMM = 1e9

// usable reports whether the hit's coordinates are finite and within
// maxHitMM.
func (h MuonHit) usable() bool {
	return math.Abs(h.X) < maxHitMM && math.Abs(h.Y) < maxHitMM && math.Abs(h.Z) < maxHitMM
}

// FitMuonTrack fits a track through the origin of the transverse plane
// (the beam line) and hits, at least two at different places, in a field
// of fieldT tesla along +z (negative: along -z). It is safe for concurrent
// use.
//
// The transverse fit is the conformal-mapping circle fit of M. Hansroul,
// H. Jeremie and D. Savard, "Fast circle fit with the conformal mapping
// method", NIM A 270 (1988) 498 (reference from memory): u = x/r^2,
// v = y/r^2 maps every circle through the origin onto a straight line
// 2 u xc + 2 v yc = 1 (centre (xc, yc)), fitted by least squares. The
// weights r^4 are our choice: a residual in v is a residual in position
// over r^2, so they make each hit count by its distance in the transverse
// plane. The hits are first turned so that the outermost lies on the +x
// axis: the line is then v = a + b u with a = 1/(2 yc) near zero for a
// stiff track, which keeps the fit well conditioned up to straight lines.
// Then R = sqrt(1 + b^2) / (2 |a|) and pT = CurvatureGeV |B| R.
//
// Charge: a muon moving out from the beam line bends clockwise seen from
// +z when it is positive and the field points along +z (F = q v x B): its
// circle's centre lies to the right of its direction. The azimuth is that
// of the tangent at the origin.
//
// Eta: z = z0 + s sinh(eta) on a helix, s the transverse arc length from
// the beam line, 2R asin(r/2R); z0 and sinh(eta) are fitted by least
// squares (with one distinct s, z0 is taken as 0). Hits must be finite
// and within 1000 km.
func FitMuonTrack(hits []MuonHit, fieldT float64) (MuonTrack, error) {
	var out MuonTrack
	if !finite(fieldT) || fieldT == 0 {
		return out, fmt.Errorf("%w: field %v T", ErrMuonFit, fieldT)
	}
	ref, rref := -1, 0.0
	for i, h := range hits {
		if !h.usable() {
			return out, fmt.Errorf("%w: hit %d at (%v, %v, %v) mm", ErrMuonFit, i, h.X, h.Y, h.Z)
		}
		if r := math.Hypot(h.X, h.Y); r > rref {
			ref, rref = i, r
		}
	}
	if len(hits) < 2 || ref < 0 {
		return out, fmt.Errorf("%w: %d hits, want 2 or more away from the beam line", ErrMuonFit, len(hits))
	}
	ca, sa := hits[ref].X/rref, hits[ref].Y/rref
	var sw, su, sv, suu, suv float64
	for _, h := range hits {
		x, y := h.X/1000, h.Y/1000 // m
		xr, yr := x*ca+y*sa, -x*sa+y*ca
		r2 := xr*xr + yr*yr
		if r2 == 0 {
			return out, fmt.Errorf("%w: a hit on the beam line", ErrMuonFit)
		}
		u, v, w := xr/r2, yr/r2, r2*r2
		sw += w
		su += w * u
		sv += w * v
		suu += w * u * u
		suv += w * u * v
	}
	det := sw*suu - su*su
	if !(math.Abs(det) > 1e-12*sw*suu) {
		return out, fmt.Errorf("%w: hits at one place", ErrMuonFit)
	}
	b := (sw*suv - su*sv) / det
	a := (suu*sv - su*suv) / det
	kappa := 2 * math.Abs(a) / math.Sqrt(1+b*b)
	switch {
	case a < 0:
		out.Charge = 1 // centre at negative y, to the right of +x
	case a > 0:
		out.Charge = -1
	}
	if fieldT < 0 {
		out.Charge = -out.Charge
	}
	out.Curvature = kappa
	k := max(kappa, minCurvature)
	out.PT = CurvatureGeV * math.Abs(fieldT) / k
	out.Phi = wrapPhi(math.Atan2(sa, ca) + math.Atan(b))

	// z = z0 + lambda s, with s the arc length of each hit.
	var ss, sz, sss, ssz float64
	n := float64(len(hits))
	for _, h := range hits {
		r := math.Hypot(h.X, h.Y) / 1000
		s := r
		if x := k * r / 2; x > 1e-8 {
			s = 2 / k * math.Asin(min(x, 1))
		}
		ss += s
		sz += h.Z / 1000
		sss += s * s
		ssz += s * h.Z / 1000
	}
	var lambda float64
	if d := n*sss - ss*ss; d > 1e-12*n*sss {
		lambda = (n*ssz - ss*sz) / d
		out.Z0 = (sz - lambda*ss) / n * 1000
	} else {
		lambda = ssz / sss
	}
	out.Eta = math.Asinh(lambda)
	out.Stations = len(hits)
	return out, nil
}

// MuonConfig sets up the muon finder. The zero value groups hits in roads
// of 0.2 in phi and in eta, needs two stations and keeps every candidate.
type MuonConfig struct {
	// RoadPhi is the half-width in rad of the azimuthal road around a seed
	// hit in which the hits of the other stations are taken. Zero means
	// 0.2, which holds the four Lantern stations (4.2 to 7.2 m) of a muon
	// above about 9 GeV in a 3 T field.
	RoadPhi float64
	// RoadEta is the half-width of the road in the pseudorapidity of the
	// hit position, asinh(z/r). Zero means 0.2.
	RoadEta float64
	// MinStations is the number of stations a candidate needs, at least 2.
	// Zero means 2.
	MinStations int
	// MinPT in GeV: candidates with a smaller pT are not kept. Zero keeps
	// all.
	MinPT float64
}

// MuonFinder makes muon candidates from the muon-station hits of an event
// (finder: muon-road). Hits are taken station by station from the
// innermost; each unused hit seeds a road, which takes from every other
// station the unused hit nearest in phi within RoadPhi and RoadEta of the
// seed. A road with hits in at least MinStations stations is fitted by
// FitMuonTrack with the field of the grid (Grid.Field) and, if the fit
// succeeds, becomes a candidate and its hits are used; otherwise the seed
// is passed over. Hits with a coordinate that is not finite or beyond
// 1000 km, and hits on the beam line, are ignored.
//
// The collection has the fields pt, eta, phi, charge (+1 or -1, as
// FitMuonTrack) and stations; candidates with pt >= MinPT are kept, sorted
// by pt descending.
//
// A MuonFinder is immutable and safe for concurrent use.
type MuonFinder struct {
	cfg MuonConfig
}

var (
	_ Algorithm     = (*MuonFinder)(nil)
	_ GridValidator = (*MuonFinder)(nil)
)

var _ = standardAlgorithm("muon-road", newMuonFinderFromParams)

var muonSchema = Schema{Fields: []Field{
	{Name: "pt", Kind: Energy}, {Name: "eta", Kind: Number}, {Name: "phi", Kind: Angle},
	{Name: "charge", Kind: Number}, {Name: "stations", Kind: Number},
}}

// NewMuonFinder returns a finder with the given configuration. It returns
// an error for roads outside (0, pi), fewer than 2 stations or a negative
// or non-finite pT.
func NewMuonFinder(cfg MuonConfig) (*MuonFinder, error) {
	if cfg.RoadPhi == 0 {
		cfg.RoadPhi = 0.2
	}
	if cfg.RoadEta == 0 {
		cfg.RoadEta = 0.2
	}
	if cfg.MinStations == 0 {
		cfg.MinStations = 2
	}
	if !(cfg.RoadPhi > 0 && cfg.RoadPhi < math.Pi) || !(cfg.RoadEta > 0 && cfg.RoadEta < math.Pi) {
		return nil, fmt.Errorf("trigger: muon roads %v in phi and %v in eta, want 0 < road < pi", cfg.RoadPhi, cfg.RoadEta)
	}
	if cfg.MinStations < 2 {
		return nil, fmt.Errorf("trigger: muon candidates from %d stations, want at least 2", cfg.MinStations)
	}
	if !finite(cfg.MinPT) || cfg.MinPT < 0 {
		return nil, fmt.Errorf("trigger: muon min_pt %v GeV, want a finite value >= 0", cfg.MinPT)
	}
	return &MuonFinder{cfg: cfg}, nil
}

func newMuonFinderFromParams(p *Params) (Algorithm, error) {
	roadPhi := p.Number("road_phi", 0.2)
	roadEta := p.Number("road_eta", 0.2)
	stations := p.Int("min_stations", 2)
	minPT := p.Energy("min_pt", 0)
	for _, k := range []struct {
		key string
		v   float64
	}{{"road_phi", roadPhi}, {"road_eta", roadEta}} {
		if !(k.v > 0 && k.v < math.Pi) {
			p.Fail(k.key, fmt.Sprintf("%s %s", k.key, formatNumber(k.v)), "a road half-width w with 0 < w < pi")
		}
	}
	if stations < 2 {
		p.Fail("min_stations", fmt.Sprintf("min_stations %d", stations), "at least 2 (the beam line and two hits fix a circle)")
	}
	if minPT < 0 {
		p.Fail("min_pt", "min_pt "+formatEnergy(minPT), "an energy >= 0 GeV")
	}
	if err := p.Err(); err != nil {
		return nil, err
	}
	return NewMuonFinder(MuonConfig{RoadPhi: roadPhi, RoadEta: roadEta, MinStations: stations, MinPT: minPT})
}

// Config returns the configuration, with the defaults filled in.
func (f *MuonFinder) Config() MuonConfig { return f.cfg }

// Schema returns the fields pt, eta, phi, charge, stations.
func (f *MuonFinder) Schema() Schema { return muonSchema }

// ValidateGrid reports a field the finder cannot work with; it needs no
// calorimeter grid.
func (f *MuonFinder) ValidateGrid(g Grid) error {
	if !finite(g.FieldT) {
		return fmt.Errorf("trigger: solenoid field %v T, want a finite value", g.FieldT)
	}
	return nil
}

// muonHit is a hit prepared for the road search.
type muonHit struct {
	idx      int32
	station  int
	phi, eta float64
}

type muonScratch struct {
	hits   []muonHit
	used   []bool
	road   []int32 // indices into hits
	fit    []MuonHit
	tracks []MuonTrack
}

// Run finds the muon candidates of one event.
func (f *MuonFinder) Run(in *Input, out *Output) {
	if in.Event == nil || len(in.Event.MuonHits) < 2 {
		return
	}
	sc, _ := out.Scratch.(*muonScratch)
	if sc == nil {
		sc = &muonScratch{}
		out.Scratch = sc
	}
	raw := in.Event.MuonHits
	hits := sc.hits[:0]
	for i, h := range raw {
		if !h.usable() {
			continue
		}
		r := math.Hypot(h.X, h.Y)
		if r == 0 {
			continue
		}
		hits = append(hits, muonHit{idx: int32(i), station: h.Station, phi: math.Atan2(h.Y, h.X), eta: math.Asinh(h.Z / r)})
	}
	// Seeds from the innermost station; within a station by phi, so that
	// the order the hits arrive in matters only for hits at exactly the same
	// azimuth.
	slices.SortStableFunc(hits, func(a, b muonHit) int {
		if c := cmp.Compare(a.station, b.station); c != 0 {
			return c
		}
		return cmp.Compare(a.phi, b.phi)
	})
	used := slices.Grow(sc.used[:0], len(hits))[:len(hits)]
	clear(used)
	field := in.Grid.Field()
	tracks := sc.tracks[:0]
	for s := range hits {
		if used[s] {
			continue
		}
		seed := hits[s]
		road := append(sc.road[:0], int32(s))
		// The best unused hit of each other station, hits being sorted by
		// station.
		best, bestD := int32(-1), 0.0
		for k := range hits {
			h := &hits[k]
			if k > 0 && h.station != hits[k-1].station && best >= 0 {
				road, best = append(road, best), -1
			}
			if used[k] || h.station == seed.station {
				continue
			}
			d := DeltaPhi(h.phi, seed.phi)
			if d >= f.cfg.RoadPhi || math.Abs(h.eta-seed.eta) >= f.cfg.RoadEta {
				continue
			}
			if best < 0 || d < bestD {
				best, bestD = int32(k), d
			}
		}
		if best >= 0 {
			road = append(road, best)
		}
		sc.road = road
		if len(road) < f.cfg.MinStations {
			continue
		}
		fit := sc.fit[:0]
		for _, k := range road {
			fit = append(fit, raw[hits[k].idx])
		}
		sc.fit = fit
		tr, err := FitMuonTrack(fit, field)
		if err != nil {
			continue
		}
		for _, k := range road {
			used[k] = true
		}
		tracks = append(tracks, tr)
	}
	slices.SortStableFunc(tracks, func(a, b MuonTrack) int { return cmp.Compare(b.PT, a.PT) })
	for _, t := range tracks {
		if t.PT < f.cfg.MinPT {
			break
		}
		out.Objects.Add(t.PT, t.Eta, t.Phi, float64(t.Charge), float64(t.Stations))
	}
	sc.hits, sc.used, sc.tracks = hits, used, tracks
}
