"""Survey benchmark: the whole `slowfield forward` process against a whole Python
process doing the same job with scikit-fmm, same files, same run.

    python3 experiments/survey_bench/run.py [--reps N]     (default 3 repetitions)

Builds `cargo build --release` (binary $CARGO_TARGET_DIR/release/slowfield, or
target/release/slowfield), writes into a temporary folder

* model.csv  (x,z,velocity_mps): 150 m x 50 m at 0.25 m nodes (601 x 201), flat ground
  at z = 0, v = 400 + 30*depth m/s with a fast elliptic lens (1500 m/s, centre x = 90 m,
  depth 15 m, half-axes 12 m x 4 m);
* picks.csv  (the geometry: 16 shots at x = 2, 11.5, ..., 144.5 m, 60 receivers at
  x = 1, 3.5, ..., 148.5 m, all on the surface; times 0, ignored by both jobs),

then times, alternating, N times each:

(a) `slowfield forward --model model.csv --picks picks.csv -o out.csv --cell 0.25`
    with rayon's default threads (both cores) and with RAYON_NUM_THREADS=1;
(b) `python3 run.py --skfmm-job model.csv picks.csv out.csv`: a fresh Python process
    that imports numpy and scikit-fmm, reads the same two CSV files, solves the 16 shots
    one after the other with `skfmm.travel_time(order=2)` (point source as a circle of
    2 cells plus r0/v, as in experiments/fmm_bench/run.py), samples T bilinearly at the
    receivers and writes the picks file.

Prints the best and median wall seconds of each process, the ratio to scikit-fmm, and
the largest and median difference between the two jobs' times beyond 2 cells of the
shot (a sanity check, not an accuracy test: scikit-fmm is the less accurate of the
two, see experiments/fmm_bench).
"""
import csv
import os
import statistics
import subprocess
import sys
import tempfile
import time

NX, NZ, H = 601, 201, 0.25
SHOTS = [2.0 + 9.5 * k for k in range(16)]
RECEIVERS = [1.0 + 2.5 * k for k in range(60)]


def velocity(x, depth):
    v = 400.0 + 30.0 * depth
    if ((x - 90.0) / 12.0) ** 2 + ((depth - 15.0) / 4.0) ** 2 <= 1.0:
        v = 1500.0
    return v


def write_inputs(d):
    with open(os.path.join(d, "model.csv"), "w") as f:
        f.write("x,z,velocity_mps\n")
        for j in range(NZ):
            z = -50.0 + j * H
            for i in range(NX):
                x = i * H
                f.write(f"{x:g},{z:g},{velocity(x, -z):.3f}\n")
    with open(os.path.join(d, "picks.csv"), "w") as f:
        f.write("shot,source_x,source_z,receiver_x,receiver_z,time_ms\n")
        for s, xs in enumerate(SHOTS):
            for xr in RECEIVERS:
                f.write(f"S{s + 1:02},{xs:g},0,{xr:g},0,0\n")


def skfmm_job(model_path, picks_path, out_path):
    """The Python job: everything the forward command does, with scikit-fmm."""
    import numpy as np
    import skfmm

    m = np.loadtxt(model_path, delimiter=",", comments="#", skiprows=1)
    xs_u, zs_u = np.unique(m[:, 0]), np.unique(m[:, 1])
    h = float(xs_u[1] - xs_u[0])
    nx, nz = len(xs_u), len(zs_u)
    x0, z0 = xs_u[0], zs_u[0]
    V = np.empty((nz, nx))
    V[np.rint((m[:, 1] - z0) / h).astype(int), np.rint((m[:, 0] - x0) / h).astype(int)] = m[:, 2]
    shots = {}
    with open(picks_path, newline="") as f:
        for row in csv.DictReader(f):
            key = (row["shot"], float(row["source_x"]), float(row["source_z"]))
            shots.setdefault(key, []).append((float(row["receiver_x"]), float(row["receiver_z"])))
    X = x0 + np.arange(nx) * h
    Z = z0 + np.arange(nz) * h
    ZZ, XX = np.meshgrid(Z, X, indexing="ij")
    r0 = 2.0 * h
    with open(out_path, "w") as out:
        out.write("shot,source_x,source_z,receiver_x,receiver_z,time_ms\n")
        for (name, sx, sz), recs in shots.items():
            phi = np.hypot(XX - sx, ZZ - sz) - r0
            t = np.asarray(skfmm.travel_time(phi, V, dx=h, order=2))
            i0 = int(round((sx - x0) / h))
            j0 = int(round((sz - z0) / h))
            t = t + r0 / V[j0, i0]
            for rx, rz in recs:
                fx = min(max((rx - x0) / h, 0.0), nx - 1.000001)
                fz = min(max((rz - z0) / h, 0.0), nz - 1.000001)
                i, j = int(fx), int(fz)
                wx, wz = fx - i, fz - j
                tr = (1 - wz) * ((1 - wx) * t[j, i] + wx * t[j, i + 1]) + wz * (
                    (1 - wx) * t[j + 1, i] + wx * t[j + 1, i + 1]
                )
                out.write(f"{name},{sx:g},{sz:g},{rx:g},{rz:g},{tr * 1e3:.4f}\n")


def read_times(path):
    out = {}
    with open(path, newline="") as f:
        for row in csv.DictReader(l for l in f if not l.startswith("#")):
            key = (row["shot"], float(row["source_x"]), float(row["receiver_x"]))
            out[key] = float(row["time_ms"])
    return out


def timed(cmd, env=None):
    t = time.perf_counter()
    subprocess.run(cmd, check=True, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    return time.perf_counter() - t


def main():
    if len(sys.argv) == 5 and sys.argv[1] == "--skfmm-job":
        skfmm_job(*sys.argv[2:])
        return
    reps = int(sys.argv[sys.argv.index("--reps") + 1]) if "--reps" in sys.argv else 3
    root = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    target = os.environ.get("CARGO_TARGET_DIR", os.path.join(root, "target"))
    subprocess.run(["cargo", "build", "--release", "--quiet", "--bin", "slowfield"], cwd=root, check=True)
    exe = os.path.join(target, "release", "slowfield")
    import numpy as np
    import skfmm

    with tempfile.TemporaryDirectory() as d:
        write_inputs(d)
        model, picks = os.path.join(d, "model.csv"), os.path.join(d, "picks.csv")
        ours_out, py_out = os.path.join(d, "ours.csv"), os.path.join(d, "skfmm.csv")
        fwd = [exe, "forward", "--model", model, "--picks", picks, "-o", ours_out, "--cell", "0.25"]
        env1 = dict(os.environ, RAYON_NUM_THREADS="1")
        envd = {k: v for k, v in os.environ.items() if k != "RAYON_NUM_THREADS"}
        jobs = {
            "slowfield forward (rayon, all cores)": (fwd, envd),
            "slowfield forward (RAYON_NUM_THREADS=1)": (fwd, env1),
            "python3 + scikit-fmm (one thread)": (
                [sys.executable, os.path.abspath(__file__), "--skfmm-job", model, picks, py_out],
                None,
            ),
        }
        walls = {k: [] for k in jobs}
        for _ in range(reps):
            for name, (cmd, env) in jobs.items():
                walls[name].append(timed(cmd, env))
        a, b = read_times(ours_out), read_times(py_out)
        # Receivers within scikit-fmm's start circle (2 cells) of their shot are left
        # out: there its time is not defined by the march (ours gives 0 at zero offset).
        far = [k for k in a if abs(k[2] - k[1]) > 2.0 * H]
        diff = max(abs(a[k] - b[k]) for k in far)
        med = statistics.median(abs(a[k] - b[k]) for k in far)
        ref = walls["python3 + scikit-fmm (one thread)"]
        print(
            f"survey: {len(SHOTS)} shots x {len(RECEIVERS)} receivers on {NX}x{NZ} nodes at {H} m; "
            f"scikit-fmm {skfmm.__version__}, numpy {np.__version__}; {os.cpu_count()} cores; "
            f"{reps} alternating runs"
        )
        print("| process | best wall s | median wall s | ratio to scikit-fmm (best) | ratio (median) |")
        print("|---|---|---|---|---|")
        for name, w in walls.items():
            print(
                f"| {name} | {min(w):.3f} | {statistics.median(w):.3f} | {min(w) / min(ref):.2f} | "
                f"{statistics.median(w) / statistics.median(ref):.2f} |"
            )
        print(
            f"|ours - scikit-fmm| over the {len(far)} picks beyond 2 cells of their shot: "
            f"largest {diff:.4f} ms, median {med:.4f} ms"
        )


if __name__ == "__main__":
    main()
