"""Makes the fixture of tests/cli_compare.rs (which needs no Python): picks through one
ground and a second, different ground as `--truth`, each solved by scikit-fmm, so that
the misfit `slowfield compare` reports for the truth can be held against a solver that
is not ours.

    python3 -m venv /tmp/venv-skfmm && /tmp/venv-skfmm/bin/pip install scikit-fmm numpy
    /tmp/venv-skfmm/bin/python tests/reference/make_compare_fixture.py

scikit-fmm (https://github.com/scikit-fmm/scikit-fmm) is a general-purpose
fast-marching library: skfmm.travel_time(phi, speed, dx, order=2) solves
|grad T| = 1/speed from the zero contour of phi. A point source is a small circle
phi = r - r0 around it, r0 = 2 cells, with the time r0/v_source to the circle added
back (as in make_skfmm_fixture.py).

Flat ground at z = 0, x from 0 to 40 m, 20 m deep, solved at h = 1/16 m.
  picks ground:  600 + 20 d m/s (d = depth below the ground) over 2000 m/s, the
                 interface dipping from 3 m deep at x = 0 to 6.2 m at x = 40 m
  truth ground:  500 m/s over 1800 m/s, the interface 4 m deep, as nodes every 0.5 m
                 with the slowness linear between them
Shots at x = 1, 19, 39 m, receivers every 2 m from 0 to 40 m (63 picks), sigma 0.5 ms.

Writes compare_picks.csv (the picks: scikit-fmm times through the picks ground),
compare_truth.csv (the truth ground on a 0.5 m grid) and compare_fixture.json (the
scikit-fmm times through the truth at every pick and their RMS misfit to the picks).
"""
import csv
import json
import os

import numpy as np
import skfmm

H = 1.0 / 16.0
X1, DEPTH = 40.0, 20.0
R0_CELLS = 2.0
SHOTS = [1.0, 19.0, 39.0]
RECEIVERS = [2.0 * k for k in range(21)]
SIGMA_MS = 0.5
HERE = os.path.dirname(os.path.abspath(__file__))


def picks_ground(x, d):
    return np.where(d < 3.0 + 0.08 * x, 600.0 + 20.0 * d, 2000.0)


TRUTH_CELL = 0.5


def truth_nodes(d):
    return np.where(d < 4.0, 500.0, 1800.0)


def truth_ground(x, d):
    """The truth as compare_truth.csv holds it: node values every 0.5 m, slowness
    interpolated linearly between them (slowfield samples a model file this way), so
    that scikit-fmm solves the same continuous ground the judge does."""
    nodes = np.arange(0.0, DEPTH + TRUTH_CELL / 2, TRUTH_CELL)
    s = np.interp(d, nodes, 1.0 / truth_nodes(nodes))
    return 1.0 / s + 0.0 * x


def times(velocity, xs):
    nx = int(round(X1 / H)) + 1
    nz = int(round(DEPTH / H)) + 1
    x = np.arange(nx) * H
    z = -DEPTH + np.arange(nz) * H
    Z, X = np.meshgrid(z, x, indexing="ij")
    V = velocity(X, -Z)
    r0 = R0_CELLS * H
    phi = np.hypot(X - xs, Z) - r0
    t = np.asarray(skfmm.travel_time(phi, V, dx=H, order=2))
    t = t + r0 / float(velocity(np.array(xs), np.array(0.0)))
    top = nz - 1
    return {rx: float(t[top, int(round(rx / H))]) for rx in RECEIVERS}


def main():
    rows, t_truth = [], []
    for k, xs in enumerate(SHOTS):
        tp = times(picks_ground, xs)
        tt = times(truth_ground, xs)
        for rx in RECEIVERS:
            rows.append([f"S{k + 1}", xs, 0.0, rx, 0.0, "%.4f" % (1e3 * tp[rx]), SIGMA_MS])
            t_truth.append(1e3 * tt[rx])
    with open(os.path.join(HERE, "compare_picks.csv"), "w", newline="") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(["shot", "source_x", "source_z", "receiver_x", "receiver_z", "time_ms", "sigma_ms"])
        w.writerows(rows)
    obs = np.array([float(r[5]) for r in rows])
    res = obs - np.array(t_truth)
    with open(os.path.join(HERE, "compare_truth.csv"), "w", newline="") as f:
        f.write("x,z,velocity_mps\n")
        for j in range(int(round(DEPTH / 0.5)) + 1):
            z = -DEPTH + 0.5 * j
            for i in range(int(round(X1 / 0.5)) + 1):
                f.write("%g,%g,%.2f\n" % (0.5 * i, z, float(truth_nodes(np.array(-z)))))
    out = {
        "made_by": "tests/reference/make_compare_fixture.py",
        "skfmm_version": skfmm.__version__,
        "numpy_version": np.__version__,
        "h_m": H,
        "truth_times_ms": [float("%.6f" % t) for t in t_truth],
        "truth_rms_ms": float(np.sqrt(np.mean(res**2))),
        "truth_chi2": float(np.mean((res / SIGMA_MS) ** 2)),
    }
    with open(os.path.join(HERE, "compare_fixture.json"), "w") as f:
        json.dump(out, f, indent=1)
    print(out["truth_rms_ms"], out["truth_chi2"])


if __name__ == "__main__":
    main()
