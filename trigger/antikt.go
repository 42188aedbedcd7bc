package trigger

import (
	"cmp"
	"fmt"
	"math"
	"slices"
)

// AntiKt clusters four-vectors into jets with the anti-kt algorithm of
// M. Cacciari, G.P. Salam and G. Soyez, JHEP 04 (2008) 063
// (arXiv:0802.1189): the distance of two pseudojets is
// d_ij = min(kt_i^-2, kt_j^-2) dR_ij^2 / R^2, with dR_ij^2 = dy^2 + dphi^2
// in rapidity y and azimuth phi, and the distance to the beam is
// d_iB = kt_i^-2. Repeatedly the smallest distance is taken: a pair is
// merged by adding the four-vectors (E-scheme), a pseudojet nearest the
// beam becomes a jet. Rapidity and azimuth follow FastJet's conventions
// (FourMomentum.Rapidity and Phi).
//
// The search is the tiled one of M. Cacciari and G.P. Salam, "Dispelling
// the N^3 myth for the kt jet-finder", Phys. Lett. B 641 (2006) 57
// (hep-ph/0512210; reference from memory): the smallest d_ij always pairs a pseudojet with its
// geometric nearest neighbour, so each pseudojet keeps its nearest
// neighbour within R, found among the tiles of side >= R next to its own;
// after a step only the pseudojets near the ones that changed are looked
// at again. The smallest distance is kept in a tournament tree. An event of
// N inputs costs about N times the pseudojets in nine tiles, rather than
// the N^3 of the direct search.
//
// An AntiKt keeps its working storage from call to call, so that
// clustering events of similar size does not allocate. It is not safe for
// concurrent use: give each goroutine its own.
type AntiKt struct {
	r, r2 float64

	ny, nphi          int
	ylo, invWy        float64
	invWphi           float64
	mom               []FourMomentum
	js                []akJet
	pos               []akPos // kept apart from js: the searches read only these
	nextT             []int32 // next slot in the same tile, -1 at the end
	orig              []int32 // input index of each slot
	diJ               []float64
	tree              []int32
	tileHead          []int32
	nbr               []int32 // the tiles around each tile, 9 per tile
	nbrN              []uint8 // how many of the 9 are used
	refs              []int32 // per slot, how many pseudojets have it as nearest neighbour
	tileStamp         []uint32
	stamp             uint32
	first, last, next []int32 // constituent chains, by slot
	count             []int32
	union             []int32
}

// akJet is the clustering state of one pseudojet.
type akJet struct {
	diB    float64 // kt^-2, the distance to the beam
	nnDist float64 // dR^2 to the nearest neighbour, at most R^2
	nn     int32   // slot of the nearest neighbour within R, or -1
	tile   int32
	prev   int32 // the previous slot in the tile's list, -1 at the head
}

// akPos is where a pseudojet is: rapidity and azimuth in [0, 2pi).
type akPos struct{ rap, phi float64 }

// AntiKtJet is one jet found by an AntiKt.
type AntiKtJet struct {
	FourMomentum
	// Constituents is the number of inputs clustered into the jet.
	Constituents int
	first        int32
}

// maxTilesPerAxis bounds the tiling so that a tiny radius cannot make it
// large; tiles wider than R only cost speed, never correctness.
const maxTilesPerAxis = 256

// tileRapidityLimit bounds the rapidity range that is tiled, from
// -tileRapidityLimit to +tileRapidityLimit whatever the inputs; inputs
// beyond it share the outermost tiles.
const tileRapidityLimit = 10

// NewAntiKt returns a clusterer of radius r, which must be finite with
// 0 < r <= 2 pi.
func NewAntiKt(r float64) (*AntiKt, error) {
	if !(r > 0 && r <= 2*math.Pi) {
		return nil, fmt.Errorf("trigger: anti-kt radius %v, want 0 < R <= 2 pi", r)
	}
	return &AntiKt{r: r, r2: r * r}, nil
}

// R returns the radius.
func (a *AntiKt) R() float64 { return a.r }

// Cluster clusters the inputs and returns the jets with pT >= ptMin,
// appended to jets[:0], sorted by decreasing pT. Inputs with a component
// that is not finite or above 1e150 GeV in size (whose square would
// overflow) are left out. The jets' constituents can be listed with
// Constituents until the next call.
func (a *AntiKt) Cluster(inputs []FourMomentum, ptMin float64, jets []AntiKtJet) []AntiKtJet {
	a.begin(len(inputs))
	for i, p := range inputs {
		if !p.usable() {
			continue
		}
		a.add(int32(i), p, p.Rapidity(), p.Phi())
	}
	return a.run(ptMin, math.Inf(-1), jets[:0])
}

// Constituents appends to dst the input indices of the constituents of j,
// a jet of the last call to Cluster, and returns the extended slice.
func (a *AntiKt) Constituents(j AntiKtJet, dst []int) []int {
	for k := j.first; k >= 0 && int(k) < len(a.next); k = a.next[k] {
		dst = append(dst, int(a.orig[k]))
	}
	return dst
}

// begin empties the inputs, with room for n.
func (a *AntiKt) begin(n int) {
	a.mom = slices.Grow(a.mom[:0], n)
	a.js = slices.Grow(a.js[:0], n)
	a.pos = slices.Grow(a.pos[:0], n)
	a.orig = slices.Grow(a.orig[:0], n)
}

// add appends one input, index orig in the caller's list, with its
// rapidity and azimuth in [0, 2pi) given.
func (a *AntiKt) add(orig int32, p FourMomentum, rap, phi float64) {
	a.mom = append(a.mom, p)
	a.js = append(a.js, akJet{diB: beamDistance(p)})
	a.pos = append(a.pos, akPos{rap, phi})
	a.orig = append(a.orig, orig)
}

// maxComponent bounds the four-vector components the clustering takes:
// sums of squares of larger ones overflow.
const maxComponent = 1e150

// usable reports whether every component is finite and below maxComponent
// in size.
func (p FourMomentum) usable() bool {
	return math.Abs(p.Px) < maxComponent && math.Abs(p.Py) < maxComponent && math.Abs(p.Pz) < maxComponent && math.Abs(p.E) < maxComponent
}

// beamDistance returns kt^-2, with FastJet's guard for kt = 0.
func beamDistance(p FourMomentum) float64 {
	if kt2 := p.Pt2(); kt2 > 1e-300 {
		return 1 / kt2
	}
	return 1e300
}

func (a *AntiKt) setupTiles() {
	if a.tileHead != nil {
		return // the tiling depends on R only; every tile is empty between runs
	}
	// Tiles a hair wider than R, so that rounding cannot put two inputs
	// closer than R two tiles apart.
	w := a.r * (1 + 1e-7)
	const span = 2 * tileRapidityLimit
	a.ny = max(int(min(span/w, maxTilesPerAxis)), 1)
	a.ylo, a.invWy = -tileRapidityLimit, float64(a.ny)/span
	a.nphi = max(int(min(2*math.Pi/w, maxTilesPerAxis)), 1)
	a.invWphi = float64(a.nphi) / (2 * math.Pi)
	nt := a.ny * a.nphi
	a.tileHead = make([]int32, nt)
	for i := range a.tileHead {
		a.tileHead[i] = -1
	}
	a.tileStamp = make([]uint32, nt)
	a.nbr = make([]int32, 9*nt)
	a.nbrN = make([]uint8, nt)
	var buf [9]int32
	for t := range nt {
		l := a.neighbours(int32(t), &buf)
		copy(a.nbr[9*t:], l)
		a.nbrN[t] = uint8(len(l))
	}
}

// around returns the tiles around tile t, t included.
func (a *AntiKt) around(t int32) []int32 {
	return a.nbr[9*t : 9*t+int32(a.nbrN[t])]
}

func resizeInt32(s []int32, n int) []int32 {
	if cap(s) < n {
		return make([]int32, n)
	}
	return s[:n]
}

func (a *AntiKt) tileOf(rap, phi float64) int32 {
	iy := 0
	if a.ny > 1 {
		f := (rap - a.ylo) * a.invWy
		switch {
		case !(f > 0):
			iy = 0
		case f >= float64(a.ny):
			iy = a.ny - 1
		default:
			iy = int(f)
		}
	}
	ip := int(phi * a.invWphi)
	if ip >= a.nphi {
		ip = a.nphi - 1
	} else if ip < 0 {
		ip = 0
	}
	return int32(iy*a.nphi + ip)
}

// neighbours fills buf with the tile t and the tiles around it, each once.
func (a *AntiKt) neighbours(t int32, buf *[9]int32) []int32 {
	iy, ip := int(t)/a.nphi, int(t)%a.nphi
	out := buf[:0]
	var cols [3]int
	nc := 0
	for d := -1; d <= 1; d++ {
		c := (ip + d + a.nphi) % a.nphi
		if !slices.Contains(cols[:nc], c) {
			cols[nc] = c
			nc++
		}
	}
	for y := max(iy-1, 0); y <= min(iy+1, a.ny-1); y++ {
		for _, c := range cols[:nc] {
			out = append(out, int32(y*a.nphi+c))
		}
	}
	return out
}

func (a *AntiKt) insert(i int32) {
	j := &a.js[i]
	t := a.tileOf(a.pos[i].rap, a.pos[i].phi)
	nx := a.tileHead[t]
	j.tile, j.prev, a.nextT[i] = t, -1, nx
	if nx >= 0 {
		a.js[nx].prev = i
	}
	a.tileHead[t] = i
}

func (a *AntiKt) remove(i int32) {
	j := &a.js[i]
	nx := a.nextT[i]
	if j.prev >= 0 {
		a.nextT[j.prev] = nx
	} else {
		a.tileHead[j.tile] = nx
	}
	if nx >= 0 {
		a.js[nx].prev = j.prev
	}
}

// dist returns dR^2 of two pseudojets, in the operand order of FastJet's
// cylinder distance so that the sums round alike.
func (a *AntiKt) dist(i, k int32) float64 {
	p, q := &a.pos[i], &a.pos[k]
	dphi := math.Abs(p.phi - q.phi)
	if dphi > math.Pi {
		dphi = 2*math.Pi - dphi
	}
	dy := p.rap - q.rap
	return dphi*dphi + dy*dy
}

// findNN sets the nearest neighbour of i within R.
func (a *AntiKt) findNN(i int32) {
	best, nn := a.r2, int32(-1)
	p := a.pos[i]
	pos, next := a.pos, a.nextT
	for _, t := range a.around(a.js[i].tile) {
		for k := a.tileHead[t]; k >= 0; k = next[k] {
			q := &pos[k]
			dphi := math.Abs(p.phi - q.phi)
			if dphi > math.Pi {
				dphi = 2*math.Pi - dphi
			}
			dy := p.rap - q.rap
			if d := dphi*dphi + dy*dy; d < best && k != i {
				best, nn = d, k
			}
		}
	}
	a.setNN(i, nn, best)
}

// initNN finds every nearest neighbour, looking at each pair of
// pseudojets in neighbouring tiles once: from the lower-numbered tile, or
// within a tile from the earlier in its list.
func (a *AntiKt) initNN() {
	js, pos, next := a.js, a.pos, a.nextT
	for i := range js {
		js[i].nn, js[i].nnDist = -1, a.r2
	}
	for i := range js {
		t := js[i].tile
		p := pos[i]
		bi, bd := js[i].nn, js[i].nnDist
		for _, u := range a.around(t) {
			k := a.tileHead[u]
			switch {
			case u < t:
				continue
			case u == t:
				k = next[i]
			}
			for ; k >= 0; k = next[k] {
				q := &pos[k]
				dphi := math.Abs(p.phi - q.phi)
				if dphi > math.Pi {
					dphi = 2*math.Pi - dphi
				}
				dy := p.rap - q.rap
				d := dphi*dphi + dy*dy
				if d < bd {
					bi, bd = k, d
				}
				if jk := &js[k]; d < jk.nnDist {
					jk.nn, jk.nnDist = int32(i), d
				}
			}
		}
		js[i].nn, js[i].nnDist = bi, bd
	}
	for i := range js {
		if k := js[i].nn; k >= 0 {
			a.refs[k]++
		}
	}
}

// setNN makes k (or none, -1) the nearest neighbour of i at dR^2 d,
// keeping the reference counts.
func (a *AntiKt) setNN(i, k int32, d float64) {
	j := &a.js[i]
	if j.nn >= 0 {
		a.refs[j.nn]--
	}
	if k >= 0 {
		a.refs[k]++
	}
	j.nn, j.nnDist = k, d
}

// distance returns the smallest of i's distances, times R^2: to its
// nearest neighbour, or to the beam when it has none within R.
func (a *AntiKt) distance(i int32) float64 {
	j := &a.js[i]
	f := j.diB
	if j.nn >= 0 {
		f = min(f, a.js[j.nn].diB)
	}
	return j.nnDist * f
}

// The tournament tree: leaf p+i holds slot i; every inner node the slot of
// its subtree with the smallest diJ (the left one on ties).

func (a *AntiKt) buildTree() {
	n := len(a.js)
	p := 1
	for p < n {
		p *= 2
	}
	a.diJ = slices.Grow(a.diJ[:0], p)[:p]
	a.tree = resizeInt32(a.tree, 2*p)
	for i := 0; i < p; i++ {
		if i < n {
			a.diJ[i] = a.distance(int32(i))
		} else {
			a.diJ[i] = math.Inf(1)
		}
		a.tree[p+i] = int32(i)
	}
	for k := p - 1; k >= 1; k-- {
		a.tree[k] = a.minOf(a.tree[2*k], a.tree[2*k+1])
	}
}

func (a *AntiKt) minOf(l, r int32) int32 {
	if a.diJ[r] < a.diJ[l] {
		return r
	}
	return l
}

func (a *AntiKt) setDiJ(i int32, v float64) {
	a.diJ[i] = v
	p := len(a.tree) / 2
	for k := (p + int(i)) / 2; k >= 1; k /= 2 {
		old := a.tree[k]
		w := a.minOf(a.tree[2*k], a.tree[2*k+1])
		a.tree[k] = w
		if w == old && w != i {
			return // this subtree's winner stands, so every one above does
		}
	}
}

// markTiles adds to a.union the tiles around t not yet in it this step.
func (a *AntiKt) markTiles(t int32) {
	for _, u := range a.around(t) {
		if a.tileStamp[u] != a.stamp {
			a.tileStamp[u] = a.stamp
			a.union = append(a.union, u)
		}
	}
}

func (a *AntiKt) nextStamp() {
	a.stamp++
	if a.stamp == 0 { // wrapped: forget every old mark
		clear(a.tileStamp)
		a.stamp = 1
	}
	a.union = a.union[:0]
}

// run clusters the inputs added since begin and appends the jets with
// pT >= ptMin and E_T >= etMin.
func (a *AntiKt) run(ptMin, etMin float64, jets []AntiKtJet) []AntiKtJet {
	n := len(a.js)
	a.first = resizeInt32(a.first, n)
	a.last = resizeInt32(a.last, n)
	a.next = resizeInt32(a.next, n)
	a.count = resizeInt32(a.count, n)
	a.nextT = resizeInt32(a.nextT, n)
	a.refs = resizeInt32(a.refs, n)
	for i := range n {
		a.first[i], a.last[i], a.next[i], a.count[i], a.refs[i] = int32(i), int32(i), -1, 1, 0
		a.js[i].nn = -1
	}
	if n == 0 {
		return jets
	}
	a.setupTiles()
	for i := range n {
		a.insert(int32(i))
	}
	a.initNN()
	a.buildTree()
	pt2Min := ptMin * ptMin
	for range n {
		ia := a.tree[1]
		ib := a.js[ia].nn
		a.nextStamp()
		if ib < 0 {
			// Nearest the beam: a jet.
			if p := a.mom[ia]; p.Pt2() >= pt2Min && (etMin <= 0 || p.ET() >= etMin) {
				jets = append(jets, AntiKtJet{FourMomentum: p, Constituents: int(a.count[ia]), first: a.first[ia]})
			}
			a.remove(ia)
			a.setDiJ(ia, math.Inf(1))
			if a.refs[ia] == 0 {
				continue // no pseudojet had it as nearest neighbour
			}
			a.markTiles(a.js[ia].tile)
			for _, t := range a.union {
				for k := a.tileHead[t]; k >= 0; k = a.nextT[k] {
					if a.js[k].nn == ia {
						a.findNN(k)
						a.setDiJ(k, a.distance(k))
					}
				}
			}
			continue
		}
		keep, drop := min(ia, ib), max(ia, ib)
		tileA, tileB := a.js[ia].tile, a.js[ib].tile
		a.remove(ia)
		a.remove(ib)
		p := a.mom[ia].Add(a.mom[ib])
		a.mom[keep] = p
		a.pos[keep] = akPos{p.Rapidity(), p.Phi()}
		a.js[keep].diB = beamDistance(p)
		a.next[a.last[keep]] = a.first[drop]
		a.last[keep] = a.last[drop]
		a.count[keep] += a.count[drop]
		a.setDiJ(drop, math.Inf(1))
		a.insert(keep)
		// The merged pseudojet starts without a neighbour: every link to
		// either parent is found and redone below.
		a.setNN(keep, -1, a.r2)
		a.setNN(drop, -1, a.r2)
		kj := &a.js[keep]
		a.markTiles(tileA)
		if tileB != tileA {
			a.markTiles(tileB)
		}
		if kj.tile != tileA && kj.tile != tileB {
			a.markTiles(kj.tile)
		}
		for _, t := range a.union {
			for k := a.tileHead[t]; k >= 0; k = a.nextT[k] {
				if k == keep {
					continue
				}
				j := &a.js[k]
				changed := false
				if j.nn == ia || j.nn == ib {
					a.findNN(k) // sees the merged pseudojet too
					changed = true
				}
				d := a.dist(k, keep)
				if d < j.nnDist {
					a.setNN(k, keep, d)
					changed = true
				}
				if d < kj.nnDist {
					a.setNN(keep, k, d)
				}
				if changed {
					a.setDiJ(k, a.distance(k))
				}
			}
		}
		a.setDiJ(keep, a.distance(keep))
	}
	slices.SortStableFunc(jets, func(x, y AntiKtJet) int { return cmp.Compare(y.Pt2(), x.Pt2()) })
	return jets
}
