#!/usr/bin/python3
"""Golden values for sim/phonon from QuTiP's time-dependent brmesolve.

The model is PHYSICS.md sections 1, 2 and 7: a chirped Gaussian pulse drives the
three-level ladder G, X, XX under two-photon excitation (frame rotating with the
laser phase, energies in rad/ps, time in ps); the weak-coupling phonon bath
couples through S = |X><X| + 2|XX><XX| with the spectrum

    S(w) = 2*pi*alpha*w**3*exp(-w**2/wc**2) / (1 - exp(-w/kT))

which is 2*pi*J(w)*(n(w)+1) for w > 0 (emission) and 2*pi*J(|w|)*n(|w|) for
w < 0 (absorption), written as one expression without the 0/0 at w = 0.
Radiative decay enters as Lindblad collapse operators. QuTiP's brmesolve builds
the secular Bloch-Redfield tensor in the instantaneous eigenbasis of H(t) at
every right-hand-side call (sec_cutoff 0.1 of the smallest non-zero gap).

Usage (Debian's Python, which has python3-qutip and cython3):

    /usr/bin/python3 sim/phonon/reference/brme_golden.py --write
        runs every case and writes sim/phonon/testdata/brme_golden.json
    /usr/bin/python3 sim/phonon/reference/brme_golden.py --check 0,9,17
        reruns only those cases and compares them with the committed file
        (exit status 1 on a difference above 1e-6)

The cases are of our own choosing (demo dot of PHYSICS.md and variations).
"""
import argparse
import atexit
import json
import math
import os
import shutil
import sys
import tempfile
import time

import numpy as np
import qutip
from scipy.integrate import simpson

HBAR_MEV_PS = 0.6582119569  # CODATA 2018, PHYSICS.md
K_B_MEV_PER_K = 0.08617333  # PHYSICS.md section 7

HERE = os.path.dirname(os.path.abspath(__file__))
GOLDEN = os.path.join(HERE, "..", "testdata", "brme_golden.json")

# Solver settings of the golden run: tight enough that QuTiP's own error is far
# below the 2e-3 the Go test allows.
ATOL = 1e-10
RTOL = 1e-8
N_TIMES = 4001  # output grid for the yield integrals (Simpson)


def case(name, fwhm, gdd, area, eb=4.1, det=0.0, tx=0.0, txx=0.0,
         alpha=0.030, cutoff=1.2, temp=4.2):
    return dict(name=name, fwhm_ps=fwhm, gdd_ps2=gdd, area_pi=area,
                binding_mev=eb, detuning_mev=det, x_lifetime_ps=tx,
                xx_lifetime_ps=txx, alpha_ps2=alpha, cutoff_mev=cutoff,
                temperature_k=temp)


# 23 parameter sets: both chirp signs, temperatures 0.3 to 40 K, with and
# without radiative decay (lifetime 0 means no decay), two cutoffs and
# couplings, a detuned case and a weakly chirped (Rabi-like) case.
CASES = [
    case("plus10_a5_4K2", 2.4, 10.0, 5.0),
    case("minus10_a5_4K2", 2.4, -10.0, 5.0),
    case("plus20_a8_4K2", 2.4, 20.0, 8.0),
    case("minus20_a8_4K2", 2.4, -20.0, 8.0),
    case("plus20_a8_4K2_decay", 2.4, 20.0, 8.0, tx=270, txx=130),
    case("minus20_a8_4K2_decay", 2.4, -20.0, 8.0, tx=270, txx=130),
    case("plus15_a6_1K5", 2.4, 15.0, 6.0, temp=1.5),
    case("minus15_a6_1K5", 2.4, -15.0, 6.0, temp=1.5),
    case("plus15_a6_20K", 2.4, 15.0, 6.0, temp=20.0),
    case("minus15_a6_20K", 2.4, -15.0, 6.0, temp=20.0),
    case("plus25_a12_10K_decay", 2.4, 25.0, 12.0, tx=270, txx=130, temp=10.0),
    case("minus25_a12_10K_decay", 2.4, -25.0, 12.0, tx=270, txx=130, temp=10.0),
    case("plus8_a3_4K2_fast_decay", 2.0, 8.0, 3.0, eb=3.0, tx=40, txx=25),
    case("minus8_a3_4K2_fast_decay", 2.0, -8.0, 3.0, eb=3.0, tx=40, txx=25),
    case("plus12_a7_8K_det", 2.4, 12.0, 7.0, det=0.15, temp=8.0),
    case("minus12_a7_8K_det", 2.4, -12.0, 7.0, det=-0.15, temp=8.0),
    case("plus18_a10_30K_a05_c1", 3.0, 18.0, 10.0, alpha=0.05, cutoff=1.0, temp=30.0),
    case("minus18_a10_30K_a05_c1", 3.0, -18.0, 10.0, alpha=0.05, cutoff=1.0, temp=30.0),
    case("plus2_a4_4K2_decay", 2.4, 2.0, 4.0, tx=270, txx=130),
    case("minus5_a9_4K2_c16", 2.4, -5.0, 9.0, cutoff=1.6, temp=4.2),
    case("minus20_a12_0K3_decay", 2.4, -20.0, 12.0, tx=270, txx=130, temp=0.3),
    case("plus20_a12_0K3_decay", 2.4, 20.0, 12.0, tx=270, txx=130, temp=0.3),
    case("plus20_a6_40K_decay", 2.4, 20.0, 6.0, tx=270, txx=130, temp=40.0),
]


def pulse(c):
    """Chirped Gaussian pulse of PHYSICS.md section 1."""
    tau0 = c["fwhm_ps"] / (2.0 * math.sqrt(math.log(2.0)))
    phi2 = c["gdd_ps2"]
    tau = math.sqrt(tau0 ** 2 + phi2 ** 2 / tau0 ** 2)
    a = phi2 / (tau0 ** 4 + phi2 ** 2)
    om0 = c["area_pi"] * math.pi / math.sqrt(2.0 * math.pi * tau0 * tau)
    return tau0, tau, a, om0


def spectrum_string(c):
    alpha = c["alpha_ps2"]
    wc = c["cutoff_mev"] / HBAR_MEV_PS
    kt = K_B_MEV_PER_K * c["temperature_k"] / HBAR_MEV_PS  # rad/ps
    return ("(2.0*pi*{al!r}*w*w*w*exp(-w*w/{wc2!r})/(1.0-exp(-w/{kt!r}))"
            " if w*w > 1e-24 else 0.0)").format(al=alpha, wc2=wc * wc, kt=kt)


def run_case(c, atol=ATOL, rtol=RTOL, n_times=N_TIMES):
    tau0, tau, a, om0 = pulse(c)
    g, x, xx = (qutip.basis(3, k) for k in range(3))
    px, pxx, pg = x * x.dag(), xx * xx.dag(), g * g.dag()
    eb = c["binding_mev"] / HBAR_MEV_PS
    dl = c["detuning_mev"] / HBAR_MEV_PS
    h0 = (eb / 2.0 - dl) * px - 2.0 * dl * pxx
    hchirp = -(px + 2.0 * pxx)
    hdrive = -0.5 * (g * x.dag() + x * xx.dag() + x * g.dag() + xx * x.dag())
    H = [h0,
         [hchirp, "{a!r}*t".format(a=a)],
         [hdrive, "{om!r}*exp(-t*t/{tt!r})".format(om=om0, tt=2.0 * tau * tau)]]
    c_ops = []
    gx = 1.0 / c["x_lifetime_ps"] if c["x_lifetime_ps"] > 0 else 0.0
    gxx = 1.0 / c["xx_lifetime_ps"] if c["xx_lifetime_ps"] > 0 else 0.0
    if gxx > 0:
        c_ops.append(math.sqrt(gxx) * x * xx.dag())
    if gx > 0:
        c_ops.append(math.sqrt(gx) * g * x.dag())
    S = px + 2.0 * pxx
    a_ops = [[S, spectrum_string(c)]]
    tlist = np.linspace(-6.0 * tau, 6.0 * tau, n_times)
    opts = qutip.Options(atol=atol, rtol=rtol, nsteps=10 ** 7)
    t0 = time.perf_counter()
    res = qutip.brmesolve(H, g * g.dag(), tlist, a_ops=a_ops,
                          e_ops=[pg, px, pxx], c_ops=c_ops, options=opts)
    secs = time.perf_counter() - t0
    rg, rx, rxx = (np.real(np.asarray(e)) for e in res.expect)
    ix = simpson(rx, x=tlist)
    ixx = simpson(rxx, x=tlist)
    out = dict(c)
    out.update(g=rg[-1], x=rx[-1], xx=rxx[-1],
               nx=rx[-1] + rxx[-1] + gx * ix, nxx=rxx[-1] + gxx * ixx,
               qutip_seconds=secs)
    return out


def main():
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--write", action="store_true", help="run all cases, write the golden file")
    ap.add_argument("--check", default="", help="comma-separated case indices to rerun and compare")
    ap.add_argument("--tol", type=float, default=1e-6)
    args = ap.parse_args()
    # QuTiP writes and compiles its generated Cython right-hand side in the
    # working directory: keep that out of the repository.
    work = tempfile.mkdtemp(prefix="gliss-brme-")
    atexit.register(shutil.rmtree, work, True)
    os.chdir(work)
    sys.path.insert(0, work)
    if args.write:
        rows = []
        for i, c in enumerate(CASES):
            r = run_case(c)
            rows.append(r)
            print("%2d %-28s G %.6f X %.6f XX %.6f NX %.6f NXX %.6f (%.1f s)" % (
                i, c["name"], r["g"], r["x"], r["xx"], r["nx"], r["nxx"], r["qutip_seconds"]),
                flush=True)
        doc = dict(source="QuTiP %s brmesolve (time-dependent, secular, sec_cutoff 0.1), "
                          "sim/phonon/reference/brme_golden.py" % qutip.__version__,
                   atol=ATOL, rtol=RTOL, n_times=N_TIMES, cases=rows)
        with open(GOLDEN, "w") as f:
            json.dump(doc, f, indent=1)
            f.write("\n")
        return 0
    if args.check:
        with open(GOLDEN) as f:
            doc = json.load(f)
        bad = 0
        for s in args.check.split(","):
            i = int(s)
            want = doc["cases"][i]
            got = run_case(CASES[i])
            for k in ("g", "x", "xx", "nx", "nxx"):
                d = abs(got[k] - want[k])
                ok = d <= args.tol
                bad += 0 if ok else 1
                print("case %2d %-28s %-3s golden %.8f rerun %.8f |d| %.1e %s" % (
                    i, want["name"], k, want[k], got[k], d, "ok" if ok else "DIFFERS"))
        print("%d passed, %d failed" % (5 * len(args.check.split(",")) - bad, bad))
        return 1 if bad else 0
    ap.print_help()
    return 2


if __name__ == "__main__":
    sys.exit(main())
