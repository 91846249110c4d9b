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
// over runtime.GOMAXPROCS(0) goroutines in units fixed by the grid, so the
// result does not depend on the number of workers.
//
// On an area axis the points of one GDD are integrated together, up to
// rowChunk at a time, on one shared step sequence (each meets the
// tolerance; the transcendental coefficients are shared). Such a point agrees
// with Solve of the same parameters to the tolerance, not bit for bit. On a
// detuning axis every point is one Solve.
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
	// Work units: for an area axis, chunks of up to rowChunk points of one
	// GDD solved together (solveAreas); for a detuning axis, single points.
	// The units are fixed by the grid alone, so the result does not depend
	// on the number of workers.
	per := 1
	if second == AxisAreaPi {
		per = rowChunk
	}
	chunksPerRow := (len(values) + per - 1) / per
	units := len(gddPS2) * chunksPerRow
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	var (
		next, done atomic.Int64
		wg         sync.WaitGroup
		errOnce    sync.Once
		firstErr   error
	)
	workers := min(runtime.GOMAXPROCS(0), units)
	for range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			s := NewSolver()
			var (
				lanes []lane
				amps  []float64
				idx   []int
				res   []Result
				areas []float64
			)
			for ctx.Err() == nil {
				u := int(next.Add(1)) - 1
				if u >= units {
					return
				}
				row, c := u/chunksPerRow, u%chunksPerRow
				lo := row*len(values) + c*per
				hi := min(lo+per, (row+1)*len(values))
				pts := out[lo:hi]
				p := base
				p.GDDPS2 = pts[0].GDDPS2
				var err error
				if second == AxisAreaPi {
					res, areas = res[:0], areas[:0]
					for _, mp := range pts {
						areas = append(areas, mp.AreaPi)
						res = append(res, Result{})
					}
					err = s.solveAreas(p, areas, res, &lanes, &amps, &idx)
					for k := range pts {
						pts[k].Result = res[k]
					}
				} else {
					p.AreaPi, p.DetuningMeV = pts[0].AreaPi, pts[0].DetuningMeV
					pts[0].Result, err = s.Solve(p)
				}
				if err != nil {
					errOnce.Do(func() { firstErr = fmt.Errorf("model: map points %d to %d: %w", lo, hi-1, err) })
					cancel()
					return
				}
				done.Add(int64(len(pts)))
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
