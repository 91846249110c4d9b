#!/usr/bin/python3
"""Per-point speed of sim/phonon against QuTiP's brmesolve, side by side.

    /usr/bin/python3 sim/phonon/reference/bench_vs_qutip.py [--cases 2,3,4,10]

For each chosen case of brme_golden.py it runs QuTiP's time-dependent
brmesolve at QuTiP's default solver tolerances (atol 1e-8, rtol 1e-6) twice:
once fresh (QuTiP generates and compiles its Cython right-hand side, as every
new parameter set needs, since the bath spectrum is compiled in) and once more
with rhs_reuse (integration only). Then it runs the Go benchmark
BenchmarkGoldenCase on the same cases (default tolerance 1e-8) and prints both
times, both errors against the golden values (QuTiP at atol 1e-10, rtol 1e-8)
and the ratios. Run it from the repository root; it needs `go` on PATH.
"""
import argparse
import atexit
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time

# One thread for the numerical libraries under QuTiP: the problem is 3×3, and
# idle BLAS/OpenMP workers left spinning would take the CPU from the Go
# benchmark that this script runs afterwards on the same machine.
for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

HERE = os.path.dirname(os.path.abspath(__file__))
sys.dont_write_bytecode = True  # no __pycache__ in the repository
sys.path.insert(0, HERE)
import brme_golden as bg  # noqa: E402
import json  # noqa: E402
import qutip  # noqa: E402

REPO = os.path.abspath(os.path.join(HERE, "..", "..", ".."))


def qutip_point(c, reuse):
    tau0, tau, a, om0 = bg.pulse(c)
    import math
    g, x, xx = (qutip.basis(3, k) for k in range(3))
    px, pxx, pg = x * x.dag(), xx * xx.dag(), g * g.dag()
    eb = c["binding_mev"] / bg.HBAR_MEV_PS
    dl = c["detuning_mev"] / bg.HBAR_MEV_PS
    H = [(eb / 2.0 - dl) * px - 2.0 * dl * pxx,
         [-(px + 2.0 * pxx), "{a!r}*t".format(a=a)],
         [-0.5 * (g * x.dag() + x * xx.dag() + x * g.dag() + xx * x.dag()),
          "{om!r}*exp(-t*t/{tt!r})".format(om=om0, tt=2.0 * tau * tau)]]
    c_ops = []
    if c["xx_lifetime_ps"] > 0:
        c_ops.append(math.sqrt(1.0 / c["xx_lifetime_ps"]) * x * xx.dag())
    if c["x_lifetime_ps"] > 0:
        c_ops.append(math.sqrt(1.0 / c["x_lifetime_ps"]) * g * x.dag())
    a_ops = [[px + 2.0 * pxx, bg.spectrum_string(c)]]
    opts = qutip.Options(nsteps=10 ** 7, rhs_reuse=reuse)  # default atol 1e-8, rtol 1e-6
    t0 = time.perf_counter()
    res = qutip.brmesolve(H, pg, [-6.0 * tau, 6.0 * tau], a_ops=a_ops,
                          e_ops=[pg, px, pxx], c_ops=c_ops, options=opts)
    secs = time.perf_counter() - t0
    return secs, [float(e[-1].real) for e in res.expect]


def main():
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--cases", default="2,3,4,10")
    ap.add_argument("--benchtime", default="200x")
    args = ap.parse_args()
    idx = [int(s) for s in args.cases.split(",")]
    with open(bg.GOLDEN) as f:
        golden = json.load(f)["cases"]

    work = tempfile.mkdtemp(prefix="gliss-brme-bench-")
    atexit.register(shutil.rmtree, work, True)
    cwd = os.getcwd()
    os.chdir(work)
    sys.path.insert(0, work)
    rows = {}
    for i in idx:
        c = bg.CASES[i]
        fresh, pops = qutip_point(c, reuse=False)
        again, pops2 = qutip_point(c, reuse=True)
        want = golden[i]
        qerr = max(abs(p - want[k]) for p, k in zip(pops, ("g", "x", "xx")))
        if max(abs(p - q) for p, q in zip(pops, pops2)) > 1e-9:
            print("warning: rhs_reuse run of %s differs from the fresh run" % c["name"])
        rows[c["name"]] = dict(fresh=fresh, reuse=again, qerr=qerr)
        print("qutip %-28s fresh %.2f s, integration only %.2f s, max |d| vs golden %.1e"
              % (c["name"], fresh, again, qerr), flush=True)
    os.chdir(cwd)

    pattern = "BenchmarkGoldenCase/^(" + "|".join(re.escape(bg.CASES[i]["name"]) for i in idx) + ")$"
    cmd = ["go", "test", "./sim/phonon", "-run", "^$", "-bench", pattern, "-benchtime", args.benchtime]
    print("$ " + " ".join(cmd), flush=True)
    out = subprocess.run(cmd, cwd=REPO, capture_output=True, text=True, check=True).stdout
    line = re.compile(r"^BenchmarkGoldenCase/(\S+?)(?:-\d+)?\s+\d+\s+([\d.]+) ns/op.*?\s([\d.]+) maxerr_1e-6")
    print("%-28s %10s %10s %10s %10s %9s %9s %9s" % (
        "case", "qutip s", "qutip-int", "qutip err", "go ms", "go err", "ratio", "ratio-int"))
    worst, worst_int = float("inf"), float("inf")
    for ln in out.splitlines():
        m = line.match(ln)
        if not m or m.group(1) not in rows:
            continue
        r = rows[m.group(1)]
        go_s = float(m.group(2)) * 1e-9
        go_err = float(m.group(3)) * 1e-6
        ratio, ratio_int = r["fresh"] / go_s, r["reuse"] / go_s
        worst, worst_int = min(worst, ratio), min(worst_int, ratio_int)
        print("%-28s %10.2f %10.2f %10.1e %10.2f %9.1e %9.0f %9.0f" % (
            m.group(1), r["fresh"], r["reuse"], r["qerr"], go_s * 1e3, go_err, ratio, ratio_int))
    print("errors: largest |d| from the golden values (QuTiP at atol 1e-10, rtol 1e-8) over G, X, XX "
          "for qutip (default atol 1e-8, rtol 1e-6), over G, X, XX, NX, NXX for go (default tolerance)")
    print("smallest ratio: %.0fx per point with compilation (qutip s / go), %.0fx integration only "
          "(qutip-int / go)" % (worst, worst_int))
    return 0


if __name__ == "__main__":
    sys.exit(main())
