//! Synthetic picks: a survey's geometry with times by fast marching through a known
//! model, plus seeded Gaussian noise. Used by `forward --noise-ms`, the tests and the
//! experiments alike, so that all of them make their data one way.

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};

use crate::eikonal::FmmOptions;
use crate::model::VelocityGrid;
use crate::survey::{Pick, Survey};
use crate::verify::{self, VerifyError};

/// Adds Gaussian noise of standard deviation `sigma_s[i]` (s, > 0) to `times[i]`,
/// drawn in order from a ChaCha8 generator seeded with `seed`; a noisy time never goes
/// below zero.
pub fn add_noise(times: &mut [f64], sigma_s: &[f64], seed: u64) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    for (t, &s) in times.iter_mut().zip(sigma_s) {
        let normal = Normal::new(0.0, s).expect("a positive, finite sigma");
        *t = (*t + normal.sample(&mut rng)).max(0.0);
    }
}

/// The picks of `geometry` with times through `truth` by fast marching on a solver grid
/// of `cell` m (sampled in slowness), plus noise of `sigma_s` (s, seeded) recorded as
/// every pick's σ. Use a cell several times finer than the inversion's, or the data
/// share the inversion's discretisation error (an "inverse crime").
pub fn picks(
    geometry: &Survey,
    truth: &VelocityGrid,
    cell: f64,
    sigma_s: f64,
    seed: u64,
) -> Result<Survey, VerifyError> {
    picks_with(geometry, truth, cell, |_| sigma_s, seed)
}

/// As [`picks`], with each pick's σ (s) from `sigma_of` (e.g. growing with offset, as
/// first breaks get weaker and later with distance).
pub fn picks_with(
    geometry: &Survey,
    truth: &VelocityGrid,
    cell: f64,
    sigma_of: impl Fn(&Pick) -> f64,
    seed: u64,
) -> Result<Survey, VerifyError> {
    let grid = verify::solver_grid(truth, &geometry.surface, cell)?;
    let mut times = verify::predict(geometry, &grid, &FmmOptions::default())?;
    let sigma: Vec<f64> = geometry.picks.iter().map(sigma_of).collect();
    add_noise(&mut times, &sigma, seed);
    let mut out = geometry.clone();
    for ((p, t), s) in out.picks.iter_mut().zip(times).zip(sigma) {
        p.time = t;
        p.sigma = Some(s);
    }
    Ok(out)
}
