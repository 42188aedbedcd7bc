package trigger

import (
	"fmt"
	"sort"
	"strings"
	"sync"
)

// Factory builds an Algorithm from the parameters of a menu's feature
// block. It reads every parameter it knows through p (with its default);
// the caller rejects the keys it did not read. A Factory reports a bad value
// with p.Fail and returns p.Err().
type Factory func(p *Params) (Algorithm, error)

// Registry maps algorithm names, as menus write them after "finder:", to
// factories. It is safe for concurrent use. The zero value is not usable;
// call NewRegistry.
type Registry struct {
	mu        sync.RWMutex
	factories map[string]Factory
}

// NewRegistry returns an empty registry. RegisterStandard adds the
// algorithms this package provides.
func NewRegistry() *Registry {
	return &Registry{factories: map[string]Factory{}}
}

// Register adds an algorithm. It panics on an empty name, a nil factory or
// a name already registered: all three are programming errors.
func (r *Registry) Register(name string, f Factory) {
	if name == "" {
		panic("trigger: Register with an empty algorithm name")
	}
	if f == nil {
		panic(fmt.Sprintf("trigger: Register of algorithm %q with a nil factory", name))
	}
	r.mu.Lock()
	defer r.mu.Unlock()
	if _, dup := r.factories[name]; dup {
		panic(fmt.Sprintf("trigger: algorithm %q registered twice", name))
	}
	r.factories[name] = f
}

// Lookup returns the factory registered under name.
func (r *Registry) Lookup(name string) (Factory, bool) {
	r.mu.RLock()
	defer r.mu.RUnlock()
	f, ok := r.factories[name]
	return f, ok
}

// Names returns the registered names, sorted.
func (r *Registry) Names() []string {
	r.mu.RLock()
	defer r.mu.RUnlock()
	names := make([]string, 0, len(r.factories))
	for n := range r.factories {
		names = append(names, n)
	}
	sort.Strings(names)
	return names
}

// RegisterStandard registers the algorithms of this package under their
// names: "window" (sliding-window jets), "antikt" (anti-kt jets),
// "em-cluster" (electromagnetic clusters with isolation), "muon-road" (muon
// candidates from station hits) and "narrow-cluster" (narrow hadronic
// clusters). It panics if r already holds one of these names.
func RegisterStandard(r *Registry) {
	names := make([]string, 0, len(standardFactories))
	for n := range standardFactories {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, n := range names {
		r.Register(n, standardFactories[n])
	}
}

// standardFactories holds the algorithms RegisterStandard registers. The
// file of each algorithm adds it with a package-level
//
//	var _ = standardAlgorithm("name", factory)
//
// so that adding an algorithm to this package touches no other file.
var standardFactories = map[string]Factory{}

// standardAlgorithm adds f to the standard algorithms under name. It panics
// on an empty name, a nil factory or a name used twice, like Register.
func standardAlgorithm(name string, f Factory) bool {
	if name == "" || f == nil {
		panic(fmt.Sprintf("trigger: standard algorithm %q with an empty name or a nil factory", name))
	}
	if _, dup := standardFactories[name]; dup {
		panic(fmt.Sprintf("trigger: standard algorithm %q defined twice", name))
	}
	standardFactories[name] = f
	return true
}

var (
	standardOnce     sync.Once
	standardRegistry *Registry
)

// StandardRegistry returns a registry holding the standard algorithms,
// built on first use and shared; ParseMenu uses it. Register nothing into it:
// build your own with NewRegistry and RegisterStandard and use
// ParseMenuWith.
func StandardRegistry() *Registry {
	standardOnce.Do(func() {
		standardRegistry = NewRegistry()
		RegisterStandard(standardRegistry)
	})
	return standardRegistry
}

// quotedList renders names as "a, b, c" for error messages.
func quotedList(names []string) string {
	if len(names) == 0 {
		return "(none)"
	}
	return strings.Join(names, ", ")
}
