//! Against `scipy.sparse.linalg.lsqr`, SciPy's translation of Paige & Saunders' Fortran
//! LSQR (fixture made by tests/reference/make_lsqr_fixture.py; SciPy and NumPy versions
//! recorded in the fixture). One 60 × 40 sparse system with cond(A) ≈ 8e3, solved with
//! `damp = 0.05` and without damping, `atol = btol = 1e-10`, at most 200 iterations.

use slowfield::linearised::Jacobian;
use slowfield::lsqr::{lsqr, LinearOperator, LsqrSettings};

/// The fixture stores floats as repr strings: `str::parse` is correctly rounded, so
/// they arrive bit for bit.
fn float(v: &serde_json::Value) -> f64 {
    v.as_str().unwrap().parse().unwrap()
}

fn floats(v: &serde_json::Value) -> Vec<f64> {
    v.as_array().unwrap().iter().map(float).collect()
}

fn ints(v: &serde_json::Value) -> Vec<usize> {
    v.as_array()
        .unwrap()
        .iter()
        .map(|a| a.as_u64().unwrap() as usize)
        .collect()
}

fn norm(v: &[f64]) -> f64 {
    v.iter().map(|a| a * a).sum::<f64>().sqrt()
}

fn rel_err(x: &[f64], want: &[f64]) -> f64 {
    let d: Vec<f64> = x.iter().zip(want).map(|(a, b)| a - b).collect();
    norm(&d) / norm(want)
}

fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs()
}

struct Run {
    damp: f64,
    x: Vec<f64>,
    x_dense: Vec<f64>,
    istop: u8,
    itn: usize,
    r1norm: f64,
    r2norm: f64,
    anorm: f64,
    acond: f64,
    arnorm: f64,
    xnorm: f64,
}

fn fixture() -> (Jacobian, Vec<f64>, f64, f64, usize, Vec<Run>) {
    let j: serde_json::Value =
        serde_json::from_str(include_str!("reference/lsqr_fixture.json")).unwrap();
    let (m, n) = (
        j["rows"].as_u64().unwrap() as usize,
        j["cols"].as_u64().unwrap() as usize,
    );
    let mut rows = vec![Vec::new(); m];
    for ((i, k), v) in ints(&j["a_row"])
        .into_iter()
        .zip(ints(&j["a_col"]))
        .zip(floats(&j["a_val"]))
    {
        rows[i].push((k, v));
    }
    let runs = j["runs"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| Run {
            damp: float(&r["damp"]),
            x: floats(&r["x"]),
            x_dense: floats(&r["x_dense"]),
            istop: r["istop"].as_u64().unwrap() as u8,
            itn: r["itn"].as_u64().unwrap() as usize,
            r1norm: float(&r["r1norm"]),
            r2norm: float(&r["r2norm"]),
            anorm: float(&r["anorm"]),
            acond: float(&r["acond"]),
            arnorm: float(&r["arnorm"]),
            xnorm: float(&r["xnorm"]),
        })
        .collect();
    (
        Jacobian::from_rows(&rows, n),
        floats(&j["b"]),
        float(&j["atol"]),
        float(&j["btol"]),
        j["iter_lim"].as_u64().unwrap() as usize,
        runs,
    )
}

/// `|b − A·x|`, `|Aᵀ(b − A·x) − damp²·x|` and `|x|` computed from `x`.
fn true_norms(a: &Jacobian, b: &[f64], damp: f64, x: &[f64]) -> (f64, f64, f64) {
    let mut r = b.to_vec();
    let mut ax = vec![0.0; a.rows()];
    a.apply_add(x, &mut ax);
    r.iter_mut().zip(&ax).for_each(|(r, ax)| *r -= ax);
    let mut g: Vec<f64> = x.iter().map(|x| -damp * damp * x).collect();
    a.apply_transpose_add(&r, &mut g);
    (norm(&r), norm(&g), norm(x))
}

/// Tolerances of one run, each 2–3× the value measured (in the comments: damped run,
/// undamped run).
struct Tolerances {
    x_vs_scipy: f64,
    /// `anorm` and `acond`: sums over every iteration's `α`, `β`. Through iteration 20
    /// ours and SciPy's agree to 1e-16; after it the bidiagonalisation has lost
    /// orthogonality and its `α`, `β` depend chaotically on rounding (SciPy sums `Aᵀu`
    /// and the norms in another order), so the sums drift apart by about 1e-3 while `x`
    /// still converges to the same answer.
    estimates: f64,
}

#[test]
fn lsqr_matches_scipy() {
    let (a, b, atol, btol, iter_lim, runs) = fixture();
    assert_eq!((a.rows(), a.cols()), (60, 40));
    assert_eq!(runs.len(), 2);
    for run in &runs {
        let d = run.damp;
        let tol = if d > 0.0 {
            Tolerances {
                // measured 3.2e-12
                x_vs_scipy: 8e-12,
                // measured 6.3e-4 (anorm and acond), both after 55 iterations
                estimates: 2e-3,
            }
        } else {
            Tolerances {
                // measured 5.8e-13
                x_vs_scipy: 1.5e-12,
                // measured 1.1e-2: 101 iterations against SciPy's 100
                estimates: 3e-2,
            }
        };
        let settings = LsqrSettings {
            damp: d,
            atol,
            btol,
            max_iterations: iter_lim,
            ..LsqrSettings::default()
        };
        let res = lsqr(&a, &b, &settings);

        // stop and iterations: measured 2 and 55 (= SciPy) damped, 2 and 101 (SciPy 100)
        // undamped
        assert_eq!(
            res.stop.istop(),
            Some(run.istop),
            "damp {d}: {:?}",
            res.stop
        );
        assert!(res.stop.converged());
        assert!(
            res.iterations.abs_diff(run.itn) <= 1,
            "damp {d}: {} iterations, SciPy {}",
            res.iterations,
            run.itn
        );

        let e = rel_err(&res.x, &run.x);
        assert!(e <= tol.x_vs_scipy, "damp {d}: x vs SciPy {e:e}");
        // against the dense minimiser both are limited by atol; ours no further from it
        // than SciPy's (measured ratios 1.0002 damped, 1.42 undamped)
        let (ours, theirs) = (rel_err(&res.x, &run.x_dense), rel_err(&run.x, &run.x_dense));
        assert!(
            ours <= 2.0 * theirs,
            "damp {d}: {ours:e} vs SciPy's {theirs:e}"
        );

        // r2norm: measured 3.3e-16 damped, 5.0e-16 undamped
        let e = rel(res.r_norm, run.r2norm);
        assert!(e <= 1.5e-15, "damp {d}: r2norm {e:e}");
        let (r1, ar, xn) = true_norms(&a, &b, d, &res.x);
        // r1norm against |b − A·x|: measured 1.9e-14 damped, 6.1e-15 undamped. SciPy's
        // own is 1.9e-11 off damped (it subtracts damp²·|x|² with a lagging estimate of
        // |x|), so against SciPy: measured 1.0e-11 damped, 5.0e-16 undamped.
        let e = rel(res.residual_norm, r1);
        assert!(e <= 5e-14, "damp {d}: r1norm vs |b − Ax| {e:e}");
        let e = rel(res.residual_norm, run.r1norm);
        assert!(e <= 3e-11, "damp {d}: r1norm vs SciPy {e:e}");
        // arnorm against the true gradient (about 1e-10 here, so few digits survive):
        // measured 3.3e-5 damped, 2.3e-5 undamped (SciPy's: 1.2e-5, 2.5e-6).
        let e = rel(res.ar_norm, ar);
        assert!(e <= 1e-4, "damp {d}: arnorm vs |Aᵀr − damp²x| {e:e}");
        // Against SciPy's arnorm only the size: both met rule 2, but at different last
        // iterates undamped (measured ratios 1.012 damped, 1.48 undamped).
        let ratio = res.ar_norm / run.arnorm;
        assert!(
            (1.0 / 3.0..=3.0).contains(&ratio),
            "damp {d}: arnorm ratio {ratio}"
        );
        assert!(run.arnorm <= atol * run.anorm * run.r2norm);
        // xnorm is |x| itself (measured 1.3e-16, 2.0e-16); SciPy's is a recurrence
        // estimate, 2.6e-13 and 6.1e-14 from ours
        let e = rel(res.x_norm, xn);
        assert!(e <= 5e-16, "damp {d}: xnorm vs |x| {e:e}");
        let e = rel(res.x_norm, run.xnorm);
        assert!(e <= 8e-13, "damp {d}: xnorm vs SciPy {e:e}");

        for (name, ours, theirs) in [
            ("anorm", res.a_norm, run.anorm),
            ("acond", res.a_cond, run.acond),
        ] {
            let e = rel(ours, theirs);
            assert!(e <= tol.estimates, "damp {d}: {name} {e:e}");
        }
    }
}
