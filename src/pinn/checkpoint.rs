//! Checkpoints: the complete training state as bytes (no file I/O here).
//!
//! Layout (little endian): magic `SFPINNCK`, format version `u32`, then the fields in
//! the order of [`Checkpoint::to_bytes`]. Floats are stored as their bit patterns, so
//! a resumed run continues bit for bit.

use super::{Domain, Pick, PinnError, PinnSettings, StartModel, StepLog, StopReason};
use crate::state_bytes::{put_f64, put_u32, put_u64, Fnv, Reader};

/// Mutable training state; everything a checkpoint must hold.
#[derive(Clone, Debug)]
pub(crate) struct State {
    pub step: usize,
    pub params: Vec<f32>,
    pub m: Vec<f32>,
    pub v: Vec<f32>,
    pub lr_scale: f64,
    pub retries: u32,
    pub best_obj: f64,
    pub since_best: usize,
    pub best_params: Vec<f32>,
    pub history: Vec<StepLog>,
    /// Why the training stopped before its last step (target reached, no
    /// improvement), when it did: a run resumed from this state trains no further.
    pub stopped: Option<StopReason>,
}

const MAGIC: &[u8; 8] = b"SFPINNCK";
/// 2: the velocity bounds left the settings text (set by the run) and joined the
/// fingerprint on their own. 3: an early stop is recorded, so that resuming a finished
/// training (e.g. to add the refinement) does not train on past it.
const VERSION: u32 = 3;

/// Weights, Adam moments, step, step-size scale, early-stop state, the best weights so
/// far, the step history, and a fingerprint of the picks, domain, start model and
/// settings. The collocation sampler needs no state of its own: step `k` draws from
/// stream `k + 1` of a ChaCha8 generator seeded with `settings.seed`.
#[derive(Clone, Debug)]
pub struct Checkpoint {
    pub(crate) state: State,
    pub(crate) fingerprint: u64,
    settings_json: String,
}

impl Checkpoint {
    pub(crate) fn new(state: &State, fingerprint: u64, settings: &PinnSettings) -> Checkpoint {
        Checkpoint {
            state: state.clone(),
            fingerprint,
            settings_json: serde_json::to_string(settings).unwrap_or_default(),
        }
    }

    /// Steps done when the checkpoint was taken.
    pub fn step(&self) -> usize {
        self.state.step
    }

    /// The settings of the run, as JSON (for the record; resuming takes the caller's).
    pub fn settings_json(&self) -> &str {
        &self.settings_json
    }

    /// Serialises the checkpoint.
    pub fn to_bytes(&self) -> Vec<u8> {
        let s = &self.state;
        let mut w = Vec::with_capacity(16 * s.params.len() + 64 * s.history.len() + 256);
        w.extend_from_slice(MAGIC);
        put_u32(&mut w, VERSION);
        put_u64(&mut w, self.fingerprint);
        put_u64(&mut w, s.step as u64);
        put_f64(&mut w, s.lr_scale);
        put_u32(&mut w, s.retries);
        put_f64(&mut w, s.best_obj);
        put_u64(&mut w, s.since_best as u64);
        w.push(match s.stopped {
            None | Some(StopReason::MaxSteps) => 0,
            Some(StopReason::TargetReached) => 1,
            Some(StopReason::NoImprovement) => 2,
        });
        for v in [&s.params, &s.m, &s.v, &s.best_params] {
            put_u64(&mut w, v.len() as u64);
            for x in v.iter() {
                put_u32(&mut w, x.to_bits());
            }
        }
        put_u64(&mut w, s.history.len() as u64);
        for h in &s.history {
            put_u64(&mut w, h.step as u64);
            for x in [
                h.loss,
                h.data,
                h.eikonal,
                h.regulariser,
                h.data_rms_ms,
                h.learning_rate,
            ] {
                put_f64(&mut w, x);
            }
            for x in [h.chi2, h.eikonal_rms] {
                match x {
                    Some(x) => {
                        w.push(1);
                        put_f64(&mut w, x);
                    }
                    None => w.push(0),
                }
            }
        }
        let sj = self.settings_json.as_bytes();
        put_u64(&mut w, sj.len() as u64);
        w.extend_from_slice(sj);
        w
    }

    /// Reads bytes written by [`Checkpoint::to_bytes`].
    pub fn from_bytes(bytes: &[u8]) -> Result<Checkpoint, PinnError> {
        Self::read(bytes).map_err(PinnError::CheckpointCorrupt)
    }

    fn read(bytes: &[u8]) -> Result<Checkpoint, String> {
        let mut r = Reader::new(bytes);
        r.header(MAGIC, VERSION, "a slowfield PINN checkpoint")?;
        let fingerprint = r.u64()?;
        let step = r.u64()? as usize;
        let lr_scale = r.f64()?;
        let retries = r.u32()?;
        let best_obj = r.f64()?;
        let since_best = r.u64()? as usize;
        let stopped = match r.take(1)?[0] {
            0 => None,
            1 => Some(StopReason::TargetReached),
            2 => Some(StopReason::NoImprovement),
            _ => return Err("bad stop reason".into()),
        };
        let mut vecs = Vec::new();
        for _ in 0..4 {
            let n = r.len(4)?;
            let mut v = Vec::with_capacity(n);
            for _ in 0..n {
                v.push(f32::from_bits(r.u32()?));
            }
            vecs.push(v);
        }
        let n_hist = r.len(8 * 7 + 2)?;
        let mut history = Vec::with_capacity(n_hist);
        for _ in 0..n_hist {
            let step = r.u64()? as usize;
            let mut f = [0.0; 6];
            for x in &mut f {
                *x = r.f64()?;
            }
            let mut o = [None; 2];
            for x in &mut o {
                *x = match r.take(1)?[0] {
                    0 => None,
                    1 => Some(r.f64()?),
                    _ => return Err("bad history entry".into()),
                };
            }
            history.push(StepLog {
                step,
                loss: f[0],
                data: f[1],
                eikonal: f[2],
                regulariser: f[3],
                data_rms_ms: f[4],
                learning_rate: f[5],
                chi2: o[0],
                eikonal_rms: o[1],
            });
        }
        let n = r.len(1)?;
        let settings_json = String::from_utf8(r.take(n)?.to_vec())
            .map_err(|_| "settings are not text".to_string())?;
        let mut vecs = vecs.into_iter();
        let (params, m, v, best_params) = (
            vecs.next().unwrap_or_default(),
            vecs.next().unwrap_or_default(),
            vecs.next().unwrap_or_default(),
            vecs.next().unwrap_or_default(),
        );
        if m.len() != params.len() || v.len() != params.len() || best_params.len() != params.len() {
            return Err("vector lengths disagree".into());
        }
        r.finish()?;
        Ok(Checkpoint {
            state: State {
                step,
                params,
                m,
                v,
                lr_scale,
                retries,
                best_obj,
                since_best,
                best_params,
                history,
                stopped,
            },
            fingerprint,
            settings_json,
        })
    }
}

/// FNV-1a (Fowler–Noll–Vo) hash of the inputs and of the settings that shape the
/// trajectory (all but `steps`, `checkpoint_every` and `threads`).
pub(crate) fn fingerprint(
    picks: &[Pick],
    domain: &Domain,
    start: &StartModel,
    settings: &PinnSettings,
) -> u64 {
    let mut fnv = Fnv::new();
    let mut eat = |bytes: &[u8]| fnv.eat(bytes);
    for p in picks {
        for x in [
            p.source[0],
            p.source[1],
            p.receiver[0],
            p.receiver[1],
            p.time_s,
            p.sigma_s,
        ] {
            eat(&x.to_bits().to_le_bytes());
        }
    }
    for x in [domain.x_min, domain.x_max, domain.z_bottom] {
        eat(&x.to_bits().to_le_bytes());
    }
    for p in &domain.surface.nodes {
        eat(&p.x.to_bits().to_le_bytes());
        eat(&p.z.to_bits().to_le_bytes());
    }
    eat(serde_json::to_string(start).unwrap_or_default().as_bytes());
    let mut s = settings.clone();
    s.steps = 0;
    s.checkpoint_every = 0;
    s.threads = 0;
    eat(serde_json::to_string(&s).unwrap_or_default().as_bytes());
    // the bounds are set by the run, not serialised with the settings: a network
    // whose output is scaled to other bounds must not be continued
    eat(&s.v_min.to_bits().to_le_bytes());
    eat(&s.v_max.to_bits().to_le_bytes());
    fnv.0
}
