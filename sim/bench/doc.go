// Package bench is gliss's built-in simulated bench: a grating stage, a
// half-wave-plate attenuator, a power meter, a tunable laser, a two-channel
// photon counter and the cryostat's temperature controller (the thermometer
// role, sim/cryostat) behind the role interfaces of package drivers, all
// sharing one optical state and one sample. glissd runs on it when no bench file is
// given; a bench file may also name driver "sim" for any role (SimSettings).
//
// The instruments behave like physical ones:
//
//   - Motion takes time. The stage (0–1200 mm, 25 mm/s, 50 mm/s², the demo
//     stretcher of PHYSICS.md), the rotation mount (0–360°, 20°/s) and the
//     laser's tuning (±2 meV, 2 meV/s, then a 50 ms relock) follow a
//     trapezoidal speed profile; a call returns once the axis has arrived. A
//     position read from another goroutine during a move is interpolated
//     along the profile. A cancelled move stops where it is. A target outside
//     the range is an error wrapping drivers.ErrLimit and nothing moves.
//     Arrivals scatter with a repeatability σ (stage 1 µm).
//   - Light is computed, not looked up. A counter gate reads the optical
//     state at its start (a move in progress counts at the position of that
//     instant), takes GDD from the true stretcher at the stage position, the
//     power from the true Malus law at the plate angle times the laser's
//     power noise for that gate, Θ = π·sqrt(P/P1), the laser's detuning, and
//     solves the dot model once — with the dot's phonons (sim/phonon; by
//     default the demo dot's, Options.Bath) at the cryostat's noise-free
//     sample temperature at that instant rounded to 0.01 K (at the setpoint
//     once a stability wait has succeeded), or the plain sim/model without
//     phonons; the detection chain (sim/detection) turns
//     the yields into Poisson counts. The truth (Options) may differ from the
//     bench's nominal Calibration. A phonon point costs a few milliseconds of
//     CPU (a plain one a fraction of that); a small cache keyed by the exact
//     parameters and the rounded temperature serves repeated states.
//   - Temperature takes time. The thermometer sets the cryostat's setpoint
//     (1.5–300 K, demo); the sample follows to first order (τ 60 s) and the
//     thermometer waits for stability (drivers.Stabilizer) in instrument
//     time. On an Instant bench the cryostat's clock advances only by its
//     own calls, so a 30-minute wait costs microseconds and stays
//     deterministic.
//   - Time is scaled by Options.Speed (moves, readings, gates, relocks and
//     fault delays take their instrument time / Speed of wall time), or
//     skipped entirely with Options.Instant.
//   - Failures can be armed per instrument with InjectFault: a timeout
//     (drivers.ErrUnavailable after a delay), an error reply (ErrReply), or a
//     move that stalls partway (ErrStalled).
//
// Determinism: each instrument draws from its own PCG stream seeded from
// Options.Seed and its bench name (the cryostat from Options.Seed), so the
// same seed and the same command sequence per instrument give the same
// numbers bit for bit, at any Speed and however the engine interleaves
// instruments in goroutines. (A gate opened while an axis is still moving,
// or while the sample is still warming, depends on timing, as it would on a
// real bench; after a successful stability wait the phonons are taken at
// the setpoint, so settled points do not.) The laser's power noise is drawn by the instruments that see
// the light — the counter once per gate, the power meter once per reading —
// each from its own stream.
//
// Concurrency: one mutex guards the optical state; it is never held while
// sleeping or solving. A second move of an axis while one is in flight, or
// a second gate while one is open, is refused as busy.
//
// Demo values that PHYSICS.md does not give (rotation and tuning speeds,
// repeatabilities, meter averaging time and noise floor, counter ceiling)
// are invented, within what such instruments do.
package bench
