#!/usr/bin/python3
"""Reference fits of the attenuator laws (PHYSICS.md §5) with SciPy's curve_fit.

Draws noisy synthetic power-meter readings with a seeded NumPy generator,
fits Malus's law P = Pmin + (Pmax - Pmin) cos^2(2(theta - theta0)) and the
graded ND-wheel law P = P0 10^(-k theta) with scipy.optimize.curve_fit
(Levenberg-Marquardt, MINPACK), and writes readings and fitted values to
../testdata/attenuator_scipy.json. The Go tests fit the same readings and
compare (drivers/calib/attenuator_test.go).

Run: /usr/bin/python3 drivers/calib/reference/malus_scipy.py
(Debian python3-numpy, python3-scipy.)
"""
import json
import math
import os

import numpy as np
import scipy
from scipy.optimize import curve_fit

TOL = dict(ftol=1e-14, xtol=1e-14, gtol=1e-14, maxfev=100000)


def malus(theta, pmin, pmax, theta0):
    c = np.cos(2.0 * np.radians(theta - theta0))
    return pmin + (pmax - pmin) * c * c


def nd_wheel(theta, p0, k):
    return p0 * 10.0 ** (-k * theta)


def wrap(deg, period):
    d = math.fmod(deg, period)
    if d > period / 2:
        d -= period
    elif d <= -period / 2:
        d += period
    return d


def fit_malus(rng):
    # Invented half-wave plate + polariser (not a measurement).
    true = dict(p_min_uw=0.08, p_max_uw=185.0, theta0_deg=7.3)
    theta = np.arange(0.0, 180.0 + 1e-9, 3.0)
    clean = malus(theta, true["p_min_uw"], true["p_max_uw"], true["theta0_deg"])
    power = clean * (1 + 0.005 * rng.standard_normal(theta.size)) + 0.3 * rng.standard_normal(theta.size)
    p0 = [0.0, float(power.max()), float(theta[np.argmax(power)])]
    popt, pcov = curve_fit(malus, theta, power, p0=p0, method="lm", **TOL)
    sig = np.sqrt(np.diag(pcov))
    pmin, pmax, th0 = popt
    smin, smax, sth = sig
    if pmax < pmin:
        pmin, pmax, smin, smax, th0 = pmax, pmin, smax, smin, th0 + 45.0
    th0 = wrap(th0, 90.0)
    res = power - malus(theta, pmin, pmax, th0)
    return dict(
        true=true,
        angle_deg=theta.tolist(),
        power_uw=power.tolist(),
        fit=dict(p_min_uw=pmin, p_max_uw=pmax, theta0_deg=th0),
        sigma=dict(p_min_uw=smin, p_max_uw=smax, theta0_deg=sth),
        rms_uw=float(np.sqrt(np.mean(res * res))),
    )


def fit_nd(rng):
    # Invented graded wheel: 4 OD over 270 degrees (not a measurement).
    true = dict(p0_uw=200.0, od_per_deg=4.0 / 270.0)
    theta = np.arange(0.0, 270.0 + 1e-9, 5.0)
    clean = nd_wheel(theta, true["p0_uw"], true["od_per_deg"])
    power = clean * (1 + 0.01 * rng.standard_normal(theta.size)) + 0.002 * rng.standard_normal(theta.size)
    popt, pcov = curve_fit(nd_wheel, theta, power, p0=[150.0, 0.01], method="lm", **TOL)
    sig = np.sqrt(np.diag(pcov))
    res = power - nd_wheel(theta, *popt)
    return dict(
        true=true,
        angle_deg=theta.tolist(),
        power_uw=power.tolist(),
        fit=dict(p0_uw=popt[0], od_per_deg=popt[1]),
        sigma=dict(p0_uw=sig[0], od_per_deg=sig[1]),
        rms_uw=float(np.sqrt(np.mean(res * res))),
    )


def main():
    rng = np.random.default_rng(20261202)
    out = dict(
        generator="drivers/calib/reference/malus_scipy.py",
        scipy=scipy.__version__,
        numpy=np.__version__,
        method="scipy.optimize.curve_fit, method='lm', absolute_sigma=False",
        malus=fit_malus(rng),
        nd_wheel=fit_nd(rng),
    )
    path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "testdata", "attenuator_scipy.json")
    with open(path, "w") as f:
        json.dump(out, f, indent=1)
        f.write("\n")
    print("wrote", os.path.normpath(path))


if __name__ == "__main__":
    main()
