// Package phonon adds the weak-coupling phonon bath of PHYSICS.md §7 to the
// dot model of sim/model: longitudinal-acoustic phonons coupled through
// S = |X⟩⟨X| + 2|XX⟩⟨XX| with the spectral density J(ω) = α·ω³·exp(−ω²/ωc²),
// Bose–Einstein occupied at the sample temperature, in a time-dependent,
// secular Bloch–Redfield master equation written in the instantaneous
// eigenbasis of H(t) (Breuer & Petruccione, The Theory of Open Quantum
// Systems, 2002, ch. 3), together with the radiative decay of §2.
//
// API:
//
//	b := phonon.DemoBath()                       // α 0.030 ps², ħωc 1.2 meV, 4.2 K
//	r, err := phonon.NewSolver().Solve(p, &b)    // p model.Params → model.Result
//	pts, err := phonon.Map(ctx, base, &b, gdd, model.AxisAreaPi, areas, progress)
//
// With b == nil or b.AlphaPS2 == 0 Solve and Map are model's Solve and Map,
// bit for bit. Otherwise the solver (solver.go) integrates the density matrix
// with the error-controlled Runge–Kutta method DOP853 at Params.Tolerance (0:
// DefaultTolerance), without allocating per step; Map spreads points over
// GOMAXPROCS goroutines, and each point is a pure function of its
// parameters, so maps are deterministic.
//
// The Redfield tensor and its secular rule are those of QuTiP's brmesolve
// (an element is kept when |ω_ab − ω_cd| < 0.1 × the smallest non-zero
// eigenvalue gap), and reference/brme_golden.py checks the whole model
// against brmesolve (testdata/brme_golden.json, 23 parameter sets).
//
// Physics in one paragraph (facts of the trade, common practice, checked in
// trade_test.go): for positive GDD the adiabatic passage G → XX follows the
// lowest dressed state of H(t), so a cold lattice, which can only take
// energy, cannot spoil it (the plateau sign); for negative GDD it follows the
// highest dressed state and phonon emission drains it more as the power
// widens the dressed splitting towards ħωc. Warming the sample opens phonon
// absorption and degrades both signs.
package phonon
