package bench

import (
	"context"
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/gliss-lab/gliss/drivers"
)

// FaultKind is a way a simulated instrument fails.
type FaultKind int

// The fault kinds.
const (
	// FaultTimeout: the instrument stops answering. Each affected call waits
	// Fault.Delay (instrument time) and returns an error wrapping
	// drivers.ErrUnavailable; nothing moves.
	FaultTimeout FaultKind = iota + 1
	// FaultError: the instrument answers with an error reply (a controller
	// error code). The call returns an error wrapping ErrReply; nothing moves.
	FaultError
	// FaultStuck: a move does not arrive. The axis (stage, attenuator or
	// laser) moves part of the way, stops there, and the call returns an
	// error wrapping ErrStalled. Queries answer normally.
	FaultStuck
)

func (k FaultKind) String() string {
	switch k {
	case FaultTimeout:
		return "timeout"
	case FaultError:
		return "error"
	case FaultStuck:
		return "stuck"
	}
	return fmt.Sprintf("FaultKind(%d)", int(k))
}

// Fault is a failure armed on one simulated instrument.
type Fault struct {
	Kind FaultKind
	// Delay is how long a timed-out call waits before giving up, in
	// instrument time (scaled by Options.Speed; no wait when Instant).
	// 0 means 2 s.
	Delay time.Duration
	// Calls is how many calls the fault affects before it clears itself
	// (0: until ClearFault).
	Calls int
	// Reply is the text of the error reply (FaultError; "" means
	// "hardware fault").
	Reply string
	// StallFraction is the fraction of the move done before a stuck axis
	// stops, in [0, 1) (FaultStuck; 0 means 0.5).
	StallFraction float64
}

// ErrReply marks an error reply from a simulated instrument (FaultError).
var ErrReply = errors.New("instrument replied with an error")

// ErrStalled marks a move that did not arrive (FaultStuck).
var ErrStalled = errors.New("move did not arrive")

// simInstrument is what every instrument of this package is.
type simInstrument interface {
	simBase() *base
}

func findSim(b *drivers.Bench, instrument string) (*base, error) {
	if b == nil {
		return nil, errors.New("sim faults: bench is nil")
	}
	e := b.ByName(instrument)
	if e == nil {
		names := make([]string, 0, len(b.Entries))
		for _, e := range b.Entries {
			names = append(names, e.Name)
		}
		return nil, fmt.Errorf("sim faults: instrument %q: no such instrument (bench has %v)", instrument, names)
	}
	si, ok := e.Inst.(simInstrument)
	if !ok {
		return nil, fmt.Errorf("sim faults: instrument %q: driver %q is not simulated", instrument, e.Driver)
	}
	return si.simBase(), nil
}

// InjectFault arms a fault on one simulated instrument of b, by its bench
// name. A later InjectFault on the same instrument replaces the earlier one.
func InjectFault(b *drivers.Bench, instrument string, f Fault) error {
	bs, err := findSim(b, instrument)
	if err != nil {
		return err
	}
	switch f.Kind {
	case FaultTimeout, FaultError:
	case FaultStuck:
		if !bs.moves {
			return fmt.Errorf("sim faults: instrument %q: fault %v applies to a stage, attenuator or laser, not a %s", instrument, f.Kind, bs.kind)
		}
		if math.IsNaN(f.StallFraction) || f.StallFraction < 0 || f.StallFraction >= 1 {
			return fmt.Errorf("sim faults: instrument %q: StallFraction %g outside [0, 1)", instrument, f.StallFraction)
		}
	default:
		return fmt.Errorf("sim faults: instrument %q: unknown fault kind %v", instrument, f.Kind)
	}
	if f.Delay < 0 || f.Calls < 0 {
		return fmt.Errorf("sim faults: instrument %q: Delay %v and Calls %d must be ≥ 0", instrument, f.Delay, f.Calls)
	}
	if f.Delay == 0 {
		f.Delay = durationOf(defaultTimeoutS)
	}
	if f.Reply == "" {
		f.Reply = "hardware fault"
	}
	if f.StallFraction == 0 {
		f.StallFraction = 0.5
	}
	st := bs.st
	st.mu.Lock()
	st.faults[bs.name] = &f
	st.nFaults.Store(int32(len(st.faults)))
	st.mu.Unlock()
	st.log.Warn("fault armed", "instrument", bs.name, "kind", f.Kind.String(), "calls", f.Calls)
	return nil
}

// ClearFault disarms any fault of one simulated instrument of b.
func ClearFault(b *drivers.Bench, instrument string) error {
	bs, err := findSim(b, instrument)
	if err != nil {
		return err
	}
	bs.st.mu.Lock()
	delete(bs.st.faults, bs.name)
	bs.st.nFaults.Store(int32(len(bs.st.faults)))
	bs.st.mu.Unlock()
	return nil
}

// takeFault consumes one call of the instrument's armed fault, if any applies
// to this call (a stuck fault applies only to moves). fault calls it only
// when some fault is armed.
func (b *base) takeFault(isMove bool) (Fault, bool) {
	st := b.st
	st.mu.Lock()
	defer st.mu.Unlock()
	f, ok := st.faults[b.name]
	if !ok || (f.Kind == FaultStuck && !isMove) {
		return Fault{}, false
	}
	if f.Calls > 0 {
		f.Calls--
		if f.Calls == 0 {
			delete(st.faults, b.name)
			st.nFaults.Store(int32(len(st.faults)))
		}
	}
	return *f, true
}

// fault runs the armed fault of a call: for a timeout it waits and returns
// ErrUnavailable, for an error reply it returns ErrReply. For a stuck move it
// returns the fault for the move to act on.
func (b *base) fault(ctx context.Context, op string, isMove bool) (*Fault, error) {
	if b.st.nFaults.Load() == 0 {
		return nil, nil // nothing armed: the common case, without the lock
	}
	f, ok := b.takeFault(isMove)
	if !ok {
		return nil, nil
	}
	switch f.Kind {
	case FaultTimeout:
		if err := b.st.sleepUntil(ctx, b.st.now().Add(b.st.wall(f.Delay.Seconds()))); err != nil {
			return nil, fmt.Errorf("%s %q: %s: %w", b.kind, b.name, op, err)
		}
		return nil, fmt.Errorf("%s %q: %s: no reply within %v: %w", b.kind, b.name, op, f.Delay, drivers.ErrUnavailable)
	case FaultError:
		return nil, fmt.Errorf("%s %q: %s: reply %q: %w", b.kind, b.name, op, f.Reply, ErrReply)
	}
	out := f // only this copy escapes: no allocation on the common no-fault path
	return &out, nil
}
