//! Settings a run leaves open, derived from the survey: the velocity bounds from the
//! picks' apparent velocities, the networks' horizontal unit, the collocation count
//! from the model's area, the detail network's wavelength from the receiver spacing.
//! (The model depth and the cell are derived in [`super::Problem::new`].)
//!
//! Each rule was chosen on the site suite (`experiments/site_suite.rs`), not on one
//! site; every value is listed in the report with its rule, and a value the settings
//! give is kept as given.

use serde::Serialize;

use crate::settings::RunSettings;
use crate::survey::Survey;

use super::Problem;
use crate::settings::Method;

/// What the survey's geometry and picks say about the ground's scales.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct SurveyScales {
    /// Extent of the stations along the line, m.
    pub line_m: f64,
    /// Median spacing of neighbouring receivers, m.
    pub receiver_spacing_m: f64,
    /// Fastest apparent velocity of a far-offset branch (least-squares slope of time
    /// against offset over the farther half of a shot's picks on one side), m/s.
    pub fastest_apparent_mps: f64,
    /// Slowest apparent velocity near the shots (offset over time of each shot's two
    /// nearest picks per side, the 10th percentile), m/s.
    pub slowest_apparent_mps: f64,
}

/// Picks a far-offset branch needs before its slope counts.
const MIN_BRANCH_PICKS: usize = 4;

impl SurveyScales {
    /// The scales of `survey`.
    pub fn of(survey: &Survey) -> SurveyScales {
        let (x0, x1) = survey.x_range();
        let mut xs: Vec<f64> = survey.receivers().iter().map(|p| p.x).collect();
        xs.sort_by(f64::total_cmp);
        xs.dedup_by(|a, b| (*a - *b).abs() < 1e-6);
        let mut gaps: Vec<f64> = xs.windows(2).map(|w| w[1] - w[0]).collect();
        let spacing = crate::stats::median(&mut gaps).unwrap_or(x1 - x0);
        let mut fastest = f64::NAN;
        let mut near = Vec::new();
        for shot in &survey.shots {
            let s = shot.source;
            for side in [-1.0, 1.0] {
                // (offset, time) on this side of the shot, nearest first
                let mut branch: Vec<(f64, f64)> = shot
                    .picks
                    .iter()
                    .map(|&k| &survey.picks[k])
                    .filter(|p| (p.receiver.x - s.x) * side > 0.0)
                    .map(|p| (p.offset(), p.time))
                    .collect();
                branch.sort_by(|a, b| a.0.total_cmp(&b.0));
                near.extend(branch.iter().take(2).map(|&(x, t)| x / t));
                let far = &branch[branch.len() / 2..];
                if far.len() >= MIN_BRANCH_PICKS {
                    if let Some(v) = apparent_velocity(far) {
                        fastest = if fastest.is_nan() { v } else { fastest.max(v) };
                    }
                }
            }
        }
        let near: Vec<f64> = near
            .into_iter()
            .filter(|v| v.is_finite() && *v > 0.0)
            .collect();
        let slowest = crate::stats::quantile(&mut near.clone(), 0.1).unwrap_or(f64::NAN);
        SurveyScales {
            line_m: x1 - x0,
            receiver_spacing_m: spacing,
            fastest_apparent_mps: fastest,
            slowest_apparent_mps: slowest,
        }
    }
}

/// `1/slope` of the least-squares line through `(offset, time)`, if it rises and the
/// slope is known to [`SLOPE_PRECISION`]: its standard error, from the scatter about
/// the line (`sqrt(Σr²/(n − 2) / Σ(x − x̄)²)`, the ordinary least-squares formula),
/// must be below that share of the slope. A short branch whose slope the picking noise
/// decides says nothing about the ground's velocity.
fn apparent_velocity(pts: &[(f64, f64)]) -> Option<f64> {
    let n = pts.len() as f64;
    let mx = pts.iter().map(|p| p.0).sum::<f64>() / n;
    let mt = pts.iter().map(|p| p.1).sum::<f64>() / n;
    let sxx: f64 = pts.iter().map(|p| (p.0 - mx).powi(2)).sum();
    let sxt: f64 = pts.iter().map(|p| (p.0 - mx) * (p.1 - mt)).sum();
    if sxx.is_nan() || sxx <= 0.0 || pts.len() < 3 {
        return None;
    }
    let slope = sxt / sxx;
    let icept = mt - slope * mx;
    let rss: f64 = pts
        .iter()
        .map(|p| (p.1 - icept - slope * p.0).powi(2))
        .sum();
    let se = (rss / (n - 2.0) / sxx).sqrt();
    (slope > 0.0 && se < SLOPE_PRECISION * slope).then(|| 1.0 / slope)
}

/// Relative standard error a branch's slope must beat to count.
pub const SLOPE_PRECISION: f64 = 0.1;

/// One setting of the run: its value, whether the run derived it, and how.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Choice {
    /// The setting's name as in the settings file (`table.field` inside a table).
    pub setting: &'static str,
    /// The value used.
    pub value: f64,
    /// Unit of the value.
    pub unit: &'static str,
    /// True when the run derived it (the settings left it open).
    pub derived: bool,
    /// The rule (or "given").
    pub rule: String,
}

/// The entry of one setting: derived by `rule` where `derived`, else "given" (the rule's
/// text is only built when it is shown).
fn choice(
    setting: &'static str,
    value: f64,
    unit: &'static str,
    derived: bool,
    rule: impl FnOnce() -> String,
) -> Choice {
    Choice {
        setting,
        value,
        unit,
        derived,
        rule: if derived { rule() } else { "given".into() },
    }
}

/// Headroom of `v_max` over the fastest apparent velocity (a refractor dipping down
/// the line shows its true velocity only between the up- and down-dip values, and
/// the deepest rays see faster ground than the far branches' slopes).
pub const V_MAX_HEADROOM: f64 = 1.6;
/// Share of the slowest near-offset apparent velocity kept as `v_min` (room for
/// slow bodies under the surface, such as a peat lens).
pub const V_MIN_SHARE: f64 = 0.3;
/// Horizontal input unit of the networks on long lines, m: about half a typical
/// spread (the demo's 136 m wide model), where the defaults were first set.
pub const X_UNIT_M: f64 = 70.0;
/// Collocation points per square metre of model section (2048 on the demo's model,
/// about 136 m × 36 m), and the bounds of the count.
pub const COLLOCATION_PER_M2: f64 = 2048.0 / (136.0 * 36.0);
/// Collocation points per step at least and at most.
pub const COLLOCATION_RANGE: (usize, usize) = (2048, 8192);
/// Detail wavelength per receiver spacing: the shortest wavelength the spacing
/// resolves is about two spacings (Nyquist); four keep the detail network off the
/// scale of the spacing, where it can only fit the noise.
pub const DETAIL_SPACINGS: f64 = 4.0;
/// Detail wavelength at least, m (the engine's own default, set on 2 m spacing).
pub const DETAIL_MIN_M: f64 = 8.0;

/// The settings `problem` is inverted with: `settings` with every open value derived,
/// and the list of values with their rules.
pub fn resolve(problem: &Problem, settings: &RunSettings) -> (RunSettings, Vec<Choice>) {
    let sc = &problem.scales;
    let mut s = settings.clone();
    let mut out = Vec::new();
    // velocity bounds
    let v_max = settings.v_max.unwrap_or_else(|| {
        // the starting model's velocity where its deepest ray turns (its cap may lie
        // below every ray, where the picks say nothing of it)
        let deepest = problem
            .start
            .model
            .velocity(problem.start.deepest_turning_m);
        let mut v = V_MAX_HEADROOM * sc.fastest_apparent_mps;
        if deepest.is_finite() {
            v = v.max(1.25 * deepest);
        }
        if !v.is_finite() {
            v = 5000.0;
        }
        // room above a given v_min
        if let Some(lo) = settings.v_min {
            v = v.max(2.0 * lo);
        }
        (v / 100.0).ceil() * 100.0
    });
    out.push(choice(
        "v_max",
        v_max,
        "m/s",
        settings.v_max.is_none(),
        || {
        format!(
            "{V_MAX_HEADROOM} × the fastest apparent velocity of a far-offset branch ({:.0} m/s), at least 1.25 × the starting model's velocity where its deepest ray turns and 2 × a given v_min, rounded up to 100 m/s",
            sc.fastest_apparent_mps
        )
        },
    ));
    let v_min = settings.v_min.unwrap_or_else(|| {
        let v = V_MIN_SHARE * sc.slowest_apparent_mps;
        let v = if v.is_finite() { v } else { 100.0 };
        ((v / 10.0).floor() * 10.0).max(30.0).min(0.5 * v_max)
    });
    out.push(choice(
        "v_min",
        v_min,
        "m/s",
        settings.v_min.is_none(),
        || {
        format!(
            "{V_MIN_SHARE} × the slowest apparent velocity near the shots ({:.0} m/s, 10th percentile), rounded down to 10 m/s",
            sc.slowest_apparent_mps
        )
        },
    ));
    s.v_min = Some(v_min);
    s.v_max = Some(v_max);
    s.pinn.v_min = v_min;
    s.pinn.v_max = v_max;
    // the networks' horizontal unit
    let half = 0.5 * problem.grid.width();
    let x_unit = settings.pinn.x_unit_m.unwrap_or_else(|| half.min(X_UNIT_M));
    s.pinn.x_unit_m = Some(x_unit);
    out.push(choice(
        "pinn.x_unit_m",
        x_unit.min(half),
        "m",
        settings.pinn.x_unit_m.is_none(),
        || format!("half the model's width, at most {X_UNIT_M} m"),
    ));
    // collocation from the section's area
    let area = problem.grid.width() * problem.depth_m;
    let colloc = settings.pinn.collocation.unwrap_or_else(|| {
        let (lo, hi) = COLLOCATION_RANGE;
        ((COLLOCATION_PER_M2 * area / 256.0).round() as usize * 256).clamp(lo, hi)
    });
    s.pinn.collocation = Some(colloc);
    out.push(choice(
        "pinn.collocation",
        colloc as f64,
        "points",
        settings.pinn.collocation.is_none(),
        || {
            format!(
                "{:.2} per m² of the {area:.0} m² section, in multiples of 256, within {}..{}",
                COLLOCATION_PER_M2, COLLOCATION_RANGE.0, COLLOCATION_RANGE.1
            )
        },
    ));
    // detail wavelength from the receiver spacing
    let wl = settings.refine.detail_wavelength_m.unwrap_or_else(|| {
        let w = DETAIL_SPACINGS * sc.receiver_spacing_m;
        if w.is_finite() {
            w.max(DETAIL_MIN_M)
        } else {
            DETAIL_MIN_M
        }
    });
    s.refine.detail_wavelength_m = Some(wl);
    out.push(choice(
        "refine.detail_wavelength_m",
        wl,
        "m",
        settings.refine.detail_wavelength_m.is_none(),
        || {
            format!(
                "{DETAIL_SPACINGS} × the receiver spacing ({:.2} m), at least {DETAIL_MIN_M} m",
                sc.receiver_spacing_m
            )
        },
    ));
    out.push(choice(
        "depth_m",
        problem.depth_m,
        "m",
        settings.depth_m.is_none(),
        || {
        format!(
            "1.5 × the starting model's deepest turning ray ({:.1} m) + 3 m, at least 10 m, rounded up",
            problem.start.deepest_turning_m
        )
        },
    ));
    out.push(choice(
        "cell_m",
        problem.cell_m,
        "m",
        settings.cell_m.is_none(),
        || "the smaller of 0.5 m and a quarter of the receiver spacing".into(),
    ));
    match settings.method {
        Method::Pinn => {}
        Method::Grid => {
            // the cells: a whole number of solver-grid spacings
            let wanted = settings.grid.cell_m.unwrap_or_else(|| {
                let c = GRID_CELL_SPACINGS * sc.receiver_spacing_m;
                if c.is_finite() {
                    c
                } else {
                    2.0 * problem.cell_m
                }
            });
            let stride = grid_stride(wanted, problem.cell_m);
            let cell = stride as f64 * problem.cell_m;
            s.grid.cell_m = Some(cell);
            let given = settings.grid.cell_m.is_some();
            out.push(Choice {
                setting: "grid.cell_m",
                value: cell,
                unit: "m",
                derived: !given || (cell - wanted).abs() > 1e-9,
                rule: match (given, (cell - wanted).abs() > 1e-9) {
                    (true, false) => "given".into(),
                    (true, true) => format!(
                        "given {wanted} m, made a whole number of solver cells ({} m)",
                        problem.cell_m
                    ),
                    (false, _) => format!(
                        "{GRID_CELL_SPACINGS} × the receiver spacing ({:.2} m), made a whole number of solver cells ({} m)",
                        sc.receiver_spacing_m, problem.cell_m
                    ),
                },
            });
        }
    }
    if settings.method != Method::Pinn {
        out.retain(|c| !c.setting.starts_with("pinn.") && !c.setting.starts_with("refine."));
    }
    (s, out)
}

/// Grid tomography's cell as a share of the receiver spacing (common practice: cells
/// of half the geophone spacing resolve what the spread can, about one spacing).
pub const GRID_CELL_SPACINGS: f64 = 0.5;

/// Solver-grid spacings per cell for a wanted cell size: the nearest whole number, at
/// least one.
pub fn grid_stride(cell_m: f64, solver_cell_m: f64) -> usize {
    ((cell_m / solver_cell_m).round() as usize).max(1)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::survey::{Pick, Point};

    /// Head-wave and direct times over one plane refractor under flat ground: the
    /// textbook dipping-layer formulas (Telford, Geldart & Sheriff 1990, §4.3.2, eqs.
    /// for a dipping bed): shooting down-dip `t = x·sin(ic + θ)/v1 + 2h·cos(ic)/v1`,
    /// up-dip `t = x·sin(ic − θ)/v1 + 2h·cos(ic)/v1`, `h` the perpendicular depth
    /// under the shot, `sin ic = v1/v2`; the direct wave `x/v1` where it comes first.
    fn dipping_line(v1: f64, v2: f64, h0: f64, dip_deg: f64, spacing: f64, n: usize) -> Survey {
        let ic = (v1 / v2).asin();
        let th = dip_deg.to_radians();
        let last = spacing * (n - 1) as f64;
        let mut picks = Vec::new();
        for (id, sx) in [("A", 0.0), ("B", last)] {
            // perpendicular depth under the shot; the refractor deepens with x
            let h = (h0 + sx * th.tan()) * th.cos();
            for k in 0..n {
                let rx = spacing * k as f64;
                let x = (rx - sx).abs();
                if x < 1e-9 {
                    continue;
                }
                let down_dip = rx > sx;
                let a = if down_dip { ic + th } else { ic - th };
                let head = x * a.sin() / v1 + 2.0 * h * ic.cos() / v1;
                picks.push(Pick {
                    shot: id.into(),
                    source: Point::new(sx, 0.0),
                    receiver: Point::new(rx, 0.0),
                    time: head.min(x / v1),
                    sigma: None,
                    line: 0,
                });
            }
        }
        Survey::from_picks(picks).unwrap()
    }

    #[test]
    fn apparent_velocities_of_a_flat_refractor() {
        // 500 over 2500 m/s at 3 m: crossover 2h·sqrt((v2+v1)/(v2−v1)) = 7.3 m, so the
        // far half (beyond 47 m) is all head wave, of slope 1/v2
        let s = SurveyScales::of(&dipping_line(500.0, 2500.0, 3.0, 0.0, 2.0, 48));
        assert!(
            (s.fastest_apparent_mps - 2500.0).abs() < 1e-6 * 2500.0,
            "{s:?}"
        );
        // the nearest picks are direct waves
        assert!((s.slowest_apparent_mps - 500.0).abs() < 1e-9, "{s:?}");
        assert_eq!(s.receiver_spacing_m, 2.0);
        assert_eq!(s.line_m, 94.0);
    }

    #[test]
    fn the_fastest_branch_of_a_dipping_refractor_is_the_up_dip_one() {
        // up-dip apparent velocity v1/sin(ic − θ) (Telford et al. 1990, §4.3.2)
        let (v1, v2, dip) = (600.0, 3000.0, 4.0_f64);
        let s = SurveyScales::of(&dipping_line(v1, v2, 4.0, dip, 2.5, 40));
        let ic = (v1 / v2).asin();
        let up = v1 / (ic - dip.to_radians()).sin();
        let down = v1 / (ic + dip.to_radians()).sin();
        assert!(up > v2 && down < v2);
        assert!(
            (s.fastest_apparent_mps - up).abs() < 1e-6 * up,
            "{s:?} {up}"
        );
    }

    #[test]
    fn a_branch_whose_slope_the_noise_decides_does_not_count() {
        // 2000 m/s with ±0.5 ms alternating picking error: over 15 m (4 picks, 7.5 ms of
        // moveout) the slope is uncertain by far more than 10 %; over 95 m (20 picks) not
        let line = |n: usize, dx: f64| -> Vec<(f64, f64)> {
            (0..n)
                .map(|k| {
                    let x = 30.0 + dx * k as f64;
                    let e = if k % 2 == 0 { 5e-4 } else { -5e-4 };
                    (x, 0.004 + x / 2000.0 + e)
                })
                .collect()
        };
        assert_eq!(apparent_velocity(&line(4, 5.0)), None);
        let v = apparent_velocity(&line(20, 5.0)).unwrap();
        assert!((v - 2000.0).abs() < 0.05 * 2000.0, "{v}");
        // a falling branch never counts
        let falling: Vec<(f64, f64)> = (0..10)
            .map(|k| (k as f64, 0.1 - 0.001 * k as f64))
            .collect();
        assert_eq!(apparent_velocity(&falling), None);
    }

    #[test]
    fn bounds_and_scales_follow_the_survey_unless_given() {
        let survey = dipping_line(500.0, 2500.0, 3.0, 0.0, 2.0, 48);
        let settings = RunSettings::default();
        let problem = Problem::new(survey.clone(), &settings);
        let (s, choices) = resolve(&problem, &settings);
        let get = |name: &str| choices.iter().find(|c| c.setting == name).unwrap();
        // 1.6 × 2500 = 4000, unless the start model's cap asks for more
        let v_max = get("v_max");
        assert!(v_max.derived);
        let deepest = 1.25
            * problem
                .start
                .model
                .velocity(problem.start.deepest_turning_m);
        let want = (V_MAX_HEADROOM * 2500.0).max(deepest);
        assert_eq!(v_max.value, (want / 100.0).ceil() * 100.0);
        assert!(v_max.value >= 4000.0);
        // 0.3 × 500 = 150
        assert_eq!(get("v_min").value, 150.0);
        assert_eq!(s.pinn.v_min, 150.0);
        assert_eq!(s.v_max, Some(v_max.value));
        // 2 m spacing: 4 × 2 = 8 m; half the 94 m model is under 70 m
        assert_eq!(get("refine.detail_wavelength_m").value, 8.0);
        assert_eq!(get("pinn.x_unit_m").value, 0.5 * problem.grid.width());
        // given values are kept and marked so
        let mut given = RunSettings {
            v_max: Some(3100.0),
            ..Default::default()
        };
        given.refine.detail_wavelength_m = Some(5.0);
        given.pinn.collocation = Some(1024);
        let (s2, c2) = resolve(&problem, &given);
        assert_eq!(s2.pinn.v_max, 3100.0);
        assert_eq!(s2.refine.detail_wavelength_m, Some(5.0));
        assert_eq!(s2.pinn.collocation, Some(1024));
        for name in ["v_max", "refine.detail_wavelength_m", "pinn.collocation"] {
            let c = c2.iter().find(|c| c.setting == name).unwrap();
            assert!(!c.derived && c.rule == "given", "{c:?}");
        }
    }

    #[test]
    fn a_given_v_min_above_the_derived_v_max_gives_a_v_max_over_it() {
        // the picks say 2500 m/s at most (v_max 4000 derived); a hand-given v_min of
        // 3000 m/s must not leave the bounds crossed
        let problem = Problem::new(
            dipping_line(500.0, 2500.0, 3.0, 0.0, 2.0, 48),
            &RunSettings::default(),
        );
        let given = RunSettings {
            v_min: Some(3000.0),
            ..Default::default()
        };
        let (s, _) = resolve(&problem, &given);
        assert_eq!(s.pinn.v_min, 3000.0);
        assert!(s.pinn.v_max >= 6000.0, "{}", s.pinn.v_max);
    }

    #[test]
    fn a_given_v_max_below_the_derived_v_min_gives_a_v_min_under_it() {
        // a hand-given v_max of 50 m/s: the derived v_min must stay below it (the
        // engine then refuses the picks, with the pick named, rather than panicking)
        let problem = Problem::new(
            dipping_line(500.0, 2500.0, 3.0, 0.0, 2.0, 48),
            &RunSettings::default(),
        );
        let given = RunSettings {
            v_max: Some(50.0),
            ..Default::default()
        };
        let (s, _) = resolve(&problem, &given);
        assert!(
            s.pinn.v_min < s.pinn.v_max,
            "{} {}",
            s.pinn.v_min,
            s.pinn.v_max
        );
    }

    #[test]
    fn a_long_sparse_line_gets_a_shorter_unit_more_points_and_a_longer_wavelength() {
        // 400 m, receivers 5 m apart
        let survey = dipping_line(500.0, 2500.0, 3.0, 0.0, 5.0, 81);
        let settings = RunSettings::default();
        let problem = Problem::new(survey, &settings);
        let (_, choices) = resolve(&problem, &settings);
        let get = |name: &str| choices.iter().find(|c| c.setting == name).unwrap().value;
        assert_eq!(get("pinn.x_unit_m"), X_UNIT_M);
        assert_eq!(get("refine.detail_wavelength_m"), 20.0);
        // more points than the 94 m line of the same ground, in whole batches of 256,
        // and within the cap
        let short = Problem::new(
            dipping_line(500.0, 2500.0, 3.0, 0.0, 2.0, 48),
            &RunSettings::default(),
        );
        let (_, c_short) = resolve(&short, &settings);
        let n_short = c_short
            .iter()
            .find(|c| c.setting == "pinn.collocation")
            .unwrap()
            .value;
        let n_long = get("pinn.collocation");
        assert!(n_long > n_short, "{n_long} vs {n_short}");
        assert_eq!(n_long % 256.0, 0.0);
        assert!(n_long <= COLLOCATION_RANGE.1 as f64);
    }
}
