package phonon

import (
	"context"
	"fmt"
	"runtime"
	"sync"
	"sync/atomic"
	"time"

	"github.com/gliss-lab/gliss/sim/model"
)

// Map computes the model with phonons over gddPS2 × values (the second axis
// is model.AxisAreaPi or model.AxisDetuningMeV), other parameters from base,
// in the row-major order of model.Map: index i·len(values)+j is
// (gddPS2[i], values[j]). With b == nil or b.AlphaPS2 == 0 it is model.Map,
// bit for bit. The work is spread over runtime.GOMAXPROCS(0) goroutines;
// every point is a pure function of its parameters, so the result does not
// depend on the number of workers. progress (may be nil) is called from Map's goroutine
// about ten times a second and once at the end, never concurrently. Map
// stops early, with the context's error, when ctx is cancelled.
func Map(ctx context.Context, base model.Params, b *Bath, gddPS2 []float64, second model.Axis, values []float64, progress func(done, total int)) ([]model.MapPoint, error) {
	return MapWorkers(ctx, base, b, gddPS2, second, values, 0, progress)
}

// MapWorkers is Map with an explicit number of goroutines (0: GOMAXPROCS).
// Without an active bath it is model.Map, which picks its own number.
func MapWorkers(ctx context.Context, base model.Params, b *Bath, gddPS2 []float64, second model.Axis, values []float64, workers int, progress func(done, total int)) ([]model.MapPoint, error) {
	if !b.Active() {
		return model.Map(ctx, base, gddPS2, second, values, progress)
	}
	if err := b.Validate(); err != nil {
		return nil, err
	}
	if second != model.AxisAreaPi && second != model.AxisDetuningMeV {
		return nil, fmt.Errorf("phonon: map: unknown axis %v", second)
	}
	total := len(gddPS2) * len(values)
	if total == 0 {
		return nil, fmt.Errorf("phonon: map: empty grid (%d GDD values × %d %v values)", len(gddPS2), len(values), second)
	}
	if total > model.MapSize {
		return nil, fmt.Errorf("phonon: map: %d points, allowed at most %d", total, model.MapSize)
	}
	out := make([]model.MapPoint, total)
	for i, g := range gddPS2 {
		for j, v := range values {
			p := base
			p.GDDPS2 = g
			if second == model.AxisAreaPi {
				p.AreaPi = v
			} else {
				p.DetuningMeV = v
			}
			if err := p.Validate(); err != nil {
				return nil, fmt.Errorf("phonon: map point (%d, %d): %w", i, j, err)
			}
			out[i*len(values)+j] = model.MapPoint{GDDPS2: g, AreaPi: p.AreaPi, DetuningMeV: p.DetuningMeV}
		}
	}
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	workers = min(workers, total)
	bath := *b

	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	var (
		next, done atomic.Int64
		wg         sync.WaitGroup
		errOnce    sync.Once
		firstErr   error
	)
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
				r, err := s.Solve(p, &bath)
				if err != nil {
					errOnce.Do(func() { firstErr = fmt.Errorf("phonon: map point %d: %w", k, err) })
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
			if n := int(done.Load()); n < total {
				return nil, fmt.Errorf("phonon: map: stopped after %d of %d points: %w", n, total, context.Cause(ctx))
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
