"""Makes wavelet_fixture.json: PyWavelets' periodised 2-D multilevel wavelet
coefficients of one seeded random array, used by tests/wavelet_reference.rs (which
needs no Python).

    python3 -m venv /tmp/venv-wav && /tmp/venv-wav/bin/pip install PyWavelets numpy
    /tmp/venv-wav/bin/python tests/reference/make_wavelet_fixture.py

PyWavelets (https://github.com/PyWavelets/pywt) is the reference open-source wavelet
library. For an array x of shape (nz, nx) = (16, 24) (rows along z, columns along x,
stored row-major as our grids are, index j*nx + i) and for each wavelet w in
{haar, db2} (db2 is PyWavelets' name for the 4-tap Daubechies wavelet, D4) and each
level count L in {1, 2, 3}, it stores

    pywt.coeffs_to_array(pywt.wavedec2(x, w, mode="periodization", level=L))[0]

flattened row-major: the Mallat layout, approximation in the top-left block. The
"periodization" mode is the orthonormal periodised transform (output exactly half
the input at each level), the one src/wavelet.rs implements. db2 at L = 3 leaves a
coarsest block of 2 x 3, shorter than the filter; PyWavelets warns that the level is
too high but still computes the periodised transform, which stays orthonormal, so it
is kept as a test of the wrap-around. So is "short_lines": a seeded 4 x 8 array at
db2 level 2, whose second level filters columns of 2 values, shorter than the
4-tap filter (each tap wraps onto the line more than once).

json writes floats with repr (shortest round-trip form), so the Rust side reads the
exact doubles PyWavelets produced.
"""
import json
import warnings

import numpy as np
import pywt

NZ, NX = 16, 24
SEED = 20240611
WAVELETS = ["haar", "db2"]
LEVELS = [1, 2, 3]


def periodised(x, w, level):
    with warnings.catch_warnings():
        # db2 beyond dwt_max_level: "Level value of ... is too high" (see above)
        warnings.simplefilter("ignore", UserWarning)
        coeffs = pywt.wavedec2(x, w, mode="periodization", level=level)
    arr, _slices = pywt.coeffs_to_array(coeffs)
    assert arr.shape == x.shape
    return arr


def main():
    rng = np.random.default_rng(SEED)
    x = rng.standard_normal((NZ, NX))
    short = rng.standard_normal((4, 8))
    cases = []
    for w in WAVELETS:
        for level in LEVELS:
            arr = periodised(x, w, level)
            cases.append(
                {
                    "wavelet": w,
                    "level": level,
                    "coeffs": arr.ravel().tolist(),
                }
            )
    out = {
        "made_by": "tests/reference/make_wavelet_fixture.py",
        "pywt_version": pywt.__version__,
        "numpy_version": np.__version__,
        "call": "pywt.coeffs_to_array(pywt.wavedec2(x, w, mode='periodization', level=L))[0]",
        "seed": SEED,
        "nx": NX,
        "nz": NZ,
        "index": "j*nx + i, row j along z (axis 0), column i along x (axis 1)",
        "x": x.ravel().tolist(),
        "cases": cases,
        "short_lines": {
            "wavelet": "db2",
            "level": 2,
            "nx": 8,
            "nz": 4,
            "x": short.ravel().tolist(),
            "coeffs": periodised(short, "db2", 2).ravel().tolist(),
        },
    }
    path = __file__.replace("make_wavelet_fixture.py", "wavelet_fixture.json")
    with open(path, "w") as f:
        json.dump(out, f, separators=(",", ":"))


if __name__ == "__main__":
    main()
