#!/usr/bin/python3
"""Reference fit of the stretcher calibration from pulse durations (PHYSICS.md §1, §4).

Draws noisy synthetic intensity-FWHM readings over stage position with a seeded
NumPy generator, from FWHM(x) = 2 sqrt(ln 2) sqrt(tau0^2 + (k (x - x0))^2 / tau0^2)
(Diels & Rudolph, Ultrashort Laser Pulse Phenomena, 2nd ed., ch. 1, with GDD
linear in stage position), fits (k, x0, TL FWHM) with scipy.optimize.curve_fit
and writes readings and results to ../testdata/stretcher_scipy.json for
drivers/calib/stretcher_test.go.

Run: /usr/bin/python3 drivers/calib/reference/stretcher_scipy.py
"""
import json
import math
import os

import numpy as np
import scipy
from scipy.optimize import curve_fit

C = 2.0 * math.sqrt(math.log(2.0))


def fwhm(x, k, x0, tl):
    t0 = tl / C
    q = k * (x - x0)
    return C * np.sqrt(t0 * t0 + q * q / (t0 * t0))


def main():
    rng = np.random.default_rng(785)
    # Demo stretcher of PHYSICS.md (invented): 0.04433 ps^2/mm, zero at 600 mm, TL 2.4 ps.
    true = dict(slope_ps2_per_mm=0.04433, zero_mm=600.0, tl_fwhm_ps=2.4)
    x = np.arange(450.0, 750.0 + 1e-9, 15.0)
    clean = fwhm(x, true["slope_ps2_per_mm"], true["zero_mm"], true["tl_fwhm_ps"])
    # Additive reading noise of 0.1 ps (unweighted least squares assumes equal errors).
    y = clean + 0.1 * rng.standard_normal(x.size)
    popt, pcov = curve_fit(fwhm, x, y, p0=[0.03, 590.0, 2.0], method="lm",
                           ftol=1e-14, xtol=1e-14, gtol=1e-14, maxfev=100000)
    sig = np.sqrt(np.diag(pcov))
    res = y - fwhm(x, *popt)
    # Second fit with the TL FWHM known (fixed at its true value).
    tl = true["tl_fwhm_ps"]
    popt2, pcov2 = curve_fit(lambda xx, k, x0: fwhm(xx, k, x0, tl), x, y, p0=[0.03, 590.0], method="lm",
                             ftol=1e-14, xtol=1e-14, gtol=1e-14, maxfev=100000)
    sig2 = np.sqrt(np.diag(pcov2))
    out = dict(
        generator="drivers/calib/reference/stretcher_scipy.py",
        scipy=scipy.__version__,
        numpy=np.__version__,
        method="scipy.optimize.curve_fit, method='lm', absolute_sigma=False",
        true=true,
        stage_mm=x.tolist(),
        fwhm_ps=y.tolist(),
        fit=dict(slope_ps2_per_mm=abs(popt[0]), zero_mm=popt[1], tl_fwhm_ps=abs(popt[2])),
        sigma=dict(slope_ps2_per_mm=sig[0], zero_mm=sig[1], tl_fwhm_ps=sig[2]),
        rms_ps=float(np.sqrt(np.mean(res * res))),
        known_tl=dict(
            tl_fwhm_ps=tl,
            fit=dict(slope_ps2_per_mm=abs(popt2[0]), zero_mm=popt2[1]),
            sigma=dict(slope_ps2_per_mm=sig2[0], zero_mm=sig2[1]),
        ),
    )
    path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "testdata", "stretcher_scipy.json")
    with open(path, "w") as f:
        json.dump(out, f, indent=1)
        f.write("\n")
    print("wrote", os.path.normpath(path))


if __name__ == "__main__":
    main()
