"""Fast marching, ours against scikit-fmm, same grids, same run.

    python3 experiments/fmm_bench/run.py [sizes...]     (default 201 501 1001 2001)

Builds and runs `cargo run --release --example fmm_bench` with RAYON_NUM_THREADS=1,
times scikit-fmm (order 2, point source as a circle of 2 cells, see
tests/reference/make_skfmm_fixture.py) on the same constant-gradient ground
v = 500 - 15 z m/s, 200 m x 200 m, source on the top edge at x = 60 m, and prints one
table: wall time of one shot (best of several), ns per node, our/skfmm time ratio,
and each solver's max error and mean relative error against the closed form
T = arccosh(1 + g^2 r^2/(2 v_s v_r))/|g| beyond 5 cells of the source.
"""
import json
import os
import subprocess
import sys
import time

import numpy as np
import skfmm

V0, G, SIDE, XS, ZS = 500.0, -15.0, 200.0, 60.0, 0.0


def skfmm_run(n):
    h = SIDE / (n - 1)
    x = np.arange(n) * h
    z = -SIDE + np.arange(n) * h
    Z, X = np.meshgrid(z, x, indexing="ij")
    V = V0 + G * Z
    r = np.hypot(X - XS, Z - ZS)
    r0 = 2.0 * h
    best = float("inf")
    reps = 5 if n <= 501 else 3
    for _ in range(reps):
        phi = r - r0
        t0 = time.perf_counter()
        t = np.asarray(skfmm.travel_time(phi, V, dx=h, order=2))
        best = min(best, time.perf_counter() - t0)
    t = t + r0 / (V0 + G * ZS)
    ex = np.arccosh(1 + G * G * r * r / (2 * (V0 + G * ZS) * V)) / abs(G)
    m = r > 5 * h
    e = np.abs(t - ex)[m]
    return best, e.max() * 1e3, (e / ex[m]).mean() * 100


def main():
    sizes = [int(a) for a in sys.argv[1:]] or [201, 501, 1001, 2001]
    root = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    env = dict(os.environ, RAYON_NUM_THREADS="1")
    out = subprocess.run(
        ["cargo", "run", "--release", "--quiet", "--example", "fmm_bench", "--"]
        + [str(s) for s in sizes],
        cwd=root, env=env, check=True, capture_output=True, text=True,
    ).stdout
    ours = {d["n"]: d for d in (json.loads(l) for l in out.splitlines() if l.startswith("{"))}
    print(f"scikit-fmm {skfmm.__version__}, numpy {np.__version__}; one thread; best of 3-5 runs")
    print("| grid | ours s | ours ns/node | skfmm s | skfmm ns/node | ours/skfmm | ours max err ms | skfmm max err ms | ours mean rel % | skfmm mean rel % |")
    print("|---|---|---|---|---|---|---|---|---|---|")
    for n in sizes:
        o = ours[n]
        st, smax, srel = skfmm_run(n)
        print(
            f"| {n}² | {o['seconds']:.3f} | {o['ns_per_node']:.0f} | {st:.3f} | {st * 1e9 / n / n:.0f} | "
            f"{o['seconds'] / st:.2f} | {o['max_err_ms']:.5f} | {smax:.4f} | {o['mean_rel_err_pct']:.6f} | {srel:.4f} |"
        )


if __name__ == "__main__":
    main()
