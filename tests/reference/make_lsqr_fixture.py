"""Makes lsqr_fixture.json: scipy.sparse.linalg.lsqr on one seeded sparse system, used by
tests/lsqr_reference.rs (which needs no Python).

    python3 -m venv /tmp/venv-lsqr && /tmp/venv-lsqr/bin/pip install scipy numpy
    /tmp/venv-lsqr/bin/python tests/reference/make_lsqr_fixture.py

Made with SciPy 1.17.1 and NumPy 2.4.6 (both recorded in the fixture). SciPy's lsqr is
a Python translation of Paige & Saunders' Fortran LSQR, so the fixture checks our
implementation of the same algorithm, stopping rules and norm estimates.

The system: A is 60 x 40 with about 10 % of its entries standard normal (every column
given at least one), and b = A x_true + 0.01 noise, so the system is inconsistent and
LSQR ends on the least-squares rule. The last three columns are each a combination of
two earlier columns plus a 1e-3 perturbation on their pattern: for a tall matrix it is
nearly dependent columns, not rows, that make the smallest singular value small, and
these give cond(A) about 8e3, enough that LSQR needs more than 40 iterations and that
damp = 0.05 changes the answer.

Runs: lsqr(A, b, damp, atol=1e-10, btol=1e-10, iter_lim=200) for damp = 0.05 and 0.
Each stores x, istop, itn, r1norm, r2norm, anorm, acond, arnorm, xnorm, and x_dense,
the minimiser of |Ax - b|^2 + damp^2 |x|^2 by numpy.linalg.lstsq on [A; damp I].

Floats are stored as repr strings: Rust's str::parse is correctly rounded, while
serde_json's default number parser may miss by an ulp, so strings keep the values the
same bit for bit.
"""
import json

import numpy as np
import scipy
import scipy.sparse as sp
from scipy.sparse.linalg import lsqr

M, N = 60, 40
DENSITY = 0.1
SEED = 1982
ATOL = BTOL = 1e-10
ITER_LIM = 200
DAMPS = [0.05, 0.0]


def system():
    rng = np.random.default_rng(SEED)
    mask = rng.random((M, N)) < DENSITY
    a = np.where(mask, rng.standard_normal((M, N)), 0.0)
    for j in range(N):
        if not a[:, j].any():
            a[rng.integers(M), j] = rng.standard_normal()
    for k in range(3):
        base = a[:, 2 * k] - 0.5 * a[:, 2 * k + 1]
        perturbation = np.where(base != 0.0, rng.standard_normal(M), 0.0)
        a[:, N - 3 + k] = base + 1e-3 * perturbation
    x_true = rng.standard_normal(N)
    b = a @ x_true + 0.01 * rng.standard_normal(M)
    return a, b


def s(v):
    return repr(float(v))


def main():
    a, b = system()
    coo = sp.coo_matrix(a)
    runs = []
    for damp in DAMPS:
        x, istop, itn, r1norm, r2norm, anorm, acond, arnorm, xnorm, _ = lsqr(
            coo.tocsr(), b, damp=damp, atol=ATOL, btol=BTOL, iter_lim=ITER_LIM
        )
        augmented = np.vstack([a, damp * np.eye(N)])
        rhs = np.concatenate([b, np.zeros(N)])
        x_dense = np.linalg.lstsq(augmented, rhs, rcond=None)[0]
        runs.append(
            {
                "damp": s(damp),
                "x": [s(v) for v in x],
                "x_dense": [s(v) for v in x_dense],
                "istop": int(istop),
                "itn": int(itn),
                "r1norm": s(r1norm),
                "r2norm": s(r2norm),
                "anorm": s(anorm),
                "acond": s(acond),
                "arnorm": s(arnorm),
                "xnorm": s(xnorm),
            }
        )
    out = {
        "made_by": "tests/reference/make_lsqr_fixture.py",
        "scipy_version": scipy.__version__,
        "numpy_version": np.__version__,
        "rows": M,
        "cols": N,
        "cond": s(np.linalg.cond(a)),
        "atol": s(ATOL),
        "btol": s(BTOL),
        "iter_lim": ITER_LIM,
        "a_row": [int(i) for i in coo.row],
        "a_col": [int(j) for j in coo.col],
        "a_val": [s(v) for v in coo.data],
        "b": [s(v) for v in b],
        "runs": runs,
    }
    with open(__file__.replace("make_lsqr_fixture.py", "lsqr_fixture.json"), "w") as f:
        json.dump(out, f, separators=(",", ":"))


if __name__ == "__main__":
    main()
