package detector

import (
	"math"
	"slices"
	"strings"
	"testing"
)

// DESIGN.md section 11: the Lantern muon system covers |eta| < 2.4; its
// sources follow the calorimeter ones and split the azimuth evenly.
func TestPartitionMuonSources(t *testing.T) {
	g := Lantern()
	if g.MuonSources != 8 || len(g.MuonStations) != 4 || g.MuonEtaMax != 2.4 || g.FieldT != 3.0 {
		t.Fatalf("Lantern muon system: %d sources, %d stations, eta %v, field %v", g.MuonSources, len(g.MuonStations), g.MuonEtaMax, g.FieldT)
	}
	p, err := NewPartition(g, 16)
	if err != nil {
		t.Fatal(err)
	}
	if p.Sources() != 16 || p.CaloSources() != 16 || p.MuonSources() != 8 || p.AllSources() != 24 {
		t.Fatalf("sources %d/%d/%d/%d", p.Sources(), p.CaloSources(), p.MuonSources(), p.AllSources())
	}
	if !slices.Equal(p.SourceIDs(), idRange(1, 16)) || !slices.Equal(p.MuonSourceIDs(), idRange(17, 8)) || !slices.Equal(p.AllSourceIDs(), idRange(1, 24)) {
		t.Fatalf("ids %v %v %v", p.SourceIDs(), p.MuonSourceIDs(), p.AllSourceIDs())
	}
	for id := uint32(0); id <= 25; id++ {
		want := SourceUnknown
		switch {
		case id >= 1 && id <= 16:
			want = SourceCalo
		case id >= 17 && id <= 24:
			want = SourceMuon
		}
		if got := p.Kind(id); got != want {
			t.Errorf("Kind(%d) = %v, want %v", id, got, want)
		}
		k, ok := p.MuonPosition(id)
		if ok != (want == SourceMuon) || (ok && p.MuonSourceID(k) != id) {
			t.Errorf("MuonPosition(%d) = %d, %v", id, k, ok)
		}
	}
	for k := range 8 {
		centre := -math.Pi + (float64(k)+0.5)*2*math.Pi/8
		for _, phi := range []float64{centre, centre + 2*math.Pi, centre - 4*math.Pi} {
			if got := p.MuonSector(phi); got != k {
				t.Errorf("MuonSector(%v) = %d, want %d", phi, got, k)
			}
		}
	}
	if got := p.MuonSector(math.Pi); got != 0 {
		t.Errorf("phi = pi wraps to sector %d, want 0", got)
	}
	q, err := NewPartitionWithMuons(g, 4, 0)
	if err != nil || q.AllSources() != 4 || len(q.MuonSourceIDs()) != 0 {
		t.Errorf("no muon sources: %v, %d sources", err, q.AllSources())
	}
	if _, err := NewPartitionWithMuons(g, 4, 257); err == nil {
		t.Error("257 muon sources must be refused")
	}
}

func TestDescriptionValidation(t *testing.T) {
	for _, tc := range []struct{ from, to, want string }{
		{"radius_m: 5.2,", "radius_m: 4.0,", "muon.stations[1].radius_m"},
		{"radius_m: 4.2,", "radius_m: 1.0,", "muon.stations[0].radius_m"},
		{"eta_max: 2.4", "eta_max: 0", "muon.eta_max"},
		{"muon_sources: 8", "muon_sources: -1", "readout.muon_sources"},
		{"clock_jitter_ns: 0.3", "clock_jitter_ns: -0.3", "readout.clock_jitter_ns"},
		{"zero_suppression_counts: 2", "zero_suppression_counts: 5000", "zero_suppression_counts"},
		{"stochastic: 0.60", "stochastic: -0.6", "calorimeter.had.stochastic"},
		{"inner_radius_m: 1.5", "inner_radius_m: -1", "calorimeter.inner_radius_m"},
		{"muon_sources: 8", "muon_sorces: 8", "muon_sorces"},
	} {
		text := strings.Replace(string(lanternYAML), tc.from, tc.to, 1)
		_, err := ParseDescription("t.yaml", []byte(text))
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s -> %s: error %v, want one naming %s", tc.from, tc.to, err, tc.want)
		}
	}
	// Zero values take the documented defaults.
	text := strings.NewReplacer("  inner_radius_m: 1.5\n", "", "  endcap_z_m: 3.6\n", "", "  zero_suppression_counts: 2\n", "").Replace(string(lanternYAML))
	d, err := ParseDescription("t.yaml", []byte(text))
	if err != nil {
		t.Fatal(err)
	}
	if g := d.Geometry; g.InnerRadiusM != 1.5 || g.EndcapZM != 3.6 || g.ZeroSuppressionCounts != 1 {
		t.Errorf("defaults %v %v %v", g.InnerRadiusM, g.EndcapZM, g.ZeroSuppressionCounts)
	}
}
