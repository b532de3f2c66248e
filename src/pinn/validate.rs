//! Input checks run before any training: settings, domain, start model, picks.

use super::{Domain, Pick, PinnError, PinnSettings, StartModel};

fn bad(name: &'static str, problem: String, hint: &'static str) -> PinnError {
    PinnError::Setting {
        name,
        problem,
        hint,
    }
}

/// The refinement stage's settings.
pub(crate) fn refine(s: &crate::settings::RefineSettings) -> Result<(), PinnError> {
    s.validate().map_err(|problem| PinnError::Setting {
        name: "refine",
        problem,
        hint: "see the [refine] table of settings.toml",
    })?;
    if s.detail_features > 4096 || s.detail_width > 4096 || s.detail_depth > 64 {
        return Err(bad(
            "refine.detail_*",
            format!(
                "{} features into {} × {} is beyond the limits 4096 features, 4096 wide, 64 deep",
                s.detail_features, s.detail_depth, s.detail_width
            ),
            "use e.g. 32 features into 2 × 32 (the defaults)",
        ));
    }
    Ok(())
}

/// Points per training step at most (collocation, picks, shard).
pub const MAX_BATCH: usize = 262_144;

pub(crate) fn settings(s: &PinnSettings) -> Result<(), PinnError> {
    if !(s.v_min.is_finite() && s.v_min > 0.0) {
        return Err(bad(
            "v_min",
            format!("{} m/s is not a positive velocity", s.v_min),
            "give the lowest plausible velocity, e.g. 100 m/s for dry soil",
        ));
    }
    if !(s.v_max.is_finite() && s.v_max > s.v_min) {
        return Err(bad(
            "v_max",
            format!(
                "v_max = {} m/s must be larger than v_min = {} m/s",
                s.v_max, s.v_min
            ),
            "swap or widen the velocity bounds",
        ));
    }
    if s.dim != 1 && s.dim != 2 {
        return Err(bad(
            "dim",
            format!("{} is neither 1 nor 2", s.dim),
            "use 1 for v(depth) or 2 for v(x, z)",
        ));
    }
    for (name, v) in [
        ("tau_width", s.tau_width),
        ("tau_depth", s.tau_depth),
        ("vel_width", s.vel_width),
        ("vel_depth", s.vel_depth),
    ] {
        if v == 0 || v > 4096 {
            return Err(bad(
                name,
                format!("{v} is outside 1..=4096"),
                "use e.g. 64 wide and 4 deep",
            ));
        }
    }
    if s.steps == 0 {
        return Err(bad(
            "steps",
            "zero training steps".into(),
            "give at least one step, typically a few thousand",
        ));
    }
    for (name, v) in [
        ("learning_rate", s.learning_rate),
        ("lr_half_life", s.lr_half_life),
        ("adam_eps", s.adam_eps),
        ("vel_input_scale", s.vel_input_scale),
        ("x_unit_m", s.x_unit_m.unwrap_or(1.0)),
    ] {
        if !(v.is_finite() && v > 0.0) {
            return Err(bad(
                name,
                format!("{v} is not a positive number"),
                "use the default",
            ));
        }
    }
    if !(s.lr_min.is_finite() && s.lr_min >= 0.0) {
        return Err(bad(
            "lr_min",
            format!("{} is negative or not finite", s.lr_min),
            "use 0 or a small positive step",
        ));
    }
    for (name, v) in [("beta1", s.beta1), ("beta2", s.beta2)] {
        if !(0.0..1.0).contains(&v) {
            return Err(bad(
                name,
                format!("{v} is outside [0, 1)"),
                "use 0.9 for beta1 and 0.999 for beta2",
            ));
        }
    }
    if s.collocation() == 0 {
        return Err(bad(
            "collocation",
            "zero collocation points".into(),
            "use e.g. 2048",
        ));
    }
    // a batch row costs about 100 floats of activations per hidden unit and tangent;
    // these caps keep one step within a few GB on any network size the widths allow
    for (name, v, cap) in [
        ("collocation", s.collocation(), MAX_BATCH),
        ("pick_batch", s.pick_batch, MAX_BATCH),
        ("shard_points", s.shard_points, MAX_BATCH),
    ] {
        if v > cap {
            return Err(bad(
                name,
                format!("{v} is more than the limit of {cap} points per step"),
                "use a few thousand (the defaults are 2048, 1024 and 1024)",
            ));
        }
    }
    if s.shard_points == 0 {
        return Err(bad(
            "shard_points",
            "zero points per shard".into(),
            "use e.g. 1024",
        ));
    }
    if s.pick_batch == 0 {
        return Err(bad(
            "pick_batch",
            "zero picks per step".into(),
            "use e.g. 1024",
        ));
    }
    if !(0.0..=1.0).contains(&s.ray_fraction) {
        return Err(bad(
            "ray_fraction",
            format!("{} is outside [0, 1]", s.ray_fraction),
            "use e.g. 0.5",
        ));
    }
    if !(s.ray_sag.is_finite() && s.ray_sag >= 0.0) {
        return Err(bad(
            "ray_sag",
            format!("{} is negative", s.ray_sag),
            "use e.g. 0.3",
        ));
    }
    for (name, v) in [
        ("data_weight", s.data_weight),
        ("eikonal_weight", s.eikonal_weight),
        ("reg_weight", s.reg_weight),
        ("chi2_target", s.chi2_target),
        ("eikonal_target", s.eikonal_target),
    ] {
        if !(v.is_finite() && v >= 0.0) {
            return Err(bad(
                name,
                format!("{v} is negative or not finite"),
                "weights and targets are non-negative numbers",
            ));
        }
    }
    if s.eikonal_weight == 0.0 {
        return Err(bad(
            "eikonal_weight",
            "zero: the times would not obey the wave equation".into(),
            "use e.g. 1000",
        ));
    }
    if s.eval_every == 0 {
        return Err(bad("eval_every", "zero".into(), "use e.g. 50"));
    }
    Ok(())
}

pub(crate) fn domain(d: &Domain) -> Result<(), PinnError> {
    if !(d.x_min.is_finite() && d.x_max.is_finite() && d.x_min < d.x_max) {
        return Err(PinnError::Domain(format!(
            "x_min = {} is not below x_max = {}",
            d.x_min, d.x_max
        )));
    }
    if d.surface.nodes.is_empty() {
        return Err(PinnError::Domain("the ground surface has no points".into()));
    }
    for (k, w) in d.surface.nodes.windows(2).enumerate() {
        if w[1].x.partial_cmp(&w[0].x) != Some(std::cmp::Ordering::Greater) {
            return Err(PinnError::Domain(format!(
                "surface point {} (x = {}) is not right of point {} (x = {})",
                k + 1,
                w[1].x,
                k,
                w[0].x
            )));
        }
    }
    if d.surface
        .nodes
        .iter()
        .any(|p| !(p.x.is_finite() && p.z.is_finite()))
    {
        return Err(PinnError::Domain(
            "a surface point is not a finite number".into(),
        ));
    }
    let lowest = (0..=200)
        .map(|k| d.elevation(d.x_min + (d.x_max - d.x_min) * k as f64 / 200.0))
        .chain(d.surface.nodes.iter().map(|p| p.z))
        .fold(f64::INFINITY, f64::min);
    if !(d.z_bottom.is_finite() && d.z_bottom < lowest) {
        return Err(PinnError::Domain(format!(
            "z_bottom = {} is not below the lowest ground elevation {}",
            d.z_bottom, lowest
        )));
    }
    Ok(())
}

pub(crate) fn start(m: &StartModel, s: &PinnSettings) -> Result<(), PinnError> {
    match m {
        StartModel::Gradient { v_top, gradient } => {
            if !(v_top.is_finite() && *v_top > 0.0 && gradient.is_finite()) {
                return Err(PinnError::StartModel(format!("v_top = {v_top} m/s, gradient = {gradient} 1/s: give a positive top velocity and a finite gradient")));
            }
        }
        StartModel::Profile { depth_m, velocity } => {
            if depth_m.is_empty() || depth_m.len() != velocity.len() {
                return Err(PinnError::StartModel(format!(
                    "{} depths but {} velocities: give one velocity per depth, at least one",
                    depth_m.len(),
                    velocity.len()
                )));
            }
            if depth_m
                .windows(2)
                .any(|w| w[1].partial_cmp(&w[0]) != Some(std::cmp::Ordering::Greater))
            {
                return Err(PinnError::StartModel(
                    "depths must increase strictly".into(),
                ));
            }
            if let Some(v) = velocity.iter().find(|v| !(v.is_finite() && **v > 0.0)) {
                return Err(PinnError::StartModel(format!(
                    "velocity {v} m/s is not positive"
                )));
            }
        }
    }
    let _ = s;
    Ok(())
}

/// Length of a path from `a` to `b` that stays in the ground: the straight segment
/// when it does, otherwise up to the surface, along it, and down again.
fn ground_path(d: &Domain, a: [f64; 2], b: [f64; 2]) -> f64 {
    let straight = ((a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2)).sqrt();
    let inside = (0..=64).all(|k| {
        let f = k as f64 / 64.0;
        let x = a[0] + f * (b[0] - a[0]);
        let z = a[1] + f * (b[1] - a[1]);
        z <= d.elevation(x) + 1e-9
    });
    if inside {
        return straight;
    }
    let (lo, hi) = if a[0] <= b[0] { (a, b) } else { (b, a) };
    let mut len = (d.elevation(lo[0]) - lo[1]).abs() + (d.elevation(hi[0]) - hi[1]).abs();
    let mut xs = vec![lo[0]];
    xs.extend(
        d.surface
            .nodes
            .iter()
            .map(|p| p.x)
            .filter(|&x| x > lo[0] && x < hi[0]),
    );
    xs.push(hi[0]);
    for w in xs.windows(2) {
        len += ((w[1] - w[0]).powi(2) + (d.elevation(w[1]) - d.elevation(w[0])).powi(2)).sqrt();
    }
    len
}

pub(crate) fn picks(p: &[Pick], d: &Domain, s: &PinnSettings) -> Result<(), PinnError> {
    if p.is_empty() {
        return Err(PinnError::NoPicks);
    }
    let tol = 1e-6 * (d.x_max - d.x_min);
    for (index, k) in p.iter().enumerate() {
        let err = |problem: String| PinnError::Pick {
            index,
            sx: k.source[0],
            sz: k.source[1],
            rx: k.receiver[0],
            rz: k.receiver[1],
            problem,
        };
        if k.source.iter().chain(&k.receiver).any(|v| !v.is_finite()) || !k.time_s.is_finite() {
            return Err(err("a position or the time is not a finite number".into()));
        }
        if !(k.sigma_s.is_finite() && k.sigma_s > 0.0) {
            return Err(err(format!("its uncertainty {} ms is not positive; give sigma > 0 (a typical pick error is 0.5–2 ms)", k.sigma_s * 1e3)));
        }
        for (what, q) in [("source", k.source), ("receiver", k.receiver)] {
            if q[0] < d.x_min - tol
                || q[0] > d.x_max + tol
                || q[1] < d.z_bottom - tol
                || q[1] > d.elevation(q[0]) + 0.01
            {
                return Err(err(format!("the {what} lies outside the model domain (x {}..{}, below the ground, above z = {}); widen the domain or fix the position", d.x_min, d.x_max, d.z_bottom)));
            }
        }
        let r =
            ((k.source[0] - k.receiver[0]).powi(2) + (k.source[1] - k.receiver[1]).powi(2)).sqrt();
        if r < tol {
            return Err(err(
                "source and receiver are at the same place; leave zero-offset picks out".into(),
            ));
        }
        let fastest = r / s.v_max;
        if k.time_s + 3.0 * k.sigma_s < fastest {
            return Err(err(format!(
                "the time {:.2} ms is faster than a straight ray at v_max = {} m/s ({:.2} ms) even allowing 3 sigma; raise v_max or check this pick of the shot at x = {:.2} m",
                k.time_s * 1e3, s.v_max, fastest * 1e3, k.source[0]
            )));
        }
        let slowest = ground_path(d, k.source, k.receiver) / s.v_min;
        if k.time_s - 3.0 * k.sigma_s > slowest {
            return Err(err(format!(
                "the time {:.2} ms is slower than a path through ground at v_min = {} m/s ({:.2} ms) even allowing 3 sigma; lower v_min or check this pick of the shot at x = {:.2} m",
                k.time_s * 1e3, s.v_min, slowest * 1e3, k.source[0]
            )));
        }
    }
    Ok(())
}
