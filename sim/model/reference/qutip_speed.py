#!/usr/bin/python3
"""Time QuTiP mesolve and gliss on the same points of the benchmark map.

Usage: /usr/bin/python3 qutip_speed.py [N_POINTS]   (default 24, at least 20)

The map is the one of BenchmarkMap101WithDecay: demo dot with decay
(tau_X 270 ps, tau_XX 130 ps, E_B 4.1 meV, FWHM 2.4 ps), GDD -25..25 ps^2 x
area 0..10 pi on a 101 x 101 grid. N_POINTS grid points are taken on a fixed
pseudo-random pattern. QuTiP runs mesolve at atol 1e-11, rtol 1e-9 (the
setting PHYSICS.md gives for populations to 1e-6) and, to be fair to it, only
for the populations (two output times, no yield integrals); gliss runs its
default tolerance (populations and yields to 1e-6) on one core, through
`go test -bench`: BenchmarkSpeedPoints solves the same points one by one,
BenchmarkMap101OneCore the whole map (points of one GDD share their step
sequence). Both sides are single-threaded and timed in CPU seconds (the
machine is shared); QuTiP takes the better of two runs per point. The script
prints the per-point seconds side by side and the ratios.
"""
import os

# single-threaded linear algebra: a fair comparison with one gliss core, and
# no spinning BLAS threads inflating the CPU time on a shared machine
for _v in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_v] = "1"

import re  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402

import qutip_dot  # noqa: E402

HERE = os.path.dirname(os.path.abspath(__file__))
PKG = os.path.dirname(HERE)  # sim/model


def grid_points(n):
    pts = []
    for k in range(n):
        i = (37 * k + 11) % 101
        j = (53 * k + 29) % 101
        gdd = -25.0 + 50.0 * i / 100.0
        area = 10.0 * j / 100.0
        pts.append((gdd, area))
    return pts


def main():
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 24
    if n < 20:
        sys.exit("use at least 20 points")
    pts = grid_points(n)
    spec = ",".join(f"{g!r}:{a!r}" for g, a in pts)

    # gliss first (the go build is not timed: the benchmarks time themselves)
    env = dict(os.environ, GLISS_SPEED_POINTS=spec)
    cmd = ["go", "test", "-run", "^$", "-bench", "^(BenchmarkSpeedPoints|BenchmarkMap101OneCore)$",
           "-benchtime", "3x", "-cpu", "1", "."]
    out = subprocess.run(cmd, cwd=PKG, env=env, capture_output=True, text=True, check=True).stdout
    got = {}
    for line in out.splitlines():
        m = re.match(r"(Benchmark\w+)\s", line)
        if not m:
            continue
        ms = re.search(r"([0-9.e+-]+) s/point", line)
        mc = re.search(r"([0-9.e+-]+) cpu-s/point", line)
        if ms and mc:
            got[m.group(1)] = (float(ms.group(1)), float(mc.group(1)))
    if "BenchmarkSpeedPoints" not in got or "BenchmarkMap101OneCore" not in got:
        sys.exit("missing benchmark figures in go test output:\n" + out)
    pt_wall, pt_cpu = got["BenchmarkSpeedPoints"]
    map_wall, map_cpu = got["BenchmarkMap101OneCore"]

    # QuTiP: CPU time of each point, the better of two runs
    times = []
    for g, a in pts:
        best = float("inf")
        for _ in range(2):
            t0 = time.process_time()
            qutip_dot.solve(2.4, g, a, 4.1, 0.0, 270.0, 130.0, yields=False)
            best = min(best, time.process_time() - t0)
        times.append(best)
    qutip_s = sum(times) / len(times)

    print(f"points: {n} of the 101 x 101 demo map with decay (GDD -25..25 ps^2, area 0..10 pi)")
    print(f"QuTiP mesolve (atol 1e-11, rtol 1e-9, populations only): {qutip_s:.4g} s/point (CPU), "
          f"min {min(times):.3g} s, max {max(times):.3g} s")
    print(f"gliss Solve, the same points (default tolerance, with yields): {pt_cpu:.4g} s/point (CPU), {pt_wall:.4g} s (wall)")
    print(f"gliss Map, the whole 101 x 101 map on one core:               {map_cpu:.4g} s/point (CPU), {map_wall:.4g} s (wall)")
    print(f"ratio QuTiP / gliss per point: {qutip_s / pt_cpu:.0f}x (single points), {qutip_s / map_cpu:.0f}x (per point of the map)")


if __name__ == "__main__":
    main()
