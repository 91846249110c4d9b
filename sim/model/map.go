package model

import (
	"context"
	"fmt"
	"runtime"
	"sync"
	"sync/atomic"
	"time"
)

// Axis is the second axis of a map (the first is always GDD).
type Axis int

const (
	// AxisAreaPi sweeps the pulse area (a power × chirp map).
	AxisAreaPi Axis = iota
	// AxisDetuningMeV sweeps the laser detuning (a detuning × chirp map).
	AxisDetuningMeV
)

func (a Axis) String() string {
	switch a {
	case AxisAreaPi:
		return "area_pi"
	case AxisDetuningMeV:
		return "detuning_mev"
	}
	return fmt.Sprintf("Axis(%d)", int(a))
}

// MapPoint is one point of a map with the parameters it was computed at.
type MapPoint struct {
	GDDPS2, AreaPi, DetuningMeV float64
	Result
}

// MapSize is the largest number of points Map accepts.
const MapSize = 10_000_000

// Map computes the model over gddPS2 × values, where values sweep the second
// axis and the other parameters come from base. Points are in row-major
// order: index i·len(values)+j is (gddPS2[i], values[j]). The work is spread
// over runtime.GOMAXPROCS(0) goroutines; each point is a pure function of its
// parameters, so the result does not depend on the number of workers.
// progress (may be nil) is called from Map's goroutine about ten times a
// second and once at the end, never concurrently.
func Map(ctx context.Context, base Params, gddPS2 []float64, second Axis, values []float64, progress func(done, total int)) ([]MapPoint, error) {
	if second != AxisAreaPi && second != AxisDetuningMeV {
		return nil, fmt.Errorf("model: map: unknown axis %v", second)
	}
	total := len(gddPS2) * len(values)
	if total == 0 {
		return nil, fmt.Errorf("model: map: empty grid (%d GDD values × %d %v values)", len(gddPS2), len(values), second)
	}
	if total > MapSize {
		return nil, fmt.Errorf("model: map: %d points, allowed at most %d", total, MapSize)
	}
	out := make([]MapPoint, total)
	for i, g := range gddPS2 {
		for j, v := range values {
			p := base
			p.GDDPS2 = g
			if second == AxisAreaPi {
				p.AreaPi = v
			} else {
				p.DetuningMeV = v
			}
			if err := p.Validate(); err != nil {
				return nil, fmt.Errorf("model: map point (%d, %d): %w", i, j, err)
			}
			out[i*len(values)+j] = MapPoint{GDDPS2: g, AreaPi: p.AreaPi, DetuningMeV: p.DetuningMeV}
		}
	}
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	var (
		next, done atomic.Int64
		wg         sync.WaitGroup
		errOnce    sync.Once
		firstErr   error
	)
	workers := min(runtime.GOMAXPROCS(0), total)
	for range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			s := NewSolver()
			for ctx.Err() == nil {
				k := int(next.Add(1)) - 1
				if k >= total {
					return
				}
				mp := &out[k]
				p := base
				p.GDDPS2, p.AreaPi, p.DetuningMeV = mp.GDDPS2, mp.AreaPi, mp.DetuningMeV
				r, err := s.Solve(p)
				if err != nil {
					errOnce.Do(func() { firstErr = fmt.Errorf("model: map point %d: %w", k, err) })
					cancel()
					return
				}
				mp.Result = r
				done.Add(1)
			}
		}()
	}
	finished := make(chan struct{})
	go func() { wg.Wait(); close(finished) }()
	tick := time.NewTicker(100 * time.Millisecond)
	defer tick.Stop()
	for {
		select {
		case <-finished:
			if firstErr != nil {
				return nil, firstErr
			}
			if err := context.Cause(ctx); err != nil && int(done.Load()) < total {
				return nil, fmt.Errorf("model: map: stopped after %d of %d points: %w", done.Load(), total, err)
			}
			if progress != nil {
				progress(total, total)
			}
			return out, nil
		case <-tick.C:
			if progress != nil {
				progress(int(done.Load()), total)
			}
		}
	}
}

// Linspace returns n values evenly spaced from `from` to `to` inclusive
// (n = 1 gives from).
func Linspace(from, to float64, n int) []float64 {
	if n <= 0 {
		return nil
	}
	out := make([]float64, n)
	if n == 1 {
		out[0] = from
		return out
	}
	// a convex combination: no overflow for any finite ends
	for i := range out {
		f := float64(i) / float64(n-1)
		out[i] = from*(1-f) + to*f
	}
	out[n-1] = to
	return out
}
