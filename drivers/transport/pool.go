package transport

import (
	"context"
	"fmt"
	"sync"
)

// Pool hands out shared links by key (the port path or address), so that
// the instruments of one multi-axis controller use one Link and one mutex.
// The link is closed when its last user closes its handle.
type Pool struct {
	mu    sync.Mutex
	links map[string]*pooled
}

type pooled struct {
	ex   Exchanger
	spec any // the configuration the link was made with
	refs int
}

// DefaultPool is the process-wide pool used by the drivers.
var DefaultPool = &Pool{}

// Get returns a handle on the exchanger for key, making it with mk on first
// use. spec is the link's configuration (comparable); a second user asking
// for the same key with a different spec gets an error, because one port
// cannot have two baud rates.
func (p *Pool) Get(key string, spec any, mk func() (Exchanger, error)) (Exchanger, error) {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.links == nil {
		p.links = map[string]*pooled{}
	}
	if e := p.links[key]; e != nil {
		if e.spec != spec {
			return nil, fmt.Errorf("port %s is already open with settings %+v; this instrument asks for %+v", key, e.spec, spec)
		}
		e.refs++
		return &handle{p: p, key: key, e: e}, nil
	}
	ex, err := mk()
	if err != nil {
		return nil, err
	}
	e := &pooled{ex: ex, spec: spec, refs: 1}
	p.links[key] = e
	return &handle{p: p, key: key, e: e}, nil
}

// Users returns how many handles are open on key.
func (p *Pool) Users(key string) int {
	p.mu.Lock()
	defer p.mu.Unlock()
	if e := p.links[key]; e != nil {
		return e.refs
	}
	return 0
}

type handle struct {
	p    *Pool
	key  string
	e    *pooled
	once sync.Once
}

func (h *handle) Exchanger() Exchanger { return h.e.ex }

func (h *handle) Exchange(ctx context.Context, tx Tx) (string, error) {
	return h.e.ex.Exchange(ctx, tx)
}

func (h *handle) Close() error {
	var err error
	h.once.Do(func() {
		h.p.mu.Lock()
		h.e.refs--
		last := h.e.refs == 0
		if last && h.p.links[h.key] == h.e {
			delete(h.p.links, h.key)
		}
		h.p.mu.Unlock()
		if last {
			err = h.e.ex.Close()
		}
	})
	return err
}
