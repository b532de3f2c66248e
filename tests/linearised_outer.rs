//! The shared outer loop and linearisation (`slowfield::linearised`) on small problems
//! whose answers are known: sparse products against dense arithmetic, the linearised
//! χ²'s gradient against central differences, step control on an inner solve that
//! overshoots, and a bit-exact resume from a saved state.

use slowfield::linearised::{
    chi2_of, run, ForwardModel, InnerProblem, InnerSolution, Jacobian, Linearisation, OuterLog,
    OuterObserver, OuterSettings, OuterState, Quiet,
};

/// Two picks through two unknowns with a nonlinear true misfit, to watch the loop.
struct Toy;
impl ForwardModel for Toy {
    fn linearise(&mut self, v: &[f64]) -> Result<Linearisation, String> {
        // times t_i = s_i + 0.5·s_i³ (s = 1/v), observed 1.5 each (s = 1)
        let s: Vec<f64> = v.iter().map(|v| 1.0 / v).collect();
        Ok(Linearisation {
            residual_s: s.iter().map(|s| 1.5 - (s + 0.5 * s.powi(3))).collect(),
            sigma_s: vec![0.1; 2],
            jacobian: Jacobian::from_rows(
                &[
                    vec![(0, 1.0 + 1.5 * s[0] * s[0])],
                    vec![(1, 1.0 + 1.5 * s[1] * s[1])],
                ],
                2,
            ),
        })
    }
}
/// Parameters are slownesses; the inner solve overshoots by `gain` × Newton step.
struct Overshoot {
    gain: f64,
}
impl InnerProblem for Overshoot {
    fn velocity(&self, p: &[f64]) -> Result<(Vec<f64>, f64), String> {
        Ok((p.iter().map(|s| 1.0 / s).collect(), 0.0))
    }
    fn solve(
        &mut self,
        p: &[f64],
        _v: &[f64],
        lin: &Linearisation,
    ) -> Result<InnerSolution, String> {
        let ds: Vec<f64> = (0..2)
            .map(|i| {
                let (_, w) = lin.jacobian.row(i).next().unwrap();
                self.gain * lin.residual_s[i] / w
            })
            .collect();
        let predicted_chi2 = chi2_of(&lin.predicted_residual(&ds), &lin.sigma_s);
        Ok(InnerSolution {
            params: p.iter().zip(&ds).map(|(a, b)| a + b).collect(),
            predicted_chi2,
            note: None,
            weight: 0.0,
            failed: false,
        })
    }
}

/// The toy problem from (0.6, 1.3) with a threefold overshooting inner solve.
fn overshooting(
    settings: &OuterSettings,
    fingerprint: u64,
    resume: Option<&OuterState>,
    observer: &mut dyn OuterObserver,
) -> slowfield::linearised::OuterOutcome {
    run(
        &mut Overshoot { gain: 3.0 },
        &mut Toy,
        vec![0.6, 1.3],
        settings,
        fingerprint,
        resume,
        observer,
    )
    .unwrap()
}

#[test]
fn jacobian_products_agree_with_dense_arithmetic() {
    let j = Jacobian::from_rows(&[vec![(0, 2.0), (2, 1.0)], vec![], vec![(1, -3.0)]], 3);
    assert_eq!(j.apply(&[1.0, 2.0, 3.0]), vec![5.0, 0.0, -6.0]);
    assert_eq!(j.apply_transpose(&[1.0, 5.0, 2.0]), vec![2.0, -6.0, 1.0]);
    let r = j.remap(&[usize::MAX, 0, 1], 2);
    assert_eq!(r.apply(&[1.0, 1.0]), vec![1.0, 0.0, -3.0]);
}

/// The linearised χ²'s gradient against central differences.
#[test]
fn chi2_gradient_matches_differences() {
    let lin = Linearisation {
        residual_s: vec![0.3, -0.2, 0.05],
        sigma_s: vec![0.1, 0.2, 0.05],
        jacobian: Jacobian::from_rows(
            &[vec![(0, 2.0), (1, 0.5)], vec![(1, 1.0)], vec![(0, -1.0)]],
            2,
        ),
    };
    let ds = [0.01, -0.02];
    let (_, g) = lin.chi2_and_gradient(&ds);
    for k in 0..2 {
        let h = 1e-6;
        let mut a = ds;
        let mut b = ds;
        a[k] += h;
        b[k] -= h;
        let fd = (lin.chi2_and_gradient(&a).0 - lin.chi2_and_gradient(&b).0) / (2.0 * h);
        eprintln!(
            "{k}: gradient {} vs differences {fd}: {:.2e}",
            g[k],
            (fd - g[k]).abs() / fd.abs().max(1.0)
        );
        // measured 7.2e-12 and 4.0e-11 on 2026-12-03 (rounding of the differences with
        // h = 1e-6); bound about 2.5×
        assert!(
            (fd - g[k]).abs() < 1e-10 * fd.abs().max(1.0),
            "{k}: {fd} {}",
            g[k]
        );
    }
}

/// An inner solve that overshoots threefold makes the true χ² rise; the loop must
/// shorten the step from the best iterate rather than accept it, so the accepted χ²
/// never rises and the best iterate keeps improving.
#[test]
fn a_too_long_step_is_shortened_not_accepted() {
    let settings = OuterSettings {
        iterations: 12,
        chi2_target: 1e-6,
        max_shortenings: 4,
    };
    let out = overshooting(&settings, 1, None, &mut Quiet);
    let h = &out.history;
    // the first full step overshoots: its χ² rises and it is rejected
    assert!(h[1].chi2 > h[0].chi2 && !h[1].accepted, "{h:?}");
    assert_eq!(h[1].step, 1.0);
    // the next try is the halved step from the same best iterate
    assert_eq!(h[2].step, 0.5);
    let accepted: Vec<f64> = h.iter().filter(|l| l.accepted).map(|l| l.chi2).collect();
    assert!(accepted.windows(2).all(|w| w[1] < w[0]), "{accepted:?}");
    eprintln!(
        "χ² {} → {}: {:.3e} of the start; {h:?}",
        out.chi2_before(),
        out.chi2_after(),
        out.chi2_after() / out.chi2_before()
    );
    // measured 71.7 → 0.0157, 2.19e-4 of the start, on 2026-12-03; bound about 2.5×
    assert!(out.chi2_after() < 5.5e-4 * out.chi2_before(), "{h:?}");
    assert_eq!(out.chi2_after(), *accepted.last().unwrap());
    // without step control the same inner solve would have kept the rising iterate
    // as its next start: the true χ² after the first step is what it would carry
    assert!(h[1].chi2 > out.chi2_before());
}

#[test]
fn state_round_trip_and_bit_exact_resume() {
    let settings = OuterSettings {
        iterations: 6,
        chi2_target: 1e-9,
        max_shortenings: 4,
    };
    struct Keep(Vec<OuterState>);
    impl OuterObserver for Keep {
        fn on_state(&mut self, s: &OuterState) {
            self.0.push(OuterState::from_bytes(&s.to_bytes()).unwrap());
        }
    }
    let mut keep = Keep(Vec::new());
    let whole = overshooting(&settings, 7, None, &mut keep);
    let mid = &keep.0[3];
    // NaN predictions make `==` useless here: compare the bytes
    assert_eq!(
        mid.to_bytes(),
        OuterState::from_bytes(&mid.to_bytes()).unwrap().to_bytes()
    );
    let resumed = overshooting(&settings, 7, Some(mid), &mut Quiet);
    assert_eq!(resumed.resumed_from, Some(3));
    assert_eq!(resumed.params, whole.params);
    let bits = |h: &[OuterLog]| {
        h.iter()
            .map(|l| (l.iteration, l.chi2.to_bits(), l.step.to_bits(), l.accepted))
            .collect::<Vec<_>>()
    };
    assert_eq!(bits(&resumed.history), bits(&whole.history));
    // another fingerprint starts afresh
    let other = overshooting(&settings, 8, Some(mid), &mut Quiet);
    assert_eq!(other.resumed_from, None);
    let mut bytes = mid.to_bytes();
    bytes.truncate(bytes.len() - 3);
    assert!(OuterState::from_bytes(&bytes).is_err());
}

/// An inner solver that fails, or stops early, is heard: a failure stops the loop with
/// its message, an early stop is kept as a note with its iteration.
#[test]
fn inner_failures_and_early_stops_are_reported() {
    struct Faulty(bool);
    impl InnerProblem for Faulty {
        fn velocity(&self, p: &[f64]) -> Result<(Vec<f64>, f64), String> {
            Ok((p.iter().map(|s| 1.0 / s).collect(), 0.0))
        }
        fn solve(
            &mut self,
            p: &[f64],
            _v: &[f64],
            _lin: &Linearisation,
        ) -> Result<InnerSolution, String> {
            if self.0 {
                Err("the objective could not be evaluated".into())
            } else {
                Ok(InnerSolution {
                    params: p.iter().map(|s| 0.5 * (s + 1.0)).collect(),
                    predicted_chi2: f64::NAN,
                    note: Some("line search gave up".into()),
                    weight: 0.0,
                    failed: false,
                })
            }
        }
    }
    let settings = OuterSettings {
        iterations: 2,
        chi2_target: 1e-9,
        max_shortenings: 2,
    };
    let e = run(
        &mut Faulty(true),
        &mut Toy,
        vec![0.6, 1.3],
        &settings,
        1,
        None,
        &mut Quiet,
    )
    .unwrap_err();
    assert!(e.contains("could not be evaluated"), "{e}");
    let out = run(
        &mut Faulty(false),
        &mut Toy,
        vec![0.6, 1.3],
        &settings,
        1,
        None,
        &mut Quiet,
    )
    .unwrap();
    assert_eq!(out.notes.len(), 2, "{:?}", out.notes);
    assert_eq!(out.notes[0], (0, "line search gave up".to_string()));
}

/// An inner solve that points the wrong way (a long solve in a nonlinear
/// parametrisation can end where every point of the chord from the start raises χ²)
/// until the method is asked to be more cautious: `shrink` makes the loop solve again
/// from the best iterate instead of stopping, and the cautious solve is then accepted.
/// The cautious flag is carried, so a run resumed between the two solves (without the
/// best iterate's linearisation in memory) ends bit for bit where the whole run does.
#[test]
fn a_stalled_step_is_solved_again_more_cautiously() {
    struct Wrong {
        cautious: bool,
        may_shrink: bool,
    }
    impl InnerProblem for Wrong {
        fn velocity(&self, p: &[f64]) -> Result<(Vec<f64>, f64), String> {
            Ok((p.iter().map(|s| 1.0 / s).collect(), 0.0))
        }
        fn solve(
            &mut self,
            p: &[f64],
            _v: &[f64],
            lin: &Linearisation,
        ) -> Result<InnerSolution, String> {
            let gain = if self.cautious { 1.0 } else { -2.0 };
            let ds: Vec<f64> = (0..2)
                .map(|i| {
                    let (_, w) = lin.jacobian.row(i).next().unwrap();
                    gain * lin.residual_s[i] / w
                })
                .collect();
            Ok(InnerSolution {
                params: p.iter().zip(&ds).map(|(a, b)| a + b).collect(),
                predicted_chi2: f64::NAN,
                note: None,
                weight: 0.0,
                failed: false,
            })
        }
        fn carried(&self) -> Vec<f64> {
            vec![f64::from(u8::from(self.cautious))]
        }
        fn restore(&mut self, c: &[f64]) {
            self.cautious = c.first() == Some(&1.0);
        }
        fn shrink(&mut self) -> bool {
            if self.may_shrink && !self.cautious {
                self.cautious = true;
                true
            } else {
                false
            }
        }
    }
    let settings = OuterSettings {
        iterations: 10,
        chi2_target: 1e-6,
        max_shortenings: 2,
    };
    struct Keep(Vec<OuterState>);
    impl OuterObserver for Keep {
        fn on_state(&mut self, s: &OuterState) {
            self.0.push(s.clone());
        }
    }
    let go = |may_shrink: bool, resume: Option<&OuterState>, keep: &mut Keep| {
        run(
            &mut Wrong {
                cautious: false,
                may_shrink,
            },
            &mut Toy,
            vec![0.6, 1.3],
            &settings,
            3,
            resume,
            keep,
        )
        .unwrap()
    };
    // without a cautious retry the loop stops where it started
    let stuck = go(false, None, &mut Keep(Vec::new()));
    assert_eq!(stuck.stop, slowfield::linearised::OuterStop::Stalled);
    assert_eq!(stuck.kept, 0);
    let mut keep = Keep(Vec::new());
    let out = go(true, None, &mut keep);
    let h = &out.history;
    // the wrong step and its two halvings are rejected, then a full cautious step
    let steps: Vec<(f64, bool)> = h.iter().map(|l| (l.step, l.accepted)).collect();
    assert_eq!(
        steps[..5],
        [
            (0.0, true),
            (1.0, false),
            (0.5, false),
            (0.25, false),
            (1.0, true)
        ],
        "{h:?}"
    );
    assert!(out.chi2_after() < 1e-3 * out.chi2_before(), "{h:?}");
    // resumed during the halvings: the best iterate's linearisation is recomputed
    let resumed = go(true, Some(&keep.0[2]), &mut Keep(Vec::new()));
    assert_eq!(resumed.resumed_from, Some(2));
    assert_eq!(resumed.params, out.params);
    assert_eq!(resumed.history.len(), out.history.len());
}
