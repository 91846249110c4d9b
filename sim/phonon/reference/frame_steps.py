#!/usr/bin/python3
"""How many right-hand-side evaluations the coherent part of a phonon point needs.

    /usr/bin/python3 sim/phonon/reference/frame_steps.py [--case plus20_a8_4K2]

The cost of a point of sim/phonon is set by the number of Runge-Kutta stages,
and that by the oscillation of the coupling at the exciton's detuning and the
dressed splitting (3-7 rad/ps on the demo dot), not by the phonons. This script
measures that with independent code (SciPy's DOP853, NumPy's eigh and expm of
SciPy), for the coherent part of one case of brme_golden.py (same pulse, same
167-ps window; no decay, no phonons):

  1. SciPy's DOP853 at rtol = atol = 1e-8 and 1e-6 in three frames: the
     interaction picture of the diagonal of H (the frame sim/phonon works in),
     the frame rotating with the laser (H(t) real and slow, the state
     oscillating), and the adiabatic frame (instantaneous eigenbasis, dynamic
     phases integrated, non-adiabatic coupling <k|dH/dt|l>/(E_l - E_k)).
  2. Fourth-order Magnus (two Gauss points, one 3 x 3 exponential a step) in
     the laser frame with uniform steps: the error against a 1e-12 solve as
     the step count falls, and the largest step times the largest eigenvalue
     spread of H over the window.

It prints evaluations and errors; it writes nothing. Numbers are from this
machine; the physics is PHYSICS.md sections 1, 2 (no decay) and the demo dot.
"""
import argparse
import math
import os
import sys

import numpy as np
from scipy.integrate import solve_ivp
from scipy.linalg import expm

HERE = os.path.dirname(os.path.abspath(__file__))
sys.dont_write_bytecode = True
sys.path.insert(0, HERE)
import brme_golden as bg  # noqa: E402


def problem(c):
    tau0, tau, a, om0 = bg.pulse(c)
    e1 = c["binding_mev"] / bg.HBAR_MEV_PS / 2.0
    assert c["detuning_mev"] == 0.0, "the script handles the undetuned cases"

    def w(t):
        return -0.5 * om0 * math.exp(-t * t / (2.0 * tau * tau))

    def h(t):
        x = w(t)
        return np.array([[0.0, x, 0.0], [x, e1 - a * t, x], [0.0, x, -2.0 * a * t]])

    def hdot(t):
        x = w(t) * (-t / (tau * tau))
        return np.array([[0.0, x, 0.0], [x, -a, x], [0.0, x, -2.0 * a]])

    def phase(t):  # integral of the diagonal of H from 0 to t
        return np.array([0.0, e1 * t - 0.5 * a * t * t, -a * t * t])

    return h, hdot, phase, -6.0 * tau, 6.0 * tau


def pops(psi):
    return np.abs(psi) ** 2


def run_bare(h, phase, t0, t1, tol):
    def rhs(t, y):
        c = y[:3] + 1j * y[3:]
        u = np.exp(1j * phase(t))
        v = np.conj(u)[:, None] * h(t) * u[None, :]
        np.fill_diagonal(v, 0.0)
        d = -1j * (v @ c)
        return np.concatenate([d.real, d.imag])

    y0 = np.zeros(6)
    y0[0] = 1.0
    r = solve_ivp(rhs, (t0, t1), y0, method="DOP853", rtol=tol, atol=tol)
    return r.nfev, r.y[:3, -1] + 1j * r.y[3:, -1]


def run_rotating(h, t0, t1, tol):
    def rhs(t, y):
        d = -1j * (h(t) @ (y[:3] + 1j * y[3:]))
        return np.concatenate([d.real, d.imag])

    y0 = np.zeros(6)
    y0[0] = 1.0
    r = solve_ivp(rhs, (t0, t1), y0, method="DOP853", rtol=tol, atol=tol)
    return r.nfev, r.y[:3, -1] + 1j * r.y[3:, -1]


def run_adiabatic(h, hdot, t0, t1, tol):
    prev = [None]

    def eig(t):  # eigenvectors with signs kept continuous along t
        e, v = np.linalg.eigh(h(t))
        if prev[0] is not None:
            v = v * np.sign(np.sum(v * prev[0], axis=0))
        prev[0] = v.copy()
        return e, v

    def rhs(t, y):
        b = y[:3] + 1j * y[3:6]
        e, v = eig(t)
        hd = v.T @ hdot(t) @ v
        gap = e[None, :] - e[:, None]
        np.fill_diagonal(gap, 1.0)
        wna = hd / gap
        np.fill_diagonal(wna, 0.0)
        u = np.exp(1j * y[6:9])
        d = -((u[:, None] * wna * np.conj(u)[None, :]) @ b)
        return np.concatenate([d.real, d.imag, e])

    e, v = eig(t0)
    y0 = np.concatenate([v.T @ np.array([1.0, 0.0, 0.0]), np.zeros(6)])
    r = solve_ivp(rhs, (t0, t1), y0, method="DOP853", rtol=tol, atol=tol)
    e, v = eig(t1)
    b = r.y[:3, -1] + 1j * r.y[3:6, -1]
    return r.nfev, v @ (b * np.exp(-1j * r.y[6:9, -1]))


def run_magnus4(h, t0, t1, n):
    g = 0.5 / math.sqrt(3.0)
    dt = (t1 - t0) / n
    psi = np.array([1.0, 0.0, 0.0], dtype=complex)
    spread = 0.0
    for k in range(n):
        t = t0 + k * dt
        a1, a2 = -1j * h(t + (0.5 - g) * dt), -1j * h(t + (0.5 + g) * dt)
        om = 0.5 * dt * (a1 + a2) + (math.sqrt(3.0) / 12.0) * dt * dt * (a2 @ a1 - a1 @ a2)
        psi = expm(om) @ psi
        e = np.linalg.eigvalsh(h(t + 0.5 * dt))
        spread = max(spread, e[-1] - e[0])
    return psi, dt * spread


def main():
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--case", default="plus20_a8_4K2")
    args = ap.parse_args()
    c = next(x for x in bg.CASES if x["name"] == args.case)
    h, hdot, phase, t0, t1 = problem(c)
    _, ref = run_rotating(h, t0, t1, 1e-12)
    print("case %s, window %.1f ps, coherent part only; reference: DOP853 at 1e-12, "
          "populations G %.9f X %.3e XX %.9f" % (args.case, t1 - t0, *pops(ref)))
    print("SciPy DOP853 (12 evaluations a step), error = largest |population - reference|:")
    for tol in (1e-8, 1e-6):
        for name, (nfev, psi) in (
                ("interaction picture of diag H (gliss's frame)", run_bare(h, phase, t0, t1, tol)),
                ("laser frame", run_rotating(h, t0, t1, tol)),
                ("adiabatic frame", run_adiabatic(h, hdot, t0, t1, tol))):
            err = np.max(np.abs(pops(psi) - pops(ref)))
            print("  tol %.0e  %-46s %5d evaluations (%4d steps)  error %.1e" % (
                tol, name, nfev, nfev // 12, err))
    print("Fourth-order Magnus, uniform steps, laser frame:")
    for n in (600, 400, 300, 200, 150, 100, 75):
        psi, hs = run_magnus4(h, t0, t1, n)
        err = np.max(np.abs(pops(psi) - pops(ref)))
        print("  %4d steps (h = %.3f ps, h x max spread of H = %.2f rad)  error %.1e" % (
            n, (t1 - t0) / n, hs, err))
    return 0


if __name__ == "__main__":
    sys.exit(main())
