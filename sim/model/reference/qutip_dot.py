"""The dot model of PHYSICS.md §1-§2 written independently with QuTiP.

Shared by qutip_golden.py (golden values for the Go tests) and qutip_speed.py
(the speed reference). Run with Debian's Python: /usr/bin/python3.
"""
import math

import numpy as np
import qutip
from scipy.integrate import simpson

HBAR_MEV_PS = 0.6582119569  # CODATA 2018

# PHYSICS.md §2: "populations to 1e-6 at atol=1e-11, rtol=1e-9"
ATOL = 1e-11
RTOL = 1e-9


def pulse(fwhm_ps, gdd_ps2, area_pi):
    """Chirped Gaussian pulse of PHYSICS.md §1: (tau0, tau, a, peak Rabi)."""
    tau0 = fwhm_ps / (2.0 * math.sqrt(math.log(2.0)))
    tau = math.sqrt(tau0**2 + gdd_ps2**2 / tau0**2)
    a = gdd_ps2 / (tau0**4 + gdd_ps2**2)
    peak = area_pi * math.pi / math.sqrt(2.0 * math.pi * tau0 * tau)
    return tau0, tau, a, peak


def solve(fwhm_ps, gdd_ps2, area_pi, binding_mev, detuning_mev,
          x_lifetime_ps=0.0, xx_lifetime_ps=0.0, n_out=20001, yields=True):
    """Populations at +6 tau and photon yields per pulse.

    Returns dict g, x, xx, n_x, n_xx. The yield integrals are Simpson's rule
    over n_out output times of mesolve (only when a lifetime is non-zero).
    """
    tau0, tau, a, peak = pulse(fwhm_ps, gdd_ps2, area_pi)
    g, x, xx = (qutip.basis(3, k) for k in range(3))
    px, pxx = x * x.dag(), xx * xx.dag()
    dx = (binding_mev / 2.0 - detuning_mev) / HBAR_MEV_PS
    dxx = -2.0 * detuning_mev / HBAR_MEV_PS
    h0 = dx * px + dxx * pxx
    hchirp = -(px + 2.0 * pxx)          # times a*t
    hdrive = -0.5 * (g * x.dag() + x * xx.dag() + x * g.dag() + xx * x.dag())  # times Omega(t)
    inv2tau2 = 1.0 / (2.0 * tau * tau)

    def f_chirp(t, args):
        return a * t

    def f_drive(t, args):
        return peak * math.exp(-t * t * inv2tau2)

    H = [h0, [hchirp, f_chirp], [hdrive, f_drive]]
    c_ops = []
    gx = 1.0 / x_lifetime_ps if x_lifetime_ps > 0 else 0.0
    gxx = 1.0 / xx_lifetime_ps if xx_lifetime_ps > 0 else 0.0
    if gxx > 0:
        c_ops.append(math.sqrt(gxx) * x * xx.dag())
    if gx > 0:
        c_ops.append(math.sqrt(gx) * g * x.dag())
    decay = bool(c_ops)
    if not (decay and yields):
        n_out = 2
    tlist = np.linspace(-6.0 * tau, 6.0 * tau, n_out)
    rho0 = g * g.dag()
    opts = qutip.Options(atol=ATOL, rtol=RTOL, nsteps=10**7, max_step=tau / 4.0)
    res = qutip.mesolve(H, rho0, tlist, c_ops=c_ops, e_ops=[g * g.dag(), px, pxx], options=opts)
    pg, pxt, pxxt = (np.asarray(e) for e in res.expect)
    out = {"g": float(pg[-1]), "x": float(pxt[-1]), "xx": float(pxxt[-1])}
    if decay and yields:
        ix = simpson(pxt, x=tlist)
        ixx = simpson(pxxt, x=tlist)
    else:
        ix = ixx = 0.0
    out["n_xx"] = out["xx"] + gxx * ixx
    out["n_x"] = out["x"] + out["xx"] + gx * ix
    return out
