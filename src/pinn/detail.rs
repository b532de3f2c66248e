//! A Fourier-feature network that the refinement stage adds to the velocity logit.
//!
//! A tanh network fed with coordinates learns long wavelengths first and short ones
//! only after many steps (the "spectral bias"); a slow lens a few metres across or a
//! sharp rock head then stays smeared however long the refinement runs. Feeding a
//! second network with `sin`/`cos` of the coordinates at random frequencies removes
//! that bias for wavelengths down to about the chosen scale (Tancik et al. 2020,
//! "Fourier features let networks learn high frequency functions in low dimensional
//! domains", NeurIPS). The refinement trains it from zero together with the PINN's
//! velocity network, so it starts as exactly the PINN's velocity.

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};

use super::net::{MlpShape, NetTensors};
use super::Domain;
use crate::settings::{Activation, PinnSettings, RefineSettings};
use burn::prelude::*;

/// Random stream of the frequencies (apart from the weights' streams).
const FREQ_STREAM: u64 = 7;

/// The detail network: frequencies, shape and weights.
#[derive(Clone, Debug)]
pub(crate) struct Detail {
    /// `(x, depth)` frequencies, cycles per metre.
    freqs: Vec<[f64; 2]>,
    x_ref: f64,
    pub(super) shape: MlpShape,
    act: Activation,
    fast_tanh: bool,
    pub(super) params: Vec<f32>,
}

/// Feature rows of a set of points: values and their x and z derivatives.
pub(super) struct DetailBatch {
    pub n: usize,
    pub d_in: usize,
    pub x: Vec<f32>,
    pub dx: Vec<f32>,
    pub dz: Vec<f32>,
}

impl Detail {
    /// `detail_features` frequency pairs drawn from a normal distribution of standard
    /// deviation `1/detail_wavelength_m` (in 1-D only depth frequencies), a
    /// `detail_width × detail_depth` network after them with the PINN's activation, its
    /// last layer zero; seeded by the PINN's seed.
    pub(super) fn new(domain: &Domain, refine: &RefineSettings, pinn: &PinnSettings) -> Detail {
        let mut rng = ChaCha8Rng::seed_from_u64(pinn.seed);
        rng.set_stream(FREQ_STREAM);
        let scale = 1.0 / refine.detail_wavelength();
        let one_d = pinn.dim == 1;
        let freqs = (0..refine.detail_features)
            .map(|_| {
                let fx: f64 = StandardNormal.sample(&mut rng);
                let fz: f64 = StandardNormal.sample(&mut rng);
                if one_d {
                    [0.0, fz * scale]
                } else {
                    [fx * scale, fz * scale]
                }
            })
            .collect();
        let shape = MlpShape::new(
            2 * refine.detail_features,
            refine.detail_width,
            refine.detail_depth,
            1,
        );
        let params = shape.init(&mut rng, true);
        Detail {
            freqs,
            x_ref: 0.5 * (domain.x_min + domain.x_max),
            shape,
            act: pinn.activation,
            fast_tanh: pinn.fast_tanh,
            params,
        }
    }

    /// The features `sin(2π f·q)`, `cos(2π f·q)` of `q = (x, depth)` at each point, with
    /// their derivatives along x and z.
    pub(super) fn batch(&self, domain: &Domain, points: &[[f64; 2]]) -> DetailBatch {
        let m = self.freqs.len();
        let mut b = DetailBatch {
            n: points.len(),
            d_in: 2 * m,
            x: Vec::with_capacity(points.len() * 2 * m),
            dx: Vec::with_capacity(points.len() * 2 * m),
            dz: Vec::with_capacity(points.len() * 2 * m),
        };
        let tau = std::f64::consts::TAU;
        for p in points {
            let q = [p[0] - self.x_ref, domain.depth(p[0], p[1])];
            // ∂q/∂x = (1, slope), ∂q/∂z = (0, −1)
            let slope = domain.slope(p[0]);
            let start = b.x.len();
            b.x.resize(start + 2 * m, 0.0);
            b.dx.resize(start + 2 * m, 0.0);
            b.dz.resize(start + 2 * m, 0.0);
            for (k, f) in self.freqs.iter().enumerate() {
                let a = tau * (f[0] * q[0] + f[1] * q[1]);
                let (s, c) = a.sin_cos();
                let ax = tau * (f[0] + f[1] * slope);
                let az = -tau * f[1];
                b.x[start + k] = s as f32;
                b.x[start + m + k] = c as f32;
                b.dx[start + k] = (c * ax) as f32;
                b.dx[start + m + k] = (-s * ax) as f32;
                b.dz[start + k] = (c * az) as f32;
                b.dz[start + m + k] = (-s * az) as f32;
            }
        }
        b
    }

    /// The network on `device` from the flat parameters `params`.
    pub(super) fn net(&self, params: &[f32], device: &Device, track: bool) -> NetTensors {
        NetTensors::new(&self.shape, params, self.act, self.fast_tanh, device, track)
    }

    /// The logit added to the velocity network's at each point (values only); `net` is
    /// [`Detail::net`] of the parameters, built once by the caller for all chunks.
    pub(super) fn logit(
        &self,
        net: &NetTensors,
        domain: &Domain,
        points: &[[f64; 2]],
        device: &Device,
    ) -> Tensor<2> {
        let b = self.batch(domain, points);
        let x = Tensor::<2>::from_data(TensorData::new(b.x, [b.n, b.d_in]), device);
        net.forward(x)
    }
}

#[cfg(test)]
mod tests {
    use super::super::net::to_f64;
    use super::*;

    fn domain() -> Domain {
        Domain {
            x_min: 0.0,
            x_max: 60.0,
            z_bottom: -20.0,
            surface: crate::survey::Surface {
                nodes: vec![
                    crate::survey::Point::new(0.0, 0.0),
                    crate::survey::Point::new(30.0, 3.0),
                    crate::survey::Point::new(60.0, 1.0),
                ],
            },
        }
    }

    /// 16 frequency pairs of scale 8 m into a 2×8 network.
    fn refine() -> RefineSettings {
        RefineSettings {
            detail_features: 16,
            detail_wavelength_m: Some(8.0),
            detail_width: 8,
            detail_depth: 2,
            ..RefineSettings::default()
        }
    }

    /// tanh (fast or the C library's), seed 3.
    fn pinn(fast_tanh: bool) -> PinnSettings {
        PinnSettings {
            fast_tanh,
            seed: 3,
            ..PinnSettings::default()
        }
    }

    /// Points away from the surface's kink at x = 30 m, where depth has no x-derivative.
    const POINTS: [[f64; 2]; 3] = [[10.3, -2.0], [41.7, -5.5], [55.0, -0.4]];

    #[test]
    fn starts_as_zero_so_the_refinement_starts_from_the_pinn_velocity() {
        let d = Detail::new(&domain(), &refine(), &pinn(true));
        let device = Device::flex();
        let net = d.net(&d.params, &device, false);
        let v = to_f64(d.logit(&net, &domain(), &POINTS, &device)).unwrap();
        assert_eq!(v, vec![0.0; POINTS.len()]);
    }

    /// The network's x and z tangents (through the features' derivatives) against
    /// central differences of its value; the regulariser reads them.
    #[test]
    fn tangents_match_central_differences() {
        let dom = domain();
        let mut d = Detail::new(&dom, &refine(), &pinn(false));
        d.params = d.shape.init(&mut ChaCha8Rng::seed_from_u64(11), false);
        let device = Device::flex();
        let net = d.net(&d.params, &device, false);
        let b = d.batch(&dom, &POINTS);
        let t = |v: &Vec<f32>| {
            Tensor::<2>::from_data(TensorData::new(v.clone(), [b.n, b.d_in]), &device)
        };
        let (_, tangents) = net.forward_tangent(t(&b.x), vec![t(&b.dx), t(&b.dz)]);
        let value = |pts: &[[f64; 2]]| to_f64(d.logit(&net, &dom, pts, &device)).unwrap();
        let h = 1e-2;
        for (dir, tan) in tangents.into_iter().enumerate() {
            let tan = to_f64(tan).unwrap();
            let shift = |s: f64| -> Vec<[f64; 2]> {
                POINTS
                    .iter()
                    .map(|p| {
                        let mut q = *p;
                        q[dir] += s;
                        q
                    })
                    .collect()
            };
            let (up, down) = (value(&shift(h)), value(&shift(-h)));
            for k in 0..POINTS.len() {
                let fd = (up[k] - down[k]) / (2.0 * h);
                let err = (tan[k] - fd).abs() / fd.abs().max(1e-2);
                assert!(
                    err < 1e-3,
                    "direction {dir}, point {k}: tangent {} vs {fd}",
                    tan[k]
                );
            }
        }
    }
}
