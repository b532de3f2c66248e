//! The training loop: Adam on fresh collocation batches, evaluation, early stopping,
//! roll-back after a non-finite step, checkpoints.

use burn::prelude::*;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

use super::checkpoint::{fingerprint, Checkpoint, State};
use super::loss::{shard_loss, split, Ctx, ShardLoss};
use super::model::{shapes, TrainedModel};
use super::sampler::Sampler;
use super::{
    validate, Domain, Observer, Pick, PinnError, PinnOutcome, PinnSettings, StartModel, StepLog,
    StopReason,
};

/// Stream of the weight initialisation and of the fixed evaluation points.
const INIT_STREAM: u64 = 0;
const EVAL_STREAM: u64 = u64::MAX;
/// Collocation points of the fixed evaluation set.
const EVAL_POINTS: usize = 2048;

/// Trains the two networks on `picks` (see the module documentation for the method).
///
/// `resume` continues a run from a [`Checkpoint`] of the same picks, domain, start model
/// and settings (only `steps`, `checkpoint_every` and `threads` may differ); the result
/// is bit-identical to an uninterrupted run with the same thread count.
pub fn train(
    picks: &[Pick],
    domain: &Domain,
    start: &StartModel,
    settings: &PinnSettings,
    resume: Option<Checkpoint>,
    observer: &mut dyn Observer,
) -> Result<PinnOutcome, PinnError> {
    validate::settings(settings)?;
    validate::domain(domain)?;
    validate::start(start, settings)?;
    validate::picks(picks, domain, settings)?;
    if settings.threads > 0 {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(settings.threads)
            .build()
            .map_err(|e| PinnError::Threads {
                threads: settings.threads,
                message: e.to_string(),
            })?;
        pool.install(|| run(picks, domain, start, settings, resume, observer))
    } else {
        run(picks, domain, start, settings, resume, observer)
    }
}

fn run(
    picks: &[Pick],
    domain: &Domain,
    start: &StartModel,
    settings: &PinnSettings,
    resume: Option<Checkpoint>,
    observer: &mut dyn Observer,
) -> Result<PinnOutcome, PinnError> {
    let (tau_shape, vel_shape) = shapes(settings);
    let n_tau = tau_shape.n_params();
    let fp = fingerprint(picks, domain, start, settings);
    let mut state = match resume {
        Some(cp) => {
            if cp.fingerprint != fp {
                return Err(PinnError::CheckpointMismatch(format!(
                    "fingerprint {:016x} expected {:016x}",
                    cp.fingerprint, fp
                )));
            }
            if cp.state.params.len() != n_tau + vel_shape.n_params() {
                return Err(PinnError::CheckpointMismatch("network sizes differ".into()));
            }
            cp.state
        }
        None => {
            let mut rng = ChaCha8Rng::seed_from_u64(settings.seed);
            rng.set_stream(INIT_STREAM);
            let mut params = tau_shape.init(&mut rng, true);
            params.extend(vel_shape.init(&mut rng, true));
            let n = params.len();
            State {
                step: 0,
                best_params: params.clone(),
                params,
                m: vec![0.0; n],
                v: vec![0.0; n],
                lr_scale: 1.0,
                retries: 0,
                best_obj: f64::INFINITY,
                since_best: 0,
                history: Vec::new(),
                stopped: None,
            }
        }
    };
    let model = TrainedModel::new(domain, start, settings, Vec::new(), Vec::new());
    let sampler = Sampler::new(picks, domain);
    let mut rng = ChaCha8Rng::seed_from_u64(settings.seed);
    rng.set_stream(EVAL_STREAM);
    let eval_pairs = sampler.draw(
        &mut rng,
        domain,
        EVAL_POINTS,
        settings.ray_fraction,
        settings.ray_sag,
    );
    let ctx = Ctx {
        picks,
        settings,
        model,
        sampler,
        n_tau,
        eval_pairs,
        pick_pairs: picks.iter().map(|p| (p.receiver, p.source)).collect(),
        fingerprint: fp,
    };
    let ad = Device::flex().autodiff();
    let mut last_good = state.clone();
    // a finished training resumed (to refine it, or to judge it again) stays finished
    let mut stop = state.stopped.unwrap_or(StopReason::MaxSteps);
    while state.step < settings.steps && state.stopped.is_none() {
        match train_step(&ctx, &mut state, &ad)? {
            Some(log) => {
                let mut log = log;
                let done = state.step;
                if done % settings.eval_every == 0 || done == settings.steps {
                    let ev = evaluate(&ctx, &state.params)?;
                    log.chi2 = Some(ev.chi2);
                    log.eikonal_rms = Some(ev.eik_rms);
                    let obj = settings.data_weight * ev.chi2
                        + settings.eikonal_weight * ev.eik_rms * ev.eik_rms;
                    if obj < 0.99 * state.best_obj {
                        state.best_obj = obj;
                        state.best_params = state.params.clone();
                        state.since_best = 0;
                    } else {
                        state.since_best += 1;
                    }
                    if settings.data_weight > 0.0
                        && ev.chi2 <= settings.chi2_target
                        && ev.eik_rms <= settings.eikonal_target
                    {
                        stop = StopReason::TargetReached;
                    } else if settings.patience > 0 && state.since_best >= settings.patience {
                        stop = StopReason::NoImprovement;
                    }
                }
                state.history.push(log.clone());
                observer.on_step(&log);
                if stop != StopReason::MaxSteps {
                    state.stopped = Some(stop);
                    break;
                }
                if settings.checkpoint_every > 0
                    && done % settings.checkpoint_every == 0
                    && done < settings.steps
                {
                    let cp = Checkpoint::new(&state, fp, settings);
                    observer.on_checkpoint(&cp);
                    last_good = state.clone();
                }
            }
            None => {
                // non-finite loss or gradient: roll back with a smaller step
                let failed_at = state.step + 1;
                let retries = state.retries + 1;
                if retries > settings.max_retries {
                    let best = outcome(
                        &ctx,
                        &state.best_params,
                        state.history.clone(),
                        state.step,
                        StopReason::MaxSteps,
                    )?;
                    return Err(PinnError::Diverged {
                        step: failed_at,
                        retries: retries - 1,
                        best: Box::new(best),
                    });
                }
                let scale = state.lr_scale * 0.5;
                state = last_good.clone();
                state.lr_scale = scale;
                state.retries = retries;
                last_good.lr_scale = scale;
                last_good.retries = retries;
            }
        }
    }
    let cp = Checkpoint::new(&state, fp, settings);
    observer.on_checkpoint(&cp);
    let _ = ctx.fingerprint;
    outcome(&ctx, &state.params, state.history.clone(), state.step, stop)
}

fn outcome(
    ctx: &Ctx,
    params: &[f32],
    history: Vec<StepLog>,
    steps: usize,
    stop: StopReason,
) -> Result<PinnOutcome, PinnError> {
    let ev = evaluate(ctx, params)?;
    let (t, v) = split(ctx, params);
    let mut model = ctx.model.clone();
    model.tau = t.to_vec();
    model.vel = v.to_vec();
    Ok(PinnOutcome {
        model,
        predicted_s: ev.times,
        chi2: ev.chi2,
        data_rms_ms: ev.rms_ms,
        eikonal_rms: ev.eik_rms,
        history,
        steps,
        stop,
    })
}

struct Eval {
    times: Vec<f64>,
    chi2: f64,
    rms_ms: f64,
    eik_rms: f64,
}

fn evaluate(ctx: &Ctx, params: &[f32]) -> Result<Eval, PinnError> {
    let (t, v) = split(ctx, params);
    let mut model = ctx.model.clone();
    model.tau = t.to_vec();
    model.vel = v.to_vec();
    let times = model.times(&ctx.pick_pairs)?;
    let (mut chi, mut sq) = (0.0, 0.0);
    for (p, &tt) in ctx.picks.iter().zip(&times) {
        let e = tt - p.time_s;
        chi += (e / p.sigma_s).powi(2);
        sq += e * e;
    }
    let n = ctx.picks.len() as f64;
    let res = model.eikonal_residual(&ctx.eval_pairs)?;
    let eik = (res.iter().map(|r| r * r).sum::<f64>() / res.len().max(1) as f64).sqrt();
    Ok(Eval {
        times,
        chi2: chi / n,
        rms_ms: (sq / n).sqrt() * 1e3,
        eik_rms: eik,
    })
}

/// One Adam step on a fresh batch; `None` when the loss or a gradient is not finite
/// (state untouched); an error only for a fault of the engine.
fn train_step(ctx: &Ctx, state: &mut State, ad: &Device) -> Result<Option<StepLog>, PinnError> {
    let s = ctx.settings;
    let step = state.step;
    let mut rng = ChaCha8Rng::seed_from_u64(s.seed);
    rng.set_stream(step as u64 + 1);
    let model = &ctx.model;
    let pairs = ctx.sampler.draw(
        &mut rng,
        &model.domain,
        s.collocation(),
        s.ray_fraction,
        s.ray_sag,
    );
    let batch: Vec<usize> = if ctx.picks.len() <= s.pick_batch {
        (0..ctx.picks.len()).collect()
    } else {
        let mut idx = rand::seq::index::sample(&mut rng, ctx.picks.len(), s.pick_batch).into_vec();
        idx.sort_unstable();
        idx
    };

    // The batch is cut into shards of at most `shard_points` collocation points (the
    // picks spread evenly over them). Each shard builds its own graph from its own copy
    // of the weights (burn keeps independent graphs under separate locks), the shards
    // run on the worker threads, and their gradients are summed in shard order: the
    // result does not depend on the thread count. Shards of about a thousand rows also
    // keep every activation matrix in cache.
    let shards = pairs.len().div_ceil(s.shard_points).max(1);
    let (nc, np) = (pairs.len(), batch.len());
    let cut = |len: usize, k: usize| (len * k / shards, len * (k + 1) / shards);
    let job = |k: usize| {
        let (a, b) = cut(nc, k);
        let (c, d) = cut(np, k);
        shard_loss(ctx, &state.params, &pairs[a..b], &batch[c..d], nc, np, ad)
    };
    let results: Vec<Result<Option<ShardLoss>, PinnError>> = if shards == 1 {
        vec![job(0)]
    } else {
        use rayon::prelude::*;
        (0..shards).into_par_iter().map(job).collect()
    };
    let mut g = vec![0.0f32; state.params.len()];
    let mut vals = [0.0f64; 5];
    for r in results {
        let Some((gk, vk)) = r? else {
            return Ok(None);
        };
        for (a, b) in g.iter_mut().zip(&gk) {
            *a += b;
        }
        for (a, b) in vals.iter_mut().zip(&vk) {
            *a += b;
        }
    }
    if g.iter().any(|v| !v.is_finite()) {
        return Ok(None);
    }

    // Adam (Kingma & Ba 2015, Algorithm 1), step size decaying by half every
    // `lr_half_life` steps, floored at `lr_min`, times the roll-back scale.
    let t = (step + 1) as i32;
    let lr = (s.learning_rate * 0.5f64.powf(step as f64 / s.lr_half_life)).max(s.lr_min)
        * state.lr_scale;
    let (b1, b2) = (s.beta1 as f32, s.beta2 as f32);
    let c1 = 1.0 - s.beta1.powi(t);
    let c2 = 1.0 - s.beta2.powi(t);
    let a = (lr * c2.sqrt() / c1) as f32;
    let eps = (s.adam_eps * c2.sqrt()) as f32;
    let mut new = state.params.clone();
    for i in 0..new.len() {
        let gi = g[i];
        state.m[i] = b1 * state.m[i] + (1.0 - b1) * gi;
        state.v[i] = b2 * state.v[i] + (1.0 - b2) * gi * gi;
        new[i] -= a * state.m[i] / (state.v[i].sqrt() + eps);
    }
    if new.iter().any(|v| !v.is_finite()) {
        return Ok(None);
    }
    state.params = new;
    state.step += 1;
    Ok(Some(StepLog {
        step: state.step,
        loss: vals[0],
        data: vals[1],
        eikonal: vals[2],
        regulariser: vals[3],
        data_rms_ms: vals[4].sqrt() * 1e3,
        learning_rate: lr,
        chi2: None,
        eikonal_rms: None,
    }))
}
