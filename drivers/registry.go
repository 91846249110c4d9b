package drivers

import (
	"context"
	"fmt"
	"sort"
	"sync"
)

// Config is what a driver receives to open one instrument: its name and role
// from the bench file, and the driver-specific settings, already decoded by
// the bench-file loader into the driver's own type (see Driver.NewSettings).
type Config struct {
	Name     string
	Role     Role
	Settings any
}

// Driver opens instruments of one or more roles.
type Driver interface {
	// Roles lists the roles this driver can open.
	Roles() []Role
	// Open connects to one instrument. The returned value implements the role
	// interface named by cfg.Role.
	Open(ctx context.Context, cfg Config) (Instrument, error)
}

var (
	regMu    sync.RWMutex
	registry = map[string]Driver{}
)

// Register makes a driver available by name. It panics on a duplicate name,
// as database/sql does: registration happens in init functions.
func Register(name string, d Driver) {
	regMu.Lock()
	defer regMu.Unlock()
	if d == nil {
		panic("drivers: Register driver is nil")
	}
	if _, dup := registry[name]; dup {
		panic("drivers: Register called twice for driver " + name)
	}
	registry[name] = d
}

// Lookup returns the driver registered under name.
func Lookup(name string) (Driver, error) {
	regMu.RLock()
	defer regMu.RUnlock()
	d, ok := registry[name]
	if !ok {
		return nil, fmt.Errorf("unknown driver %q (registered: %v)", name, namesLocked())
	}
	return d, nil
}

// Names lists the registered driver names, sorted.
func Names() []string {
	regMu.RLock()
	defer regMu.RUnlock()
	return namesLocked()
}

func namesLocked() []string {
	out := make([]string, 0, len(registry))
	for n := range registry {
		out = append(out, n)
	}
	sort.Strings(out)
	return out
}
