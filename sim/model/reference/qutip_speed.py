#!/usr/bin/python3
"""Time QuTiP mesolve and gliss on the same points of the benchmark map.

Usage: /usr/bin/python3 qutip_speed.py [N_POINTS]   (default 24, at least 20)

The map is the one of BenchmarkMap101WithDecay: demo dot with decay
(tau_X 270 ps, tau_XX 130 ps, E_B 4.1 meV, FWHM 2.4 ps), GDD -25..25 ps^2 x
area 0..10 pi on a 101 x 101 grid. N_POINTS grid points are taken on a fixed
pseudo-random pattern. QuTiP runs mesolve at atol 1e-11, rtol 1e-9 (the
setting PHYSICS.md gives for populations to 1e-6) and, to be fair to it, only
for the populations (two output times, no yield integrals); gliss runs its
default tolerance (populations and yields to 1e-6) through
`go test -bench BenchmarkSpeedPoints` on one core. Both are single-threaded.
The script prints the per-point seconds side by side and the ratio.
"""
import os
import re
import subprocess
import sys
import time

import qutip_dot

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

    # gliss first (the go build is not timed: the benchmark times itself)
    env = dict(os.environ, GLISS_SPEED_POINTS=spec)
    cmd = ["go", "test", "-run", "^$", "-bench", "^BenchmarkSpeedPoints$", "-benchtime", "20x", "-cpu", "1", "."]
    out = subprocess.run(cmd, cwd=PKG, env=env, capture_output=True, text=True, check=True).stdout
    m = re.search(r"([0-9.e+-]+) s/point", out)
    if not m:
        sys.exit("no s/point in go test output:\n" + out)
    gliss_s = float(m.group(1))
    mc = re.search(r"([0-9.e+-]+) cpu-s/point", out)
    gliss_cpu = float(mc.group(1)) if mc else float("nan")

    times = []
    for g, a in pts:
        t0 = time.process_time()
        qutip_dot.solve(2.4, g, a, 4.1, 0.0, 270.0, 130.0, yields=False)
        times.append(time.process_time() - t0)
    qutip_s = sum(times) / len(times)

    print(f"points: {n} of the 101 x 101 demo map with decay (GDD -25..25 ps^2, area 0..10 pi)")
    print(f"QuTiP mesolve (atol 1e-11, rtol 1e-9, populations only): {qutip_s:.4g} s/point (CPU), "
          f"min {min(times):.3g} s, max {max(times):.3g} s")
    print(f"gliss (default tolerance, populations and yields):      {gliss_s:.4g} s/point (wall), {gliss_cpu:.4g} s/point (CPU)")
    print(f"ratio QuTiP / gliss per point: {qutip_s / gliss_cpu:.0f}x (CPU time), {qutip_s / gliss_s:.0f}x (gliss wall time)")


if __name__ == "__main__":
    main()
