//! Collocation points for the eikonal residual, redrawn every step.

use rand::Rng;

use super::{Domain, Pick};

/// A field point and the source it is paired with.
pub(crate) type Pair = ([f64; 2], [f64; 2]);

/// Draws collocation pairs, all below the ground.
pub(crate) struct Sampler {
    /// every distinct source and receiver position (virtual sources)
    ends: Vec<[f64; 2]>,
    paths: Vec<([f64; 2], [f64; 2])>,
    min_r: f64,
}

impl Sampler {
    pub fn new(picks: &[Pick], domain: &Domain) -> Sampler {
        let mut ends: Vec<[f64; 2]> = picks.iter().flat_map(|p| [p.source, p.receiver]).collect();
        ends.sort_by(|a, b| a[0].total_cmp(&b[0]).then(a[1].total_cmp(&b[1])));
        ends.dedup();
        let paths = picks.iter().map(|p| (p.source, p.receiver)).collect();
        Sampler {
            ends,
            paths,
            min_r: 1e-4 * (domain.x_max - domain.x_min),
        }
    }

    /// `n` pairs: a share `ray_fraction` around source–receiver paths (a point on the
    /// straight segment pushed down by up to `ray_sag × offset × 4f(1−f)`, which covers
    /// diving rays), the rest uniform in area below the ground with a random
    /// virtual source.
    pub fn draw(
        &self,
        rng: &mut impl Rng,
        domain: &Domain,
        n: usize,
        ray_fraction: f64,
        ray_sag: f64,
    ) -> Vec<Pair> {
        let n_ray = ((n as f64) * ray_fraction).round() as usize;
        let mut out = Vec::with_capacity(n);
        for k in 0..n {
            loop {
                let (a, b) = if k < n_ray {
                    let (s, r) = self.paths[rng.gen_range(0..self.paths.len())];
                    let f: f64 = rng.gen();
                    let u: f64 = rng.gen();
                    let x = s[0] + f * (r[0] - s[0]);
                    let off = ((r[0] - s[0]).powi(2) + (r[1] - s[1]).powi(2)).sqrt();
                    let z = s[1] + f * (r[1] - s[1]) - ray_sag * off * 4.0 * f * (1.0 - f) * u;
                    let z = z.clamp(domain.z_bottom, domain.elevation(x));
                    let b = if rng.gen::<bool>() { s } else { r };
                    ([x, z], b)
                } else {
                    let x = rng.gen_range(domain.x_min..=domain.x_max);
                    let top = domain.elevation(x);
                    let z = domain.z_bottom + rng.gen::<f64>() * (top - domain.z_bottom);
                    let b = self.ends[rng.gen_range(0..self.ends.len())];
                    ([x, z], b)
                };
                let r = ((a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2)).sqrt();
                if r > self.min_r {
                    out.push((a, b));
                    break;
                }
            }
        }
        out
    }
}
