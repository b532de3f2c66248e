//! The training loss: the eikonal residual at collocation points, the data misfit at
//! the picks and the model regulariser, as tensors on the autodiff device.
//!
//! The regulariser is the tensor form of [`crate::regularise`]'s definitions (same
//! kinds, same constants); a test holds the two forms together on one field.

use burn::prelude::*;

use super::model::{physics, tensor2, time_value, TrainedModel};
use super::net::{f32s, NetTensors};
use super::sampler::{Pair, Sampler};
use super::{Pick, PinnError, PinnSettings};
use crate::regularise::{Regulariser, MIN_SUPPORT_BETA, TV_EPSILON};

/// What the loss of a step is computed from.
pub(super) struct Ctx<'a> {
    pub picks: &'a [Pick],
    pub settings: &'a PinnSettings,
    pub model: TrainedModel,
    pub sampler: Sampler,
    pub n_tau: usize,
    pub eval_pairs: Vec<Pair>,
    pub pick_pairs: Vec<Pair>,
    pub fingerprint: u64,
}

/// The travel-time and velocity parts of the flat parameter vector.
pub(super) fn split<'a>(ctx: &Ctx, p: &'a [f32]) -> (&'a [f32], &'a [f32]) {
    p.split_at(ctx.n_tau)
}

/// Mean of the regulariser `kind` over the points of the scaled gradient `[vx, vz]`
/// (`inv_n` = 1 / the number of points).
pub(super) fn regulariser_mean(
    kind: Regulariser,
    [vx, vz]: [Tensor<2>; 2],
    inv_n: f64,
) -> Tensor<1> {
    let g2 = vx.clone().mul(vx).add(vz.clone().mul(vz));
    match kind {
        Regulariser::Smoothness => g2.sum().mul_scalar(inv_n),
        Regulariser::TotalVariation => g2
            .add_scalar(TV_EPSILON * TV_EPSILON)
            .sqrt()
            .sum()
            .mul_scalar(inv_n),
        Regulariser::MinimumSupport => {
            let b2 = MIN_SUPPORT_BETA * MIN_SUPPORT_BETA;
            g2.clone().div(g2.add_scalar(b2)).sum().mul_scalar(inv_n)
        }
    }
}

/// The gradient of a shard and `[total, data, eikonal, regulariser, mean squared error]`.
pub(super) type ShardLoss = (Vec<f32>, [f64; 5]);

/// Loss of one shard (its collocation pairs and picks) with the sums scaled by the
/// whole batch sizes, so that the shard losses add up to the batch loss. Returns the
/// gradient and `[total, data, eikonal, regulariser, mean squared error]`, or `None`
/// when something is not finite (an error only for a fault of the engine).
pub(super) fn shard_loss(
    ctx: &Ctx,
    params: &[f32],
    pairs: &[Pair],
    batch: &[usize],
    n_colloc: usize,
    n_picks: usize,
    ad: &Device,
) -> Result<Option<ShardLoss>, PinnError> {
    let s = ctx.settings;
    let model = &ctx.model;
    let (tp, vp) = split(ctx, params);
    let tau = NetTensors::new(&model.tau_shape, tp, s.activation, s.fast_tanh, ad, true);
    let vel = NetTensors::new(
        &model.vel_shape,
        vp,
        s.activation,
        s.fast_tanh,
        ad,
        s.train_velocity,
    );
    let zero = || Tensor::<1>::zeros([1], ad);
    let (eik, reg) = if pairs.is_empty() {
        (zero(), zero())
    } else {
        let tb = model.tau_batch(pairs);
        let vb = model.vel_batch(pairs.iter().map(|p| p.0));
        let (res, [vx, vz]) = physics(&tau, &vel, &tb, &vb, &model.frame, ad);
        let inv_n = 1.0 / n_colloc as f64;
        let eik = res.clone().mul(res).sum().mul_scalar(inv_n);
        let reg = if s.train_velocity && s.reg_weight > 0.0 {
            regulariser_mean(s.regulariser, [vx, vz], inv_n)
        } else {
            zero()
        };
        (eik, reg)
    };
    let (data, mse) = if batch.is_empty() {
        (zero(), zero())
    } else {
        let pick_pairs: Vec<Pair> = batch.iter().map(|&k| ctx.pick_pairs[k]).collect();
        let pb = model.tau_batch(&pick_pairs);
        let t_pred = time_value(&tau, &pb, ad);
        let t_obs = tensor2(
            batch.iter().map(|&k| ctx.picks[k].time_s as f32).collect(),
            batch.len(),
            1,
            ad,
        );
        let inv_sig = tensor2(
            batch
                .iter()
                .map(|&k| (1.0 / ctx.picks[k].sigma_s) as f32)
                .collect(),
            batch.len(),
            1,
            ad,
        );
        let err = t_pred.sub(t_obs);
        let chi = err.clone().mul(inv_sig);
        let inv_m = 1.0 / n_picks as f64;
        let data = chi.clone().mul(chi).sum().mul_scalar(inv_m);
        let mse = err.clone().mul(err).sum().mul_scalar(inv_m).detach();
        (data, mse)
    };
    let total = data
        .clone()
        .mul_scalar(s.data_weight)
        .add(eik.clone().mul_scalar(s.eikonal_weight))
        .add(reg.clone().mul_scalar(s.reg_weight));
    let parts = Tensor::cat(
        vec![
            total.clone().detach(),
            data.detach(),
            eik.detach(),
            reg.detach(),
            mse,
        ],
        0,
    );
    let v: Vec<f32> = f32s(parts.into_data())?;
    if v.iter().any(|x| !x.is_finite()) {
        return Ok(None);
    }
    let vals = [
        v[0] as f64,
        v[1] as f64,
        v[2] as f64,
        v[3] as f64,
        v[4] as f64,
    ];
    let grads = total.backward();
    let mut g = tau.grads(&grads)?;
    if s.train_velocity {
        g.extend(vel.grads(&grads)?);
    } else {
        g.extend(std::iter::repeat_n(0.0, vp.len()));
    }
    Ok(Some((g, vals)))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::GridSpec;
    use crate::pinn::net::to_f64;

    /// The tensor form (the PINN's loss) and the host forms (`regularise::mean` on the
    /// same slopes, `regularise::grid_mean` on finite differences of the field on a
    /// fine grid) of one field: a smooth rock head `v = 600 + 1400·σ((depth − 5 −
    /// x/20)/0.4)`, scaled by 0.01. The three agree for every kind.
    #[test]
    fn tensor_and_grid_forms_agree_on_one_field() {
        let d = Device::flex();
        let spec = GridSpec {
            x0: 0.0,
            z0: -12.0,
            dx: 0.02,
            dz: 0.02,
            nx: 501,
            nz: 601,
        };
        let scale = 0.01;
        let field = |x: f64, z: f64| {
            let a = (-z - 5.0 - x / 20.0) / 0.4;
            600.0 + 1400.0 / (1.0 + (-a).exp())
        };
        let slope = |x: f64, z: f64| {
            let a = (-z - 5.0 - x / 20.0) / 0.4;
            let sg = 1.0 / (1.0 + (-a).exp());
            let dv_da = 1400.0 * sg * (1.0 - sg);
            (-dv_da / 20.0 / 0.4, -dv_da / 0.4)
        };
        let mut v = vec![0.0; spec.len()];
        let (mut gx, mut gz) = (Vec::new(), Vec::new());
        for j in 0..spec.nz {
            for i in 0..spec.nx {
                let (x, z) = (spec.x(i), spec.z(j));
                v[spec.idx(i, j)] = field(x, z);
                let (a, b) = slope(x, z);
                gx.push(scale * a);
                gz.push(scale * b);
            }
        }
        let n = gx.len();
        let col = |g: &Vec<f64>| {
            Tensor::<2>::from_data(
                TensorData::new(g.iter().map(|&x| x as f32).collect::<Vec<f32>>(), [n, 1]),
                &d,
            )
        };
        for kind in [
            Regulariser::Smoothness,
            Regulariser::TotalVariation,
            Regulariser::MinimumSupport,
        ] {
            let tensor = to_f64(
                regulariser_mean(kind, [col(&gx), col(&gz)], 1.0 / n as f64).reshape([1, 1]),
            )
            .unwrap()[0];
            let host = crate::regularise::mean(kind, &gx, &gz);
            let grid = crate::regularise::grid_mean(kind, &spec, &v, scale);
            // measured (f32 sums over 301 101 points; central differences at 2 cm):
            // tensor within 3.7e-4 of host, grid within 1.7e-4
            assert!(
                (tensor - host).abs() < 1e-3 * host,
                "{kind:?}: {tensor} {host}"
            );
            assert!((grid - host).abs() < 5e-4 * host, "{kind:?}: {grid} {host}");
        }
    }
}
