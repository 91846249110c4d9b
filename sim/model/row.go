package model

import "fmt"

// rowChunk is the most points one shared integration carries.
const rowChunk = 128

// solveAreas solves the points p with AreaPi = areas[j] on one shared step
// sequence: they differ only in the amplitude of Ω(t), so the coefficients
// of the right-hand side (envelope shape, phase factors: the transcendental
// functions) are computed once per stage time for all of them, and the step
// is accepted only when every point meets the tolerance. A point of area 0
// is exact without integration (nothing is driven, nothing decays).
// Results go to out[j]. The areas must be valid for p (Map checks them).
func (s *Solver) solveAreas(p Params, areas []float64, out []Result, lanes *[]lane, amps *[]float64, idx *[]int) error {
	p.AreaPi = 1
	if err := p.Validate(); err != nil {
		return err
	}
	s.pulse = p.Pulse()
	l := p.ladderWith(s.pulse, &s.pulse)
	s.setup(&l)
	*lanes, *amps, *idx = (*lanes)[:0], (*amps)[:0], (*idx)[:0]
	first := -1
	for j, a := range areas {
		if a == 0 {
			out[j] = Result{G: 1}
			continue
		}
		if first < 0 || a > (*amps)[first] {
			first = len(*amps)
		}
		*lanes = append(*lanes, lane{y: s.y})
		*amps = append(*amps, a)
		*idx = append(*idx, j)
	}
	if first < 0 {
		return nil
	}
	if err := s.integrate(l.StartPS, l.EndPS, l.MaxStepPS, p.tolerance(), *lanes, *amps, first); err != nil {
		return fmt.Errorf("model: %+v, areas %v: %w", p, areas, err)
	}
	for k, j := range *idx {
		s.y = (*lanes)[k].y
		var r LadderResult
		s.finish(l.EndPS, &r)
		out[j] = resultOf(&r)
	}
	return nil
}
