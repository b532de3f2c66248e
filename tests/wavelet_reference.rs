//! Against PyWavelets (https://github.com/PyWavelets/pywt), the reference open-source
//! wavelet library: `pywt.coeffs_to_array(pywt.wavedec2(x, w, mode="periodization",
//! level=L))[0]` of one seeded random 16 × 24 array, for `w` = `haar` and `db2` (D4)
//! and L = 1, 2, 3, and of a 4 × 8 array at `db2` level 2, whose second level filters
//! columns of 2 values with the 4-tap filter (the periodised taps wrap onto the line
//! more than once; PyWavelets warns but computes it). The fixture is made by
//! tests/reference/make_wavelet_fixture.py (PyWavelets and numpy versions recorded in
//! it); its floats are the exact doubles.
//!
//! This holds the filter alignment and the block layout: a transform shifted by a
//! sample, or with its detail blocks swapped, is still orthonormal and passes the
//! unit tests of reconstruction and adjointness, but not these.

use slowfield::wavelet::{Transform2d, Wavelet};

/// Largest |ours − PyWavelets| allowed on any coefficient, and on our inverse of
/// PyWavelets' coefficients against the array. Measured (pywt 1.8.0, numpy 2.4.6), on
/// values up to 3.5: forward 1.3e-15, 1.6e-15, 2.7e-15 (haar L1, L2, L3), 1.8e-15,
/// 2.2e-15, 2.7e-15 (db2) and 1.8e-15 (db2 on the 4 × 8 array); inverse at most
/// 1.8e-15. The difference is rounding: the order of the sums, and PyWavelets' filters
/// being decimal literals where ours are computed from √2 and √3. A shift by one
/// sample gives errors of order 1.
const TOLERANCE: f64 = 6e-15;

fn floats(v: &serde_json::Value) -> Vec<f64> {
    v.as_array()
        .unwrap()
        .iter()
        .map(|a| a.as_f64().unwrap())
        .collect()
}

fn max_diff(a: &[f64], b: &[f64]) -> (f64, usize) {
    assert_eq!(a.len(), b.len());
    let (mut worst, mut at) = (0.0f64, 0);
    for (k, (x, y)) in a.iter().zip(b).enumerate() {
        if (x - y).abs() > worst {
            (worst, at) = ((x - y).abs(), k);
        }
    }
    (worst, at)
}

/// Asserts one PyWavelets case both ways, to [`TOLERANCE`]: our coefficients of `x`,
/// and our inverse of PyWavelets' coefficients.
fn assert_matches_pywavelets(
    name: &str,
    level: usize,
    nx: usize,
    nz: usize,
    x: &[f64],
    want: &[f64],
) {
    let wavelet = match name {
        "haar" => Wavelet::Haar,
        "db2" => Wavelet::Daubechies4,
        other => panic!("fixture wavelet {other}"),
    };
    assert_eq!(x.len(), nx * nz);
    let t = Transform2d::new(wavelet, nx, nz, level).unwrap();
    let got = t.forward(x);
    let (worst, at) = max_diff(&got, want);
    eprintln!("{name} {nz}×{nx} L{level}: max |ours - pywt| = {worst:.2e} (at {at})");
    assert!(
        worst <= TOLERANCE,
        "{name} {nz}×{nx} level {level}: coefficient {at} (row {}, column {}) is {} here, \
         {} in PyWavelets",
        at / nx,
        at % nx,
        got[at],
        want[at]
    );
    let (err, _) = max_diff(&t.inverse(want), x);
    eprintln!("{name} {nz}×{nx} L{level}: max |inverse(pywt) - x| = {err:.2e}");
    assert!(
        err <= TOLERANCE,
        "{name} level {level}: inverse off by {err:e}"
    );
}

#[test]
fn matches_pywavelets_periodization() {
    let text = include_str!("reference/wavelet_fixture.json");
    let j: serde_json::Value = serde_json::from_str(text).unwrap();
    let nx = j["nx"].as_u64().unwrap() as usize;
    let nz = j["nz"].as_u64().unwrap() as usize;
    let x = floats(&j["x"]);
    assert_eq!(x.len(), nx * nz);
    let cases = j["cases"].as_array().unwrap();
    assert_eq!(cases.len(), 6);
    for case in cases {
        assert_matches_pywavelets(
            case["wavelet"].as_str().unwrap(),
            case["level"].as_u64().unwrap() as usize,
            nx,
            nz,
            &x,
            &floats(&case["coeffs"]),
        );
    }
}

#[test]
fn matches_pywavelets_on_lines_shorter_than_the_filter() {
    let text = include_str!("reference/wavelet_fixture.json");
    let j: serde_json::Value = serde_json::from_str(text).unwrap();
    let s = &j["short_lines"];
    // the case is the one meant: after the first level the columns are shorter than
    // the 4-tap filter, so the periodised taps wrap onto a line more than once
    let (nz, level) = (s["nz"].as_u64().unwrap(), s["level"].as_u64().unwrap());
    assert_eq!(s["wavelet"], "db2");
    assert!(
        level >= 2 && nz >> (level - 1) < 4,
        "{nz} rows, level {level}"
    );
    assert_matches_pywavelets(
        s["wavelet"].as_str().unwrap(),
        s["level"].as_u64().unwrap() as usize,
        s["nx"].as_u64().unwrap() as usize,
        s["nz"].as_u64().unwrap() as usize,
        &floats(&s["x"]),
        &floats(&s["coeffs"]),
    );
}
