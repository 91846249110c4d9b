// DOP853 tableau: Hairer, Nørsett & Wanner, Solving Ordinary Differential
// Equations I (2nd ed., 1993), §II.10 — the 8th-order method of Dormand &
// Prince with Hairer's 5th- and 3rd-order error estimators. One copy of the
// digits lives in sim/model (transcribed there from the published tableau);
// these package variables are copies of it, for the solver's hot loop.

package phonon

import "github.com/gliss-lab/gliss/sim/model"

var tableau = model.DOP853()

var (
	dopC  = tableau.C
	dopA  = tableau.A
	dopB  = tableau.B
	dopE5 = tableau.E5
	dopE3 = tableau.E3
)
