//! Closed-form travel times of simple grounds, used as references by the tests and
//! to build starting models.

/// First-arrival time over a flat two-layer ground (source and receiver on the
/// surface, horizontal offset `x`): the earlier of the direct wave `x/v1` and the head
/// wave `x/v2 + 2h·cos(ic)/v1`, `sin(ic) = v1/v2`, which exists beyond the critical
/// distance `2h·tan(ic)`. Telford, Geldart & Sheriff (1990), *Applied Geophysics*, §4.3.
pub fn two_layer_time(x: f64, v1: f64, v2: f64, h: f64) -> f64 {
    let x = x.abs();
    let direct = x / v1;
    if v2 <= v1 {
        return direct;
    }
    let ic = (v1 / v2).asin();
    if x < 2.0 * h * ic.tan() {
        return direct;
    }
    direct.min(x / v2 + intercept_time(v1, v2, h))
}

/// Intercept time of the head wave, `2h·cos(ic)/v1`, s (Telford et al. 1990).
pub fn intercept_time(v1: f64, v2: f64, h: f64) -> f64 {
    let ic = (v1 / v2).asin();
    2.0 * h * ic.cos() / v1
}

/// Crossover distance where the head wave overtakes the direct wave,
/// `2h·sqrt((v2 + v1)/(v2 − v1))`, m (Telford et al. 1990).
pub fn crossover_distance(v1: f64, v2: f64, h: f64) -> f64 {
    2.0 * h * ((v2 + v1) / (v2 - v1)).sqrt()
}

/// Critical angle `asin(v1/v2)`, radians (Snell's law).
pub fn critical_angle(v1: f64, v2: f64) -> f64 {
    (v1 / v2).asin()
}

/// Time between two points in a constant-gradient ground `v = v0 + g·z`:
/// `T = arccosh(1 + g²r²/(2·v_s·v_r))/|g|` (Fomel, Luo & Zhao 2009, J. Comput. Phys. 228,
/// eq. 20; also Slotnick 1959). Falls back to `r/v` when `g` is (nearly) zero.
pub fn gradient_time(v_source: f64, v_receiver: f64, g: f64, r: f64) -> f64 {
    if g.abs() < 1e-12 {
        return r / v_source;
    }
    let arg = 1.0 + g * g * r * r / (2.0 * v_source * v_receiver);
    arg.acosh() / g.abs()
}
