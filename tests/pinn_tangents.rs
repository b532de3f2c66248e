//! Forward-propagated input derivatives of the PINN networks against central finite
//! differences (the definition of the derivative; central differences have error
//! O(h²), e.g. Press et al., *Numerical Recipes*, 3rd ed., §5.7).

use burn::prelude::*;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use slowfield::pinn::net::{Activation, MlpShape, NetTensors};
use slowfield::pinn::{train, Domain, Pick, PinnSettings, Silent, StartModel};

/// Independent f64 evaluation of the same network layout (weights `[d_in, d_out]`
/// row-major, then biases), written here from the definition of a perceptron.
fn reference(shape: &MlpShape, p: &[f32], act: Activation, x: &[f64]) -> f64 {
    let mut h: Vec<f64> = x.to_vec();
    let layout = shape.layout();
    for (l, &(wo, bo, i, o)) in layout.iter().enumerate() {
        let mut a = vec![0.0; o];
        for (c, ac) in a.iter_mut().enumerate() {
            let mut s = p[bo + c] as f64;
            for (r, hr) in h.iter().enumerate().take(i) {
                s += hr * p[wo + r * o + c] as f64;
            }
            *ac = s;
        }
        h = if l + 1 < layout.len() {
            a.iter()
                .map(|&v| match act {
                    Activation::Tanh => v.tanh(),
                    Activation::Sine => v.sin(),
                })
                .collect()
        } else {
            a
        };
    }
    h[0]
}

fn random_params(shape: &MlpShape, rng: &mut ChaCha8Rng) -> Vec<f32> {
    // no zero output layer: every path must carry a derivative
    let mut p = shape.init(rng, false);
    for v in p.iter_mut() {
        *v += rng.gen_range(-0.1..0.1f32);
    }
    p
}

fn rel_err(a: &[f64], b: &[f64]) -> f64 {
    let num: f64 = a
        .iter()
        .zip(b)
        .map(|(x, y)| (x - y).powi(2))
        .sum::<f64>()
        .sqrt();
    let den: f64 = b.iter().map(|y| y * y).sum::<f64>().sqrt();
    num / den
}

/// `value_bound` and `tangent_bound`: the largest relative errors allowed (f32 network
/// against the f64 reference and central differences).
fn check_tangents(act: Activation, fast: bool, value_bound: f64, tangent_bound: f64) {
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let shape = MlpShape::new(3, 24, 3, 1);
    let p = random_params(&shape, &mut rng);
    let n = 64;
    let x: Vec<f64> = (0..n * 3).map(|_| rng.gen_range(-1.0..1.0)).collect();
    let dir: Vec<f64> = (0..n * 3).map(|_| rng.gen_range(-1.0..1.0)).collect();
    let dev = Device::flex();
    let net = NetTensors::new(&shape, &p, act, fast, &dev, false);
    let xt = Tensor::<2>::from_data(
        TensorData::new(x.iter().map(|&v| v as f32).collect::<Vec<_>>(), [n, 3]),
        &dev,
    );
    let dt = Tensor::<2>::from_data(
        TensorData::new(dir.iter().map(|&v| v as f32).collect::<Vec<_>>(), [n, 3]),
        &dev,
    );
    let (y, d) = net.forward_tangent(xt, vec![dt]);
    let y: Vec<f64> = y
        .into_data()
        .try_into_vec::<f32>()
        .unwrap()
        .into_iter()
        .map(f64::from)
        .collect();
    let d: Vec<f64> = d[0]
        .clone()
        .into_data()
        .try_into_vec::<f32>()
        .unwrap()
        .into_iter()
        .map(f64::from)
        .collect();
    let h = 1e-5;
    let (mut y_ref, mut d_fd) = (Vec::new(), Vec::new());
    for r in 0..n {
        let xr = &x[3 * r..3 * r + 3];
        let dr = &dir[3 * r..3 * r + 3];
        let plus: Vec<f64> = xr.iter().zip(dr).map(|(a, b)| a + h * b).collect();
        let minus: Vec<f64> = xr.iter().zip(dr).map(|(a, b)| a - h * b).collect();
        y_ref.push(reference(&shape, &p, act, xr));
        d_fd.push(
            (reference(&shape, &p, act, &plus) - reference(&shape, &p, act, &minus)) / (2.0 * h),
        );
    }
    let ev = rel_err(&y, &y_ref);
    let ed = rel_err(&d, &d_fd);
    println!("{act:?} fast={fast}: value rel err {ev:.2e}, tangent rel err {ed:.2e}");
    assert!(
        ev <= value_bound,
        "values differ from the f64 reference: {ev}"
    );
    assert!(
        ed <= tangent_bound,
        "tangents differ from central differences: {ed}"
    );
}

// The errors are f32 rounding (a relative 6e-8 per operation); each bound is the
// measured error times about 2.5.

#[test]
fn tangents_match_central_differences_tanh() {
    // measured value 2.1e-7, tangent 2.1e-7 on 2026-12-03; bounds about 2.4×
    check_tangents(Activation::Tanh, false, 5e-7, 5e-7);
}

#[test]
fn tangents_match_central_differences_fast_tanh() {
    // measured value 4.3e-7 (the rational tanh), tangent 1.9e-7 on 2026-12-03; bounds
    // about 2.5×
    check_tangents(Activation::Tanh, true, 1.1e-6, 5e-7);
}

#[test]
fn tangents_match_central_differences_sine() {
    // measured value 2.1e-7, tangent 1.9e-7 on 2026-12-03; bounds about 2.5×
    check_tangents(Activation::Sine, false, 5e-7, 5e-7);
}

/// The loss built on tangents must reach the weights: the reverse-mode gradient of
/// `L = Σ (∂y/∂x)²` with respect to every weight matches central differences of `L`.
#[test]
fn weight_gradient_of_a_tangent_loss_matches_differences() {
    for fast in [false, true] {
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        let shape = MlpShape::new(2, 8, 2, 1);
        let p = random_params(&shape, &mut rng);
        let n = 16;
        let x: Vec<f64> = (0..n * 2).map(|_| rng.gen_range(-1.0..1.0)).collect();
        let ad = Device::flex().autodiff();
        let net = NetTensors::new(&shape, &p, Activation::Tanh, fast, &ad, true);
        let xt = Tensor::<2>::from_data(
            TensorData::new(x.iter().map(|&v| v as f32).collect::<Vec<_>>(), [n, 2]),
            &ad,
        );
        let seed: Vec<f32> = (0..n).flat_map(|_| [1.0f32, 0.0]).collect();
        let dt = Tensor::<2>::from_data(TensorData::new(seed, [n, 2]), &ad);
        let (_, d) = net.forward_tangent(xt, vec![dt]);
        let loss = d[0].clone().mul(d[0].clone()).sum();
        let g = net.grads(&loss.backward()).unwrap();
        // L(θ) in f64 with the derivative ∂y/∂x0 itself by central differences
        let loss_ref = |q: &[f32]| -> f64 {
            let hx = 1e-4;
            (0..n)
                .map(|r| {
                    let a = [x[2 * r] + hx, x[2 * r + 1]];
                    let b = [x[2 * r] - hx, x[2 * r + 1]];
                    let dy = (reference(&shape, q, Activation::Tanh, &a)
                        - reference(&shape, q, Activation::Tanh, &b))
                        / (2.0 * hx);
                    dy * dy
                })
                .sum()
        };
        let mut fd = Vec::new();
        let hp = 1e-2f32;
        for k in 0..p.len() {
            let mut a = p.clone();
            let mut b = p.clone();
            a[k] += hp;
            b[k] -= hp;
            fd.push((loss_ref(&a) - loss_ref(&b)) / (2.0 * hp as f64));
        }
        let g64: Vec<f64> = g.iter().map(|&v| v as f64).collect();
        let e = rel_err(&g64, &fd);
        println!("fast={fast}: weight-gradient rel err {e:.2e}");
        // measured 1.73e-5 for both on 2026-12-03 (mostly the O(h²) error of the
        // differences with h = 1e-2 on the weights); bound about 2.3×
        assert!(
            e <= 4e-5,
            "reverse-mode weight gradient of the tangent loss is off: {e}"
        );
    }
}

fn small_survey() -> (Vec<Pick>, Domain, StartModel) {
    // v = 400 + 40·depth on flat ground; times from Fomel, Luo & Zhao (2009) eq. 20.
    let (v0, g) = (400.0, 40.0);
    let mut picks = Vec::new();
    for &sx in &[0.0, 30.0, 60.0] {
        for k in 0..=12 {
            let rx = 5.0 * k as f64;
            if (rx - sx).abs() < 1e-9 {
                continue;
            }
            let t = slowfield::analytic::gradient_time(v0, v0, g, (rx - sx).abs());
            picks.push(Pick {
                source: [sx, 0.0],
                receiver: [rx, 0.0],
                time_s: t,
                sigma_s: 1e-3,
            });
        }
    }
    let domain = Domain {
        x_min: 0.0,
        x_max: 60.0,
        z_bottom: -15.0,
        surface: slowfield::survey::Surface {
            nodes: vec![
                slowfield::survey::Point::new(0.0, 0.0),
                slowfield::survey::Point::new(60.0, 0.0),
            ],
        },
    };
    (
        picks,
        domain,
        StartModel::Gradient {
            v_top: 500.0,
            gradient: 20.0,
        },
    )
}

/// The whole travel-time chain (pair features, factor T0, network) after some
/// training: `∇T` from the tangents against central differences of `T`, and
/// reciprocity `T(a, b) = T(b, a)`.
#[test]
fn time_gradient_matches_central_differences_after_training() {
    let (picks, domain, start) = small_survey();
    for dim in [1u8, 2] {
        let settings = PinnSettings {
            steps: 30,
            tau_width: 32,
            tau_depth: 3,
            vel_width: 16,
            vel_depth: 2,
            collocation: Some(256),
            dim,
            fast_tanh: true,
            ..Default::default()
        };
        let out = train(&picks, &domain, &start, &settings, None, &mut Silent).unwrap();
        let m = &out.model;
        let mut rng = ChaCha8Rng::seed_from_u64(3);
        let mut pairs = Vec::new();
        while pairs.len() < 40 {
            let a: [f64; 2] = [rng.gen_range(2.0..58.0), rng.gen_range(-13.0..-1.0)];
            let b: [f64; 2] = [rng.gen_range(0.0..60.0), 0.0];
            if ((a[0] - b[0]).powi(2) + a[1] * a[1]).sqrt() > 5.0 {
                pairs.push((a, b));
            }
        }
        let g = m.time_gradient(&pairs).unwrap();
        let h = 0.05;
        let mut shifted = Vec::new();
        for &(a, b) in &pairs {
            shifted.push(([a[0] + h, a[1]], b));
            shifted.push(([a[0] - h, a[1]], b));
            shifted.push(([a[0], a[1] + h], b));
            shifted.push(([a[0], a[1] - h], b));
        }
        let t = m.times(&shifted).unwrap();
        let fd: Vec<f64> = (0..pairs.len())
            .flat_map(|k| {
                [
                    (t[4 * k] - t[4 * k + 1]) / (2.0 * h),
                    (t[4 * k + 2] - t[4 * k + 3]) / (2.0 * h),
                ]
            })
            .collect();
        let an: Vec<f64> = g.iter().flat_map(|v| [v[0], v[1]]).collect();
        let e = rel_err(&an, &fd);
        println!("dim {dim}: ∇T rel err {e:.2e}");
        // measured 3.15e-5 (dim 1) and 3.04e-5 (dim 2) on 2026-12-03: f32 times
        // differenced over 0.1 m; bound about 2.5×
        assert!(
            e <= 8e-5,
            "∇T from tangents differs from central differences: {e}"
        );
        let swapped: Vec<_> = pairs.iter().map(|&(a, b)| (b, a)).collect();
        let t1 = m.times(&pairs).unwrap();
        let t2 = m.times(&swapped).unwrap();
        let mut worst = 0.0f64;
        for (x, y) in t1.iter().zip(&t2) {
            worst = worst.max((x - y).abs() / x.abs());
        }
        println!("dim {dim}: reciprocity, largest relative gap {worst:.2e}");
        // exact by construction (the pair features and the factor are symmetric in
        // their arithmetic, not only in exact arithmetic): measured 0 on 2026-12-03
        assert_eq!(worst, 0.0, "reciprocity broken: relative gap {worst}");
    }
}

fn to_vec(t: Tensor<2>) -> Vec<f64> {
    t.into_data()
        .try_into_vec::<f32>()
        .unwrap()
        .into_iter()
        .map(f64::from)
        .collect()
}

/// The fused flex layer kernels against the same network built from tensor operations:
/// values, tangents and the weight gradient of a loss that uses all of them, for every
/// activation, with one tangent direction (stacked forward tangents) and two (for tanh:
/// the reverse sweep for the input gradient), on the autodiff and on the plain device.
#[test]
fn fused_layers_match_tensor_operations() {
    let cases = [
        (Activation::Tanh, true),
        (Activation::Tanh, false),
        (Activation::Sine, false),
    ];
    for (act, fast) in cases {
        let mut rng = ChaCha8Rng::seed_from_u64(5);
        let shape = MlpShape::new(3, 16, 3, 1);
        let p = random_params(&shape, &mut rng);
        let n = 37;
        let data = |rng: &mut ChaCha8Rng| -> Vec<f32> {
            (0..n * 3).map(|_| rng.gen_range(-1.0..1.0f32)).collect()
        };
        let (x, d1, d2) = (data(&mut rng), data(&mut rng), data(&mut rng));
        let run = |fused: bool, dev: &Device, track: bool| {
            let net = NetTensors::new(&shape, &p, act, fast, dev, track).with_fused(fused);
            let t = |v: &Vec<f32>| Tensor::<2>::from_data(TensorData::new(v.clone(), [n, 3]), dev);
            let (y, d) = net.forward_tangent(t(&x), vec![t(&d1), t(&d2)]);
            let (y1, e) = net.forward_tangent(t(&x), vec![t(&d2)]);
            let y_only = net.forward(t(&x));
            let mut out = vec![
                to_vec(y.clone()),
                to_vec(d[0].clone()),
                to_vec(d[1].clone()),
                to_vec(y_only.clone()),
                to_vec(y1.clone()),
                to_vec(e[0].clone()),
            ];
            if track {
                let loss = y
                    .clone()
                    .mul(y)
                    .sum()
                    .add(d[0].clone().mul(d[1].clone()).sum())
                    .add(d[1].clone().mul(d[1].clone()).sum().mul_scalar(0.5))
                    .add(y_only.sum())
                    .add(e[0].clone().mul(y1).sum());
                let g = net.grads(&loss.backward()).unwrap();
                out.push(g.iter().map(|&v| v as f64).collect());
            }
            out
        };
        let ad = Device::flex().autodiff();
        let plain = Device::flex();
        for (dev, track) in [(&ad, true), (&plain, false)] {
            let a = run(true, dev, track);
            let b = run(false, dev, track);
            for (k, (u, v)) in a.iter().zip(&b).enumerate() {
                let e = rel_err(u, v);
                println!("{act:?} fast={fast} track={track} part {k}: rel diff {e:.2e}");
                // measured 6.9e-7 at most on 2026-12-03 (an AVX2 machine: the fused
                // kernels sum in another order than the tensor operations); bound
                // about 2.9×
                assert!(
                    e <= 2e-6,
                    "fused and tensor-op layers differ, part {k}: {e}"
                );
            }
        }
    }
}
