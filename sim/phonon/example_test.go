package phonon_test

import (
	"fmt"

	"github.com/gliss-lab/gliss/sim/model"
	"github.com/gliss-lab/gliss/sim/phonon"
)

// The demo dot on the plateau at 20 ps² and 10π, without phonons, with the
// demo bath at 4.2 K, and with the chirp reversed.
func ExampleSolver_Solve() {
	s := phonon.NewSolver()
	p := model.DemoParams()
	p.GDDPS2, p.AreaPi = 20, 10
	free, _ := s.Solve(p, nil)
	b := phonon.DemoBath()
	warm, _ := s.Solve(p, &b)
	p.GDDPS2 = -20
	reversed, _ := s.Solve(p, &b)
	fmt.Printf("NXX phonon-free %.3f, 4.2 K %.3f, 4.2 K at -20 ps² %.3f\n", free.NXX, warm.NXX, reversed.NXX)
	// Output: NXX phonon-free 1.006, 4.2 K 0.902, 4.2 K at -20 ps² 0.255
}
