//! Ensembles by randomise-then-optimise (Bardsley, Solonen, Haario & Laine 2014,
//! SIAM J. Sci. Comput. 36(4), A1895–A1910): every member inverts the picks redrawn
//! within their σ (`t + σ·ε`, ε standard normal) with its own seed, on the main run's
//! problem (same grid, starting model, bounds and settings). The spread of the
//! members is the section's uncertainty as far as the picks' noise and the method's
//! own randomness make it; it says nothing of the ground's non-uniqueness beyond what
//! the regulariser leaves free. The optimisation of each member is the method's own;
//! the Metropolis correction of the published method is not applied (the members are
//! taken as they are, the common approximate use of the method).

use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Mutex;
use std::time::Instant;

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};

use super::{grid, pinn, Fitted, History, Inversion, InversionError, Problem, Resume, Silent};
use crate::model::VelocityGrid;
use crate::settings::{MemberStart, Method, RunSettings};

/// Random stream of the picks' redraw (apart from the networks' and the sampler's).
const NOISE_STREAM: u64 = 0x005E_ED0F_7165;

/// One finished member.
#[derive(Debug, Clone)]
pub struct Member {
    /// Its number, 1-based.
    pub index: usize,
    /// Its seed (networks, collocation and the redraw of the picks).
    pub seed: u64,
    /// Its model on the problem's grid (air `NaN`).
    pub model: VelocityGrid,
    /// χ² of its model against its own redrawn picks on the inversion grid (the
    /// method's last fast-marching check), `NaN` when the method has none.
    pub chi2: f64,
    /// Wall-clock seconds.
    pub seconds: f64,
}

/// The seed of member `index` (1-based) of a run seeded `seed`.
pub fn member_seed(seed: u64, index: usize) -> u64 {
    seed ^ 0x9E37_79B9_7F4A_7C15u64.wrapping_mul(index as u64)
}

/// Relative standard deviation of the starting model's parameters in a member's
/// redraw of the prior (our assumption of how far the 1-D start fitted to all picks
/// may be off; not a published value).
pub const PRIOR_REL: f64 = 0.10;

/// The problem with every pick's time redrawn within its σ by `seed` (times stay
/// non-negative), and the starting model — the mean the regularisers pull towards,
/// and what ground no ray reaches keeps — redrawn with each velocity parameter
/// (surface velocity, gradient, half-space velocity) scaled by `1 + PRIOR_REL·ε`.
/// The depth of a layer start's jump is kept: moved below the deepest turning ray,
/// it turned the start into a uniform ground the grid method could not leave.
/// Grid and scales are the main problem's, so every member's model lies on the same
/// nodes. Redrawing the prior as well as the data is what makes randomise-then-
/// optimise sample the posterior; without it, ground no ray reaches would show no
/// spread at all under grid tomography (it keeps the start exactly).
pub fn redrawn(problem: &Problem, seed: u64) -> Problem {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(NOISE_STREAM);
    let mut p = problem.clone();
    for (pick, &sigma) in p.survey.picks.iter_mut().zip(&problem.sigma_s) {
        let e: f64 = StandardNormal.sample(&mut rng);
        pick.time = (pick.time + sigma * e).max(0.0);
    }
    let mut scale = || {
        let e: f64 = StandardNormal.sample(&mut rng);
        (1.0 + PRIOR_REL * e.clamp(-2.5, 2.5)).max(0.5)
    };
    let m = &mut p.start.model;
    m.v0 *= scale();
    m.g *= scale();
    m.v_cap = (m.v_cap * scale()).max(1.01 * m.v0);
    p
}

/// How an ensemble is run.
#[derive(Debug, Clone, Copy)]
pub struct Plan {
    /// Members in all.
    pub members: usize,
    /// Where PINN members start.
    pub start: MemberStart,
    /// Members run at once.
    pub parallel: usize,
}

/// Runs the members of `plan` not in `done` (1-based indices) on `problem` with the
/// main result's settings (`main.settings`, every open value derived), `parallel` at
/// once; `finished` sees each member as it ends (from the worker threads, one at a
/// time), so a caller can keep it before the next ends. Returns every member, `done`
/// included, by index. The first member error stops the rest (members already
/// finished were handed to `finished`).
pub fn run(
    problem: &Problem,
    main: &Inversion,
    plan: &Plan,
    done: Vec<Member>,
    finished: &mut (dyn FnMut(&Member) + Send),
) -> Result<Vec<Member>, InversionError> {
    let todo: Vec<usize> = (1..=plan.members)
        .filter(|i| !done.iter().any(|m| m.index == *i))
        .collect();
    let parallel = plan.parallel.clamp(1, todo.len().max(1));
    let next = AtomicUsize::new(0);
    let results: Mutex<Vec<Member>> = Mutex::new(done);
    let failure: Mutex<Option<InversionError>> = Mutex::new(None);
    let report = Mutex::new(finished);
    // plain worker threads, so that at most `parallel` members are in flight (a rayon
    // pool would start another member on a thread waiting inside a member's own
    // parallel loop); the members' fast marching shares the global pool
    std::thread::scope(|scope| {
        for _ in 0..parallel {
            scope.spawn(|| loop {
                if failure.lock().map(|f| f.is_some()).unwrap_or(true) {
                    return;
                }
                let k = next.fetch_add(1, Ordering::SeqCst);
                let Some(&index) = todo.get(k) else { return };
                match member(problem, main, plan.start, index, parallel) {
                    Ok(m) => {
                        if let Ok(mut f) = report.lock() {
                            f(&m);
                        }
                        if let Ok(mut r) = results.lock() {
                            r.push(m);
                        }
                    }
                    Err(e) => {
                        if let Ok(mut f) = failure.lock() {
                            f.get_or_insert(e);
                        }
                        return;
                    }
                }
            });
        }
    });
    if let Some(e) = failure.into_inner().ok().flatten() {
        return Err(e);
    }
    let mut members = results.into_inner().unwrap_or_default();
    members.sort_by_key(|m| m.index);
    Ok(members)
}

/// One member: the picks redrawn, then the method (a warm PINN member refines the
/// main result's networks; every other member runs the method from its start).
fn member(
    problem: &Problem,
    main: &Inversion,
    start: MemberStart,
    index: usize,
    parallel: usize,
) -> Result<Member, InversionError> {
    let t0 = Instant::now();
    let mut s: RunSettings = main.settings.clone();
    let seed = member_seed(s.pinn.seed, index);
    s.pinn.seed = seed;
    s.ensemble.members = 0;
    // A member's picks lie σ√2 from the truth (their own noise and the redraw's), so
    // the fit the main run's target asks for is twice its χ² against them; with the
    // main run's target a member fits the redraw's noise as well, and grid members
    // ran all their iterations for it (demo: 14–18 s a member against 1.7 s).
    s.pinn.chi2_target *= 2.0;
    s.refine.chi2_target *= 2.0;
    s.grid.chi2_target *= 2.0;
    if parallel > 1 {
        // the members share the cores; results do not depend on the thread count
        s.pinn.threads = 1;
    }
    let mp = redrawn(problem, seed);
    let fitted: Fitted = match (s.method, start, &main.networks) {
        (Method::Pinn, MemberStart::Warm, Some(net)) if s.refine.iterations > 0 => {
            pinn::refine_from(&mp, &s, net, &mut Silent)?
        }
        (Method::Pinn, ..) => pinn::run(&mp, &s, Resume::default(), &mut Silent)?,
        (Method::Grid, ..) => grid::run(&mp, &s, Resume::default(), &mut Silent)?,
    };
    let chi2 = fitted
        .stages
        .iter()
        .rev()
        .find_map(|st| match &st.history {
            History::Linearised {
                iterations, kept, ..
            } => iterations.get(*kept).map(|h| h.chi2),
            _ => None,
        })
        .unwrap_or(f64::NAN);
    Ok(Member {
        index,
        seed,
        model: fitted.model,
        chi2,
        seconds: t0.elapsed().as_secs_f64(),
    })
}

/// Node-wise mean and sample standard deviation (n − 1) of the members' velocities,
/// m/s; `NaN` in the air. With one member the spread is zero.
pub fn mean_and_spread(members: &[Member]) -> Option<(VelocityGrid, VelocityGrid)> {
    let first = members.first()?;
    let spec = first.model.spec;
    let n = members.len() as f64;
    let mut mean = vec![0.0; spec.len()];
    let mut std = vec![0.0; spec.len()];
    for k in 0..spec.len() {
        if first.model.v[k].is_nan() {
            mean[k] = f64::NAN;
            std[k] = f64::NAN;
            continue;
        }
        let m = members.iter().map(|m| m.model.v[k]).sum::<f64>() / n;
        let ss: f64 = members.iter().map(|mb| (mb.model.v[k] - m).powi(2)).sum();
        mean[k] = m;
        std[k] = if members.len() > 1 {
            (ss / (n - 1.0)).sqrt()
        } else {
            0.0
        };
    }
    Some((
        VelocityGrid { spec, v: mean },
        VelocityGrid { spec, v: std },
    ))
}

/// What an ensemble adds to a result.
#[derive(Debug, Clone)]
pub struct EnsembleResult {
    /// How it was run.
    pub plan: Plan,
    /// Every member, by index.
    pub members: Vec<Member>,
    /// Node-wise mean of the members' velocities, m/s.
    pub mean: VelocityGrid,
    /// The judge's verdict on the mean (it fits the picks worse than any member:
    /// first-arrival times are concave in the model, so averaging models whose fast
    /// paths lie in different places slows every path).
    pub mean_judge: super::Judgement,
    /// Node-wise sample standard deviation of the members' velocities, m/s.
    pub spread: VelocityGrid,
    /// Wall-clock seconds of the members (those resumed from files count zero).
    pub seconds: f64,
}

/// The result with its ensemble: the model stays the main run's (the picks as given),
/// the members' mean is judged beside it, and the spread is kept for the figures, the
/// tables and the depth band.
pub fn adopt(
    problem: &Problem,
    mut inv: Inversion,
    plan: Plan,
    members: Vec<Member>,
    seconds: f64,
) -> Result<Inversion, InversionError> {
    let (mean, spread) = mean_and_spread(&members)
        .ok_or_else(|| InversionError::Method("the ensemble has no members".into()))?;
    let mean_judge = super::judge(problem, &mean)?;
    inv.stages.push(super::Stage {
        name: format!("ensemble of {} members", members.len()),
        seconds,
        history: History::Ensemble {
            chi2: members.iter().map(|m| m.chi2).collect(),
            seconds: members.iter().map(|m| m.seconds).collect(),
        },
    });
    inv.ensemble = Some(EnsembleResult {
        plan,
        members,
        mean,
        mean_judge,
        spread,
        seconds,
    });
    Ok(inv)
}
