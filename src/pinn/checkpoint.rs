//! Checkpoints: the complete training state as bytes (no file I/O here).
//!
//! Layout (little endian): magic `SFPINNCK`, format version `u32`, then the fields in
//! the order of [`Checkpoint::to_bytes`]. Floats are stored as their bit patterns, so
//! a resumed run continues bit for bit.

use super::train::State;
use super::{Domain, Pick, PinnError, PinnSettings, StartModel, StepLog};

const MAGIC: &[u8; 8] = b"SFPINNCK";
const VERSION: u32 = 1;

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
        let mut r = Reader::new(bytes);
        r.header(MAGIC, VERSION, "a slowfield PINN checkpoint")?;
        let fingerprint = r.u64()?;
        let step = r.u64()? as usize;
        let lr_scale = r.f64()?;
        let retries = r.u32()?;
        let best_obj = r.f64()?;
        let since_best = r.u64()? as usize;
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
                    _ => return Err(PinnError::CheckpointCorrupt("bad history entry".into())),
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
            .map_err(|_| PinnError::CheckpointCorrupt("settings are not text".into()))?;
        if r.at != bytes.len() {
            return Err(PinnError::CheckpointCorrupt("trailing bytes".into()));
        }
        let mut vecs = vecs.into_iter();
        let (params, m, v, best_params) = (
            vecs.next().unwrap_or_default(),
            vecs.next().unwrap_or_default(),
            vecs.next().unwrap_or_default(),
            vecs.next().unwrap_or_default(),
        );
        if m.len() != params.len() || v.len() != params.len() || best_params.len() != params.len() {
            return Err(PinnError::CheckpointCorrupt(
                "vector lengths disagree".into(),
            ));
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
            },
            fingerprint,
            settings_json,
        })
    }
}

pub(super) fn put_u32(w: &mut Vec<u8>, x: u32) {
    w.extend_from_slice(&x.to_le_bytes());
}
pub(super) fn put_u64(w: &mut Vec<u8>, x: u64) {
    w.extend_from_slice(&x.to_le_bytes());
}
pub(super) fn put_f64(w: &mut Vec<u8>, x: f64) {
    put_u64(w, x.to_bits());
}

pub(super) struct Reader<'a> {
    b: &'a [u8],
    at: usize,
}

impl<'a> Reader<'a> {
    pub(super) fn new(b: &'a [u8]) -> Reader<'a> {
        Reader { b, at: 0 }
    }
    /// Checks the magic bytes and the format version; `what` names the kind of file.
    pub(super) fn header(
        &mut self,
        magic: &[u8; 8],
        version: u32,
        what: &str,
    ) -> Result<(), PinnError> {
        if self.take(8)? != magic {
            return Err(PinnError::CheckpointCorrupt(format!("it is not {what}")));
        }
        let ver = self.u32()?;
        if ver != version {
            return Err(PinnError::CheckpointCorrupt(format!(
                "format version {ver} of {what}, this build reads {version}"
            )));
        }
        Ok(())
    }
    pub(super) fn take(&mut self, n: usize) -> Result<&'a [u8], PinnError> {
        if self.b.len() - self.at < n {
            return Err(PinnError::CheckpointCorrupt(
                "it ends early (truncated file?)".into(),
            ));
        }
        let s = &self.b[self.at..self.at + n];
        self.at += n;
        Ok(s)
    }
    pub(super) fn u32(&mut self) -> Result<u32, PinnError> {
        let mut a = [0u8; 4];
        a.copy_from_slice(self.take(4)?);
        Ok(u32::from_le_bytes(a))
    }
    pub(super) fn u64(&mut self) -> Result<u64, PinnError> {
        let mut a = [0u8; 8];
        a.copy_from_slice(self.take(8)?);
        Ok(u64::from_le_bytes(a))
    }
    pub(super) fn f64(&mut self) -> Result<f64, PinnError> {
        Ok(f64::from_bits(self.u64()?))
    }
    /// Fails when bytes are left over (a damaged length field, or another file).
    pub(super) fn finish(&self) -> Result<(), PinnError> {
        if self.at == self.b.len() {
            Ok(())
        } else {
            Err(PinnError::CheckpointCorrupt(format!(
                "{} bytes left over after the last field",
                self.b.len() - self.at
            )))
        }
    }
    /// A length prefix, checked against the bytes left (`unit` bytes per item).
    pub(super) fn len(&mut self, unit: usize) -> Result<usize, PinnError> {
        let n = self.u64()?;
        let left = (self.b.len() - self.at) as u64;
        if n.saturating_mul(unit as u64) > left {
            return Err(PinnError::CheckpointCorrupt(
                "a length exceeds the data".into(),
            ));
        }
        Ok(n as usize)
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
    for p in &domain.surface {
        eat(&p[0].to_bits().to_le_bytes());
        eat(&p[1].to_bits().to_le_bytes());
    }
    eat(serde_json::to_string(start).unwrap_or_default().as_bytes());
    let mut s = settings.clone();
    s.steps = 0;
    s.checkpoint_every = 0;
    s.threads = 0;
    eat(serde_json::to_string(&s).unwrap_or_default().as_bytes());
    fnv.0
}

/// FNV-1a (Fowler–Noll–Vo), 64 bits: the fingerprints of checkpoints and refinement
/// states.
pub(super) struct Fnv(pub(super) u64);

impl Fnv {
    pub(super) fn new() -> Fnv {
        Fnv(0xcbf2_9ce4_8422_2325)
    }
    pub(super) fn eat(&mut self, bytes: &[u8]) {
        for &b in bytes {
            self.0 ^= b as u64;
            self.0 = self.0.wrapping_mul(0x0100_0000_01b3);
        }
    }
}
