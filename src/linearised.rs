//! The linearised misfit shared by every method that fits a gridded velocity to the
//! picks through a forward solver: residuals, ray sensitivities as a sparse Jacobian,
//! the linearised χ² with its gradient, and the outer loop around them.
//!
//! For first arrivals, Fermat's principle makes the node weights of a pick's ray the
//! derivatives of its time with respect to the node slownesses (Aki & Richards,
//! *Quantitative Seismology*, ch. 12), so around the current model
//! `T(s + δs) ≈ T(s) + J·δs` and the residual (observed − predicted, the one sign used
//! everywhere) becomes `r − J·δs`.
//!
//! The outer loop ([`run`]) linearises at the current iterate (one forward solve of
//! every shot with rays), asks the method for the minimiser of its linearised
//! objective, and judges that candidate by a true forward solve. A candidate whose
//! true χ² is not below the best so far is not accepted: the step from the best
//! iterate is halved (a backtracking line search on the true misfit) until the χ²
//! falls or `max_shortenings` halvings have failed, when the loop stops. So the
//! accepted χ² never rises, and the iterate kept is the one with the lowest true χ².
//! The loop stops at `chi2_target` (the discrepancy principle: fitting the picks more
//! closely than their uncertainty only fits noise). An [`OuterState`] at the start of
//! every outer iteration makes it resumable bit for bit.

use serde::{Deserialize, Serialize};

use crate::state_bytes::{put_f64, put_f64s, put_u32, put_u64, Reader};

/// A sparse matrix in compressed rows: `∂T_i/∂s_k` of every pick `i` (rows) and grid
/// node or model unknown `k` (columns), s/s·m⁻¹ = m.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Jacobian {
    row_start: Vec<usize>,
    cols: Vec<usize>,
    vals: Vec<f64>,
    n_cols: usize,
}

impl Jacobian {
    /// One row per ray, `(column, weight)` pairs (an empty row: no sensitivity).
    pub fn from_rows(rows: &[Vec<(usize, f64)>], n_cols: usize) -> Jacobian {
        let mut j = Jacobian {
            row_start: Vec::with_capacity(rows.len() + 1),
            cols: Vec::new(),
            vals: Vec::new(),
            n_cols,
        };
        j.row_start.push(0);
        for r in rows {
            for &(k, w) in r {
                debug_assert!(k < n_cols);
                j.cols.push(k);
                j.vals.push(w);
            }
            j.row_start.push(j.cols.len());
        }
        j
    }

    /// Number of rows (picks).
    pub fn n_rows(&self) -> usize {
        self.row_start.len().saturating_sub(1)
    }

    /// Number of columns.
    pub fn n_cols(&self) -> usize {
        self.n_cols
    }

    /// Stored entries.
    pub fn nnz(&self) -> usize {
        self.vals.len()
    }

    /// The `(column, weight)` pairs of row `i`.
    pub fn row(&self, i: usize) -> impl Iterator<Item = (usize, f64)> + '_ {
        let (a, b) = (self.row_start[i], self.row_start[i + 1]);
        self.cols[a..b]
            .iter()
            .copied()
            .zip(self.vals[a..b].iter().copied())
    }

    /// `J·x`.
    pub fn apply(&self, x: &[f64]) -> Vec<f64> {
        (0..self.n_rows())
            .map(|i| self.row(i).map(|(k, w)| w * x[k]).sum())
            .collect()
    }

    /// `Jᵀ·y`.
    pub fn apply_transpose(&self, y: &[f64]) -> Vec<f64> {
        let mut out = vec![0.0; self.n_cols];
        for (i, &yi) in y.iter().enumerate().take(self.n_rows()) {
            for (k, w) in self.row(i) {
                out[k] += w * yi;
            }
        }
        out
    }

    /// The same rows on other columns: column `k` becomes `map[k]`; entries whose
    /// `map[k]` is `usize::MAX` (e.g. air nodes, not unknowns) are dropped.
    pub fn remap(&self, map: &[usize], n_cols: usize) -> Jacobian {
        let rows: Vec<Vec<(usize, f64)>> = (0..self.n_rows())
            .map(|i| {
                self.row(i)
                    .filter(|&(k, _)| map[k] != usize::MAX)
                    .map(|(k, w)| (map[k], w))
                    .collect()
            })
            .collect();
        Jacobian::from_rows(&rows, n_cols)
    }

    /// The sensitivities to other unknowns of which the columns are linear
    /// combinations: column `k` is `Σ w·u_c` over `(c, w)` in `combination[k]` (e.g.
    /// bilinear interpolation of node slowness from a coarser lattice). The result is
    /// `J·W`, entries of one row on the same unknown summed.
    pub fn through(&self, combination: &[Vec<(usize, f64)>], n_cols: usize) -> Jacobian {
        let rows: Vec<Vec<(usize, f64)>> = (0..self.n_rows())
            .map(|i| {
                let mut r: Vec<(usize, f64)> = self
                    .row(i)
                    .flat_map(|(k, a)| combination[k].iter().map(move |&(c, w)| (c, a * w)))
                    .collect();
                r.sort_by_key(|e| e.0);
                let mut merged: Vec<(usize, f64)> = Vec::with_capacity(r.len());
                for (c, w) in r {
                    match merged.last_mut() {
                        Some(last) if last.0 == c => last.1 += w,
                        _ => merged.push((c, w)),
                    }
                }
                merged
            })
            .collect();
        Jacobian::from_rows(&rows, n_cols)
    }
}

/// A forward solve of every pick through one model, with the sensitivities.
#[derive(Clone, Debug, PartialEq)]
pub struct Linearisation {
    /// Observed − predicted time of every pick, s.
    pub residual_s: Vec<f64>,
    /// Standard uncertainty of every pick, s.
    pub sigma_s: Vec<f64>,
    /// `∂T/∂s` of every pick; a row is empty where no ray could be traced.
    pub jacobian: Jacobian,
}

/// Mean of `(r/σ)²`.
pub fn chi2_of(residual: &[f64], sigma: &[f64]) -> f64 {
    let n = residual.len().max(1) as f64;
    residual
        .iter()
        .zip(sigma)
        .map(|(r, s)| (r / s).powi(2))
        .sum::<f64>()
        / n
}

impl Linearisation {
    /// Mean of `(r/σ)²` at the model solved.
    pub fn chi2(&self) -> f64 {
        chi2_of(&self.residual_s, &self.sigma_s)
    }

    /// RMS residual, ms.
    pub fn rms_ms(&self) -> f64 {
        let n = self.residual_s.len().max(1) as f64;
        (self.residual_s.iter().map(|r| r * r).sum::<f64>() / n).sqrt() * 1e3
    }

    /// Residuals predicted after the slowness change `ds` (per column): `r − J·ds`.
    pub fn predicted_residual(&self, ds: &[f64]) -> Vec<f64> {
        let jd = self.jacobian.apply(ds);
        self.residual_s.iter().zip(jd).map(|(r, d)| r - d).collect()
    }

    /// Linearised χ² after `ds` and its gradient with respect to `ds`:
    /// `−(2/n)·Jᵀ·((r − J·ds)/σ²)`.
    pub fn chi2_and_gradient(&self, ds: &[f64]) -> (f64, Vec<f64>) {
        let pred = self.predicted_residual(ds);
        let n = pred.len().max(1) as f64;
        let weighted: Vec<f64> = pred
            .iter()
            .zip(&self.sigma_s)
            .map(|(r, s)| -2.0 * r / (s * s) / n)
            .collect();
        (
            chi2_of(&pred, &self.sigma_s),
            self.jacobian.apply_transpose(&weighted),
        )
    }

    /// The same linearisation in other unknowns (see [`Jacobian::through`]).
    pub fn through(&self, combination: &[Vec<(usize, f64)>], n_cols: usize) -> Linearisation {
        Linearisation {
            jacobian: self.jacobian.through(combination, n_cols),
            residual_s: self.residual_s.clone(),
            sigma_s: self.sigma_s.clone(),
        }
    }

    /// The same linearisation on other columns (see [`Jacobian::remap`]).
    pub fn remap(self, map: &[usize], n_cols: usize) -> Linearisation {
        Linearisation {
            jacobian: self.jacobian.remap(map, n_cols),
            ..self
        }
    }
}

/// A forward solver seen from a method: velocity at the nodes of a grid (index
/// `j·nx + i`, `NaN` above the ground) in, residuals and sensitivities out.
pub trait ForwardModel {
    /// Solves every pick through `velocity`; an error stops the loop with its message.
    fn linearise(&mut self, velocity: &[f64]) -> Result<Linearisation, String>;
}

/// What an inner solve hands back.
#[derive(Clone, Debug, PartialEq)]
pub struct InnerSolution {
    /// The new parameters.
    pub params: Vec<f64>,
    /// The χ² the linearisation predicts there.
    pub predicted_chi2: f64,
    /// Something the user should know (e.g. the solver stopped early), if any.
    pub note: Option<String>,
    /// Weight of the regulariser in the objective that was minimised.
    pub weight: f64,
    /// The inner solver failed: `params` are not a step to take, the loop stops
    /// and keeps its best iterate (the note says why).
    pub failed: bool,
}

/// The method's side of the outer loop. An error stops the loop with its message.
pub trait InnerProblem {
    /// Velocity at the grid nodes for parameters `p`, and the regulariser's value.
    fn velocity(&self, p: &[f64]) -> Result<(Vec<f64>, f64), String>;
    /// Minimises the method's objective linearised by `lin` at `p` (whose velocity is
    /// `v`).
    fn solve(&mut self, p: &[f64], v: &[f64], lin: &Linearisation)
        -> Result<InnerSolution, String>;
    /// What the method carries from one solve to the next (e.g. a cooling
    /// regularisation weight), saved with the loop's state so that a resumed loop
    /// goes on exactly; empty when nothing is carried.
    fn carried(&self) -> Vec<f64> {
        Vec::new()
    }
    /// Takes back what [`InnerProblem::carried`] gave, on resume.
    fn restore(&mut self, _carried: &[f64]) {}
    /// Outer iteration `iteration` became the best so far, reached by `step` (the share
    /// of its inner solution; 1: the full step; 0: the start), just before the solve
    /// from it: a method may adapt, e.g. lower its weight only after full steps.
    fn on_accept(&mut self, _iteration: usize, _step: f64) {}
    /// Every shortening of a step failed: may the method propose a more cautious one
    /// from the best iterate (e.g. a shorter inner solve)? `true` makes the loop solve
    /// again from there instead of stopping; the default never does. A step along the
    /// straight line between two parameter vectors is a sound line search only where the
    /// velocity is linear in the parameters (grid cells); a network's long inner solve
    /// can end where the chord from the start rises in χ² however short it is cut.
    fn shrink(&mut self) -> bool {
        false
    }
}

/// Settings of the outer loop.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct OuterSettings {
    /// Forward solves at most after the first (0: judge the start only).
    pub iterations: usize,
    /// Stop once the true χ² reaches this.
    pub chi2_target: f64,
    /// Halvings of a step whose true χ² did not fall before the loop gives up.
    pub max_shortenings: u32,
}

/// One outer iteration (one forward solve).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct OuterLog {
    /// Iteration (0: the starting model).
    pub iteration: usize,
    /// True χ² of the model solved.
    pub chi2: f64,
    /// True RMS misfit, ms.
    pub rms_ms: f64,
    /// Regulariser of the model.
    pub regulariser: f64,
    /// χ² the linearisation predicted for this model (`NaN` at the start and for a
    /// shortened step).
    pub predicted_chi2: f64,
    /// Length of the step from the best iterate, as a share of the inner solution
    /// (1: the full step; 0 at the start).
    pub step: f64,
    /// Whether the model became the new best iterate.
    pub accepted: bool,
    /// Regulariser weight of the solve that proposed this model (`NaN` at the start).
    pub weight: f64,
}

/// Everything the loop needs to continue at the start of an iteration.
#[derive(Clone, Debug, PartialEq)]
pub struct OuterState {
    /// Ties the state to the method's inputs and settings.
    pub fingerprint: u64,
    /// The iteration about to be solved.
    pub iteration: usize,
    /// The parameters about to be solved.
    pub params: Vec<f64>,
    /// The inner solution from the best iterate (the full step), empty before one.
    pub full: Vec<f64>,
    /// Share of the full step in `params`.
    pub step: f64,
    /// χ² the linearisation predicted for `params`.
    pub predicted: f64,
    /// The best iterate: χ², parameters, iteration.
    pub best_chi2: f64,
    /// Parameters of the best iterate.
    pub best_params: Vec<f64>,
    /// Iteration of the best iterate.
    pub best_iteration: usize,
    /// Every iteration so far.
    pub history: Vec<OuterLog>,
    /// What the method carries between solves ([`InnerProblem::carried`]).
    pub carried: Vec<f64>,
    /// Regulariser weight of the solve that proposed `params`.
    pub weight: f64,
}

const STATE_MAGIC: &[u8; 8] = b"SFOUTERS";
const STATE_VERSION: u32 = 4;

impl OuterState {
    /// Takes an inner solution solved at iteration `it` as the next full step (its
    /// note kept); `false` when the inner solver failed.
    fn take(&mut self, next: InnerSolution, it: usize, notes: &mut Vec<(usize, String)>) -> bool {
        if let Some(n) = next.note {
            notes.push((it, n));
        }
        if next.failed {
            return false;
        }
        self.weight = next.weight;
        self.full = next.params.clone();
        self.params = next.params;
        self.step = 1.0;
        self.predicted = next.predicted_chi2;
        true
    }

    /// The outer iteration this state continues with.
    pub fn iteration(&self) -> usize {
        self.iteration
    }

    /// Serialises the state.
    pub fn to_bytes(&self) -> Vec<u8> {
        let mut w = Vec::with_capacity(8 * (3 * self.params.len() + 8 * self.history.len()) + 96);
        w.extend_from_slice(STATE_MAGIC);
        put_u32(&mut w, STATE_VERSION);
        put_u64(&mut w, self.fingerprint);
        put_u64(&mut w, self.iteration as u64);
        put_f64s(&mut w, &self.params);
        put_f64s(&mut w, &self.full);
        put_f64(&mut w, self.step);
        put_f64(&mut w, self.predicted);
        put_f64(&mut w, self.best_chi2);
        put_f64s(&mut w, &self.best_params);
        put_u64(&mut w, self.best_iteration as u64);
        put_u64(&mut w, self.history.len() as u64);
        for h in &self.history {
            put_u64(&mut w, h.iteration as u64);
            for x in [
                h.chi2,
                h.rms_ms,
                h.regulariser,
                h.predicted_chi2,
                h.step,
                h.weight,
            ] {
                put_f64(&mut w, x);
            }
            w.push(u8::from(h.accepted));
        }
        put_f64s(&mut w, &self.carried);
        put_f64(&mut w, self.weight);
        w
    }

    /// Reads bytes written by [`OuterState::to_bytes`]; the error is a reason.
    pub fn from_bytes(bytes: &[u8]) -> Result<OuterState, String> {
        let mut r = Reader::new(bytes);
        r.header(STATE_MAGIC, STATE_VERSION, "a slowfield outer-loop state")?;
        let fingerprint = r.u64()?;
        let iteration = r.u64()? as usize;
        let params = r.f64s()?;
        let full = r.f64s()?;
        let step = r.f64()?;
        let predicted = r.f64()?;
        let best_chi2 = r.f64()?;
        let best_params = r.f64s()?;
        let best_iteration = r.u64()? as usize;
        let n = r.len(8 * 7 + 1)?;
        let mut history = Vec::with_capacity(n);
        for _ in 0..n {
            let iteration = r.u64()? as usize;
            let mut f = [0.0; 6];
            for x in &mut f {
                *x = r.f64()?;
            }
            let accepted = match r.take(1)?[0] {
                0 => false,
                1 => true,
                _ => return Err("a damaged history entry".into()),
            };
            history.push(OuterLog {
                iteration,
                chi2: f[0],
                rms_ms: f[1],
                regulariser: f[2],
                predicted_chi2: f[3],
                step: f[4],
                weight: f[5],
                accepted,
            });
        }
        let carried = r.f64s()?;
        let weight = r.f64()?;
        r.finish()?;
        if best_params.len() != params.len() || !(full.is_empty() || full.len() == params.len()) {
            return Err("its parameter vectors differ in length".into());
        }
        if best_iteration > iteration || history.len() != iteration {
            return Err("its iteration counts disagree".into());
        }
        Ok(OuterState {
            fingerprint,
            iteration,
            params,
            full,
            step,
            predicted,
            best_chi2,
            best_params,
            best_iteration,
            history,
            carried,
            weight,
        })
    }
}

/// What the caller sees of a running outer loop.
pub trait OuterObserver {
    /// After every forward solve.
    fn on_iteration(&mut self, _log: &OuterLog) {}
    /// At the start of every iteration: the state to save for a resume.
    fn on_state(&mut self, _state: &OuterState) {}
}

/// An observer that ignores everything.
pub struct Quiet;
impl OuterObserver for Quiet {}

/// Why the outer loop ended.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum OuterStop {
    /// The true χ² reached the target.
    TargetReached,
    /// All iterations were used.
    Iterations,
    /// A step stayed above the best χ² after every shortening.
    Stalled,
    /// The forward solve gave a non-finite χ².
    NotFinite,
    /// The inner solver failed (the notes say why); the best iterate is kept.
    InnerFailed,
}

/// The result of [`run`].
#[derive(Clone, Debug, PartialEq)]
pub struct OuterOutcome {
    /// Parameters of the best iterate.
    pub params: Vec<f64>,
    /// Its iteration (0: the start).
    pub kept: usize,
    /// Every iteration.
    pub history: Vec<OuterLog>,
    /// Why the loop ended.
    pub stop: OuterStop,
    /// The iteration a resumed loop continued with (`None`: from the start).
    pub resumed_from: Option<usize>,
    /// Notes of the inner solves, with the iteration they started from.
    pub notes: Vec<(usize, String)>,
}

impl OuterOutcome {
    /// True χ² of the start.
    pub fn chi2_before(&self) -> f64 {
        self.history.first().map_or(f64::NAN, |h| h.chi2)
    }

    /// True χ² of the iterate kept.
    pub fn chi2_after(&self) -> f64 {
        self.history
            .get(self.kept)
            .map_or(self.chi2_before(), |h| h.chi2)
    }
}

/// Runs the outer loop from `start` (see the module documentation). `resume` is used
/// when its fingerprint and sizes match and it lies within the iterations asked for.
pub fn run(
    inner: &mut dyn InnerProblem,
    forward: &mut dyn ForwardModel,
    start: Vec<f64>,
    settings: &OuterSettings,
    fingerprint: u64,
    resume: Option<&OuterState>,
    observer: &mut dyn OuterObserver,
) -> Result<OuterOutcome, String> {
    let fresh = OuterState {
        fingerprint,
        iteration: 0,
        full: Vec::new(),
        step: 0.0,
        predicted: f64::NAN,
        best_chi2: f64::INFINITY,
        best_params: start.clone(),
        best_iteration: 0,
        history: Vec::new(),
        params: start,
        carried: Vec::new(),
        weight: f64::NAN,
    };
    let (mut st, resumed_from) = match resume {
        Some(r)
            if r.fingerprint == fingerprint
                && r.params.len() == fresh.params.len()
                && r.iteration <= settings.iterations =>
        {
            (r.clone(), Some(r.iteration))
        }
        _ => (fresh, None),
    };
    if resumed_from.is_some() {
        inner.restore(&st.carried);
    }
    let mut notes = Vec::new();
    // the linearisation at the best iterate and its velocity, for a solve again from
    // there when every shortening fails (after a resume it is computed afresh: the
    // same forward solve gives the same linearisation)
    let mut best_lin: Option<(Linearisation, Vec<f64>)> = None;
    let stop = loop {
        st.carried = inner.carried();
        observer.on_state(&st);
        let it = st.iteration;
        let (v, reg) = inner.velocity(&st.params)?;
        let lin = forward.linearise(&v)?;
        let chi2 = lin.chi2();
        let accepted = chi2.is_finite() && (it == 0 || chi2 < st.best_chi2);
        let log = OuterLog {
            iteration: it,
            chi2,
            rms_ms: lin.rms_ms(),
            regulariser: reg,
            predicted_chi2: st.predicted,
            step: st.step,
            accepted,
            weight: st.weight,
        };
        observer.on_iteration(&log);
        st.history.push(log);
        st.iteration += 1;
        if !chi2.is_finite() && it == 0 {
            break OuterStop::NotFinite;
        }
        if accepted {
            st.best_chi2 = chi2;
            st.best_params = st.params.clone();
            st.best_iteration = it;
            if chi2 <= settings.chi2_target {
                break OuterStop::TargetReached;
            }
            if it == settings.iterations {
                break OuterStop::Iterations;
            }
            inner.on_accept(it, st.step);
            let next = inner.solve(&st.params, &v, &lin)?;
            best_lin = Some((lin, v));
            if !st.take(next, it, &mut notes) {
                break OuterStop::InnerFailed;
            }
        } else {
            if it == settings.iterations {
                break OuterStop::Iterations;
            }
            let half = st.step * 0.5;
            if half < 0.5f64.powi(settings.max_shortenings as i32) - 1e-12 {
                if !inner.shrink() {
                    break OuterStop::Stalled;
                }
                let (lin_b, v_b) = match best_lin.take() {
                    Some(b) => b,
                    None => {
                        let (v, _) = inner.velocity(&st.best_params)?;
                        (forward.linearise(&v)?, v)
                    }
                };
                let next = inner.solve(&st.best_params, &v_b, &lin_b)?;
                best_lin = Some((lin_b, v_b));
                if !st.take(next, it, &mut notes) {
                    break OuterStop::InnerFailed;
                }
                continue;
            }
            st.params = st
                .best_params
                .iter()
                .zip(&st.full)
                .map(|(b, f)| b + half * (f - b))
                .collect();
            st.step = half;
            st.predicted = f64::NAN;
        }
    };
    Ok(OuterOutcome {
        params: st.best_params,
        kept: st.best_iteration,
        history: st.history,
        stop,
        resumed_from,
        notes,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn through_is_the_product_with_the_combination_matrix() {
        // J (2 × 4) and W (4 × 3) as dense matrices, J·W by hand
        let j = [[1.0, 2.0, 0.0, 4.0], [0.0, 0.5, 3.0, 0.0]];
        let w = [
            [0.25, 0.75, 0.0],
            [0.0, 1.0, 0.0],
            [0.5, 0.0, 0.5],
            [0.0, 0.0, 0.0],
        ];
        // the non-zero entries of each dense row
        fn sparse<const N: usize>(m: &[[f64; N]]) -> Vec<Vec<(usize, f64)>> {
            m.iter()
                .map(|r| {
                    r.iter()
                        .enumerate()
                        .filter(|(_, &v)| v != 0.0)
                        .map(|(k, &v)| (k, v))
                        .collect()
                })
                .collect()
        }
        let (rows, comb) = (sparse(&j), sparse(&w));
        let jw = Jacobian::from_rows(&rows, 4).through(&comb, 3);
        for (i, row) in j.iter().enumerate() {
            let mut want = [0.0; 3];
            for (k, a) in row.iter().enumerate() {
                for (c, b) in w[k].iter().enumerate() {
                    want[c] += a * b;
                }
            }
            let mut got = [0.0; 3];
            let mut seen = Vec::new();
            for (c, v) in jw.row(i) {
                assert!(!seen.contains(&c), "column {c} twice in row {i}");
                seen.push(c);
                got[c] += v;
            }
            assert_eq!(got, want, "row {i}");
        }
    }
}
