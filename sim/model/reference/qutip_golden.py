#!/usr/bin/python3
"""Write the QuTiP golden values for the Go tests of sim/model.

Usage: /usr/bin/python3 qutip_golden.py [OUT.json]   (default ../testdata/qutip_golden.json)

The cases are chosen to cover the model: with and without decay (and one
lifetime only), both chirp signs, non-zero detuning of both signs, areas up to
10 pi, three pulse widths and three binding energies. The values come from
qutip.mesolve (qutip_dot.py) at atol 1e-11, rtol 1e-9, the setting PHYSICS.md
gives for populations to 1e-6.
"""
import json
import os
import sys

import numpy as np
import qutip
import scipy

import qutip_dot


def cases():
    out = []
    demo = dict(fwhm_ps=2.4, binding_mev=4.1, detuning_mev=0.0,
                x_lifetime_ps=270.0, xx_lifetime_ps=130.0)
    # 1. demo dot with decay: Rabi curve at zero chirp and both chirp signs
    for gdd in (0.0, 8.0, -8.0, 20.0, -20.0):
        for area in (0.5, 1.0, 2.0, 4.5, 7.0, 10.0):
            out.append(dict(demo, gdd_ps2=gdd, area_pi=area))
    # 2. no decay, detuned, both chirp signs
    for det in (0.25, -0.4):
        for gdd in (0.0, 15.0, -15.0):
            for area in (1.5, 6.0):
                out.append(dict(demo, gdd_ps2=gdd, area_pi=area, detuning_mev=det,
                                x_lifetime_ps=0.0, xx_lifetime_ps=0.0))
    # 3. other dots: widths, binding energies, one lifetime only, fast decay
    extra = [
        dict(fwhm_ps=1.5, gdd_ps2=5.0, area_pi=3.0, binding_mev=2.5, detuning_mev=0.1,
             x_lifetime_ps=270.0, xx_lifetime_ps=130.0),
        dict(fwhm_ps=1.5, gdd_ps2=-5.0, area_pi=3.0, binding_mev=2.5, detuning_mev=0.1,
             x_lifetime_ps=270.0, xx_lifetime_ps=130.0),
        dict(fwhm_ps=4.0, gdd_ps2=30.0, area_pi=8.0, binding_mev=6.0, detuning_mev=-0.2,
             x_lifetime_ps=100.0, xx_lifetime_ps=50.0),
        dict(fwhm_ps=4.0, gdd_ps2=-30.0, area_pi=8.0, binding_mev=6.0, detuning_mev=-0.2,
             x_lifetime_ps=100.0, xx_lifetime_ps=50.0),
        dict(fwhm_ps=2.4, gdd_ps2=12.0, area_pi=5.0, binding_mev=4.1, detuning_mev=0.5,
             x_lifetime_ps=0.0, xx_lifetime_ps=130.0),
        dict(fwhm_ps=2.4, gdd_ps2=-12.0, area_pi=5.0, binding_mev=4.1, detuning_mev=0.5,
             x_lifetime_ps=270.0, xx_lifetime_ps=0.0),
        dict(fwhm_ps=3.0, gdd_ps2=0.0, area_pi=9.5, binding_mev=-1.0, detuning_mev=0.0,
             x_lifetime_ps=20.0, xx_lifetime_ps=10.0),
        dict(fwhm_ps=2.4, gdd_ps2=3.0, area_pi=2.0, binding_mev=4.1, detuning_mev=2.05,
             x_lifetime_ps=270.0, xx_lifetime_ps=130.0),
    ]
    out.extend(extra)
    return out


def main():
    here = os.path.dirname(os.path.abspath(__file__))
    path = sys.argv[1] if len(sys.argv) > 1 else os.path.join(here, "..", "testdata", "qutip_golden.json")
    rows = []
    for c in cases():
        r = qutip_dot.solve(**c)
        rows.append({"params": c, "result": r})
    doc = {
        "about": "gliss sim/model golden values from qutip.mesolve; regenerate with "
                 "sim/model/reference/qutip_golden.py",
        "qutip": qutip.__version__,
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "atol": qutip_dot.ATOL,
        "rtol": qutip_dot.RTOL,
        "yield_integral": "Simpson's rule over 20001 output times",
        "cases": rows,
    }
    with open(path, "w") as f:
        json.dump(doc, f, indent=1, sort_keys=True)
        f.write("\n")
    print(f"wrote {len(rows)} cases to {path}", file=sys.stderr)


if __name__ == "__main__":
    main()
