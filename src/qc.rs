//! Quality control of a line of picks: geometry summary, apparent velocities,
//! reciprocal pairs, outliers and duplicates.
//!
//! Everything here is arithmetic on the picks; no model or solver is involved.

use serde::Serialize;

use crate::survey::{Pick, Survey, SAME_POSITION_M};

/// Settings of the quality control.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct QcSettings {
    /// Two positions closer than this pair a pick with its reciprocal, m.
    pub position_tol_m: f64,
    /// Absolute floor of the reciprocal-time tolerance, s.
    pub reciprocal_abs_s: f64,
    /// Relative part of the reciprocal-time tolerance (fraction of the time).
    pub reciprocal_rel: f64,
    /// Floor of the outlier threshold, s.
    pub outlier_floor_s: f64,
    /// Outlier threshold in robust standard deviations of the shot's residuals.
    pub outlier_sigmas: f64,
}

impl Default for QcSettings {
    /// Reciprocal times agree within the larger of 2 ms and 5 % of the time:
    /// common practice for hammer and weight-drop refraction picks (no single source).
    fn default() -> Self {
        QcSettings {
            position_tol_m: 0.25,
            reciprocal_abs_s: 0.002,
            reciprocal_rel: 0.05,
            outlier_floor_s: 0.003,
            outlier_sigmas: 4.0,
        }
    }
}

/// Summary of one shot.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ShotSummary {
    /// Shot id.
    pub shot: String,
    /// Source x, m.
    pub source_x: f64,
    /// Source z, m.
    pub source_z: f64,
    /// Number of picks.
    pub picks: usize,
    /// Offset range, m.
    pub offset_min_m: f64,
    /// Offset range, m.
    pub offset_max_m: f64,
    /// Apparent velocity of the nearest picks on the side of lower x, m/s.
    pub left_near_mps: Option<f64>,
    /// Apparent velocity of the farthest picks on the side of lower x, m/s.
    pub left_far_mps: Option<f64>,
    /// Apparent velocity of the nearest picks on the side of higher x, m/s.
    pub right_near_mps: Option<f64>,
    /// Apparent velocity of the farthest picks on the side of higher x, m/s.
    pub right_far_mps: Option<f64>,
}

/// A pick and its reciprocal.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ReciprocalPair {
    /// File line of the pick A→B.
    pub line_a: u64,
    /// File line of the pick B→A.
    pub line_b: u64,
    /// Shot of the first pick.
    pub shot_a: String,
    /// Shot of the second pick.
    pub shot_b: String,
    /// Time A→B, ms.
    pub time_a_ms: f64,
    /// Time B→A, ms.
    pub time_b_ms: f64,
    /// |A→B − B→A|, ms.
    pub mismatch_ms: f64,
    /// Tolerance that applies to this pair, ms.
    pub tolerance_ms: f64,
}

/// A pick far from its shot's trend.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Outlier {
    /// File line.
    pub line: u64,
    /// Shot id.
    pub shot: String,
    /// Receiver x, m.
    pub receiver_x: f64,
    /// Picked time, ms.
    pub time_ms: f64,
    /// Time expected from the neighbouring picks of the same shot, ms.
    pub expected_ms: f64,
    /// Threshold that was exceeded, ms.
    pub threshold_ms: f64,
}

/// The quality-control report of a survey.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct QcReport {
    /// Number of shots.
    pub shots: usize,
    /// Number of distinct receiver positions.
    pub receivers: usize,
    /// Number of picks.
    pub picks: usize,
    /// Smallest and largest source–receiver distance, m.
    pub offset_range_m: [f64; 2],
    /// Smallest and largest time, ms.
    pub time_range_ms: [f64; 2],
    /// Extent of the stations along the line, m.
    pub x_range_m: [f64; 2],
    /// Smallest and largest station elevation, m.
    pub z_range_m: [f64; 2],
    /// Smallest distance between two neighbouring receivers, m.
    pub min_receiver_spacing_m: f64,
    /// Picks without their own uncertainty.
    pub picks_without_sigma: usize,
    /// Zero-offset picks (receiver at the source): accepted, left out of every
    /// inversion (they carry no information on the velocity).
    pub zero_offset_picks: usize,
    /// Per-shot summaries.
    pub per_shot: Vec<ShotSummary>,
    /// Number of reciprocal pairs found.
    pub reciprocal_pairs: usize,
    /// Mean |mismatch| of reciprocal pairs, ms.
    pub reciprocal_mean_ms: Option<f64>,
    /// Largest |mismatch|, ms.
    pub reciprocal_max_ms: Option<f64>,
    /// Pairs whose mismatch exceeds the tolerance.
    pub reciprocal_beyond_tolerance: Vec<ReciprocalPair>,
    /// Picks far from their shot's trend.
    pub outliers: Vec<Outlier>,
    /// Other warnings (duplicates, ...).
    pub warnings: Vec<String>,
    /// Settings used.
    pub settings: QcSettings,
}

/// Runs the quality control.
pub fn check(survey: &Survey, settings: &QcSettings) -> QcReport {
    let picks = &survey.picks;
    let fold = |f: &dyn Fn(&Pick) -> f64| {
        picks
            .iter()
            .map(f)
            .fold([f64::INFINITY, f64::NEG_INFINITY], |[a, b], v| {
                [a.min(v), b.max(v)]
            })
    };
    let stations = survey.stations();
    let receivers = survey.receivers();
    let (pairs, beyond) = reciprocals(survey, settings);
    let mismatches: Vec<f64> = pairs.iter().map(|p| p.mismatch_ms).collect();
    QcReport {
        shots: survey.shots.len(),
        receivers: receivers.len(),
        picks: picks.len(),
        offset_range_m: fold(&|p| p.offset()),
        time_range_ms: fold(&|p| p.time * 1e3),
        x_range_m: [stations[0].x, stations[stations.len() - 1].x],
        z_range_m: stations
            .iter()
            .fold([f64::INFINITY, f64::NEG_INFINITY], |[a, b], p| {
                [a.min(p.z), b.max(p.z)]
            }),
        min_receiver_spacing_m: survey.min_receiver_spacing().unwrap_or(0.0),
        picks_without_sigma: picks.iter().filter(|p| p.sigma.is_none()).count(),
        zero_offset_picks: picks
            .iter()
            .filter(|p| p.offset() <= SAME_POSITION_M)
            .count(),
        per_shot: survey
            .shots
            .iter()
            .map(|s| shot_summary(survey, s))
            .collect(),
        reciprocal_pairs: pairs.len(),
        reciprocal_mean_ms: (!mismatches.is_empty())
            .then(|| mismatches.iter().sum::<f64>() / mismatches.len() as f64),
        reciprocal_max_ms: mismatches.iter().copied().reduce(f64::max),
        reciprocal_beyond_tolerance: beyond,
        outliers: outliers(survey, settings),
        warnings: survey.warnings.clone(),
        settings: *settings,
    }
}

/// Theil–Sen slope (median of pairwise slopes): robust to a stray pick.
/// Sen (1968), J. Am. Stat. Assoc. 63.
fn theil_sen(pts: &[(f64, f64)]) -> Option<f64> {
    let mut slopes = Vec::new();
    for a in 0..pts.len() {
        for b in a + 1..pts.len() {
            let dx = pts[b].0 - pts[a].0;
            if dx.abs() > 1e-9 {
                slopes.push((pts[b].1 - pts[a].1) / dx);
            }
        }
    }
    crate::stats::median(&mut slopes)
}

/// (|offset|, time) of one side of a shot, sorted by offset, with the pick index.
fn side(survey: &Survey, shot: &crate::survey::Shot, right: bool) -> Vec<(f64, f64, usize)> {
    let mut v: Vec<(f64, f64, usize)> = shot
        .picks
        .iter()
        .map(|&k| (&survey.picks[k], k))
        .filter(|(p, _)| {
            let d = p.signed_offset();
            if right {
                d > SAME_POSITION_M
            } else {
                d < -SAME_POSITION_M
            }
        })
        .map(|(p, k)| (p.offset(), p.time, k))
        .collect();
    v.sort_by(|a, b| a.0.total_cmp(&b.0));
    v
}

/// Apparent velocities of the nearest and the farthest third of one side (at least 3
/// picks each), from robust slopes of time against offset.
fn apparent(pts: &[(f64, f64, usize)]) -> (Option<f64>, Option<f64>) {
    if pts.len() < 3 {
        return (None, None);
    }
    let m = (pts.len() / 3).max(3).min(pts.len());
    let xy: Vec<(f64, f64)> = pts.iter().map(|p| (p.0, p.1)).collect();
    let v = |s: Option<f64>| s.filter(|s| *s > 0.0).map(|s| 1.0 / s);
    let near = v(theil_sen(&xy[..m]));
    let far = if pts.len() >= 6 {
        v(theil_sen(&xy[pts.len() - m..]))
    } else {
        None
    };
    (near, far)
}

fn shot_summary(survey: &Survey, shot: &crate::survey::Shot) -> ShotSummary {
    let offs: Vec<f64> = shot
        .picks
        .iter()
        .map(|&k| survey.picks[k].offset())
        .collect();
    let (ln, lf) = apparent(&side(survey, shot, false));
    let (rn, rf) = apparent(&side(survey, shot, true));
    ShotSummary {
        shot: shot.id.clone(),
        source_x: shot.source.x,
        source_z: shot.source.z,
        picks: shot.picks.len(),
        offset_min_m: offs.iter().copied().fold(f64::INFINITY, f64::min),
        offset_max_m: offs.iter().copied().fold(f64::NEG_INFINITY, f64::max),
        left_near_mps: ln,
        left_far_mps: lf,
        right_near_mps: rn,
        right_far_mps: rf,
    }
}

/// Finds every reciprocal pair once: a pick A→B and one B→A.
fn reciprocals(survey: &Survey, st: &QcSettings) -> (Vec<ReciprocalPair>, Vec<ReciprocalPair>) {
    let picks = &survey.picks;
    let mut all = Vec::new();
    let mut beyond = Vec::new();
    for (a, sa) in survey.shots.iter().enumerate() {
        for sb in survey.shots.iter().skip(a + 1) {
            // A pick of shot a recorded at shot b's source, and the reverse.
            let ab = sa
                .picks
                .iter()
                .find(|&&k| picks[k].receiver.dist(&sb.source) <= st.position_tol_m);
            let ba = sb
                .picks
                .iter()
                .find(|&&k| picks[k].receiver.dist(&sa.source) <= st.position_tol_m);
            if let (Some(&i), Some(&j)) = (ab, ba) {
                let (pa, pb) = (&picks[i], &picks[j]);
                let mis = (pa.time - pb.time).abs();
                let tol = st
                    .reciprocal_abs_s
                    .max(st.reciprocal_rel * pa.time.max(pb.time));
                let pair = ReciprocalPair {
                    line_a: pa.line,
                    line_b: pb.line,
                    shot_a: pa.shot.clone(),
                    shot_b: pb.shot.clone(),
                    time_a_ms: pa.time * 1e3,
                    time_b_ms: pb.time * 1e3,
                    mismatch_ms: mis * 1e3,
                    tolerance_ms: tol * 1e3,
                };
                if mis > tol {
                    beyond.push(pair.clone());
                }
                all.push(pair);
            }
        }
    }
    beyond.sort_by(|a, b| b.mismatch_ms.total_cmp(&a.mismatch_ms));
    (all, beyond)
}

/// Time at `x` predicted from the neighbours of point `k` (excluding it): linear
/// interpolation between the nearest neighbours on each side, or extrapolation from
/// the two nearest on one side at the ends.
fn predict(pts: &[(f64, f64)], k: usize) -> Option<f64> {
    let x = pts[k].0;
    let lo = k.checked_sub(1);
    let hi = (k + 1 < pts.len()).then_some(k + 1);
    let line = |a: (f64, f64), b: (f64, f64)| {
        let dx = b.0 - a.0;
        if dx.abs() < 1e-9 {
            0.5 * (a.1 + b.1)
        } else {
            a.1 + (b.1 - a.1) * (x - a.0) / dx
        }
    };
    match (lo, hi) {
        (Some(l), Some(h)) => Some(line(pts[l], pts[h])),
        (None, Some(h)) if h + 1 < pts.len() => Some(line(pts[h], pts[h + 1])),
        (Some(l), None) if l >= 1 => Some(line(pts[l - 1], pts[l])),
        _ => None,
    }
}

/// Outliers against a robust per-shot, per-side fit of time against offset: each pick
/// is compared with the trend of its neighbours (less its receiver's common delay);
/// the worst beyond the threshold is removed and the rest tested again, so one wild
/// pick does not mask or accuse its neighbours.
fn outliers(survey: &Survey, st: &QcSettings) -> Vec<Outlier> {
    // One side of every shot with its leave-one-out residuals.
    let sides: Vec<Vec<(f64, f64, usize)>> = survey
        .shots
        .iter()
        .flat_map(|shot| {
            [false, true].map(|right| {
                let mut pts = side(survey, shot, right);
                // Picks at the source itself belong to both sides' trend.
                if let Some(&k0) = shot
                    .picks
                    .iter()
                    .find(|&&k| survey.picks[k].offset() <= SAME_POSITION_M)
                {
                    pts.insert(0, (0.0, survey.picks[k0].time, usize::MAX));
                }
                pts
            })
        })
        .collect();
    // Receiver terms: a slow pocket under a geophone delays every shot recorded there,
    // a bad pick only one. The median residual of a receiver over all its shots is
    // taken off before testing, so geology common to all shots is not called an outlier.
    let key = |x: f64| (x * 100.0).round() as i64;
    let mut per_rec: std::collections::HashMap<i64, Vec<f64>> = std::collections::HashMap::new();
    for pts in &sides {
        let xy: Vec<(f64, f64)> = pts.iter().map(|p| (p.0, p.1)).collect();
        for k in 1..xy.len().saturating_sub(1) {
            if pts[k].2 != usize::MAX {
                if let Some(e) = predict(&xy, k) {
                    let rx = survey.picks[pts[k].2].receiver.x;
                    per_rec.entry(key(rx)).or_default().push(xy[k].1 - e);
                }
            }
        }
    }
    let term: std::collections::HashMap<i64, f64> = per_rec
        .into_iter()
        .filter(|(_, v)| v.len() >= 3)
        .map(|(k, mut v)| (k, crate::stats::median(&mut v).unwrap_or(0.0)))
        .collect();
    let mut out = Vec::new();
    for mut pts in sides {
        loop {
            if pts.len() < 4 {
                break;
            }
            let xy: Vec<(f64, f64)> = pts.iter().map(|p| (p.0, p.1)).collect();
            let res: Vec<(usize, f64, f64)> = (0..xy.len())
                .filter(|&k| pts[k].2 != usize::MAX)
                .filter_map(|k| {
                    let rx = survey.picks[pts[k].2].receiver.x;
                    let t = term.get(&key(rx)).copied().unwrap_or(0.0);
                    predict(&xy, k).map(|e| (k, xy[k].1 - e - t, e + t))
                })
                .collect();
            let mut abs: Vec<f64> = res.iter().map(|r| r.1.abs()).collect();
            let mad = crate::stats::median(&mut abs).unwrap_or(0.0);
            let thr = st.outlier_floor_s.max(st.outlier_sigmas * 1.4826 * mad);
            // the two ends are extrapolated across a possible crossover kink: twice the threshold
            let limit = |k: usize| {
                if k == 0 || k + 1 == pts.len() {
                    2.0 * thr
                } else {
                    thr
                }
            };
            let worst = res
                .iter()
                .filter(|r| r.1.abs() > limit(r.0))
                .max_by(|a, b| (a.1.abs() / limit(a.0)).total_cmp(&(b.1.abs() / limit(b.0))));
            match worst {
                Some(&(k, _, e)) => {
                    let p = &survey.picks[pts[k].2];
                    out.push(Outlier {
                        line: p.line,
                        shot: p.shot.clone(),
                        receiver_x: p.receiver.x,
                        time_ms: p.time * 1e3,
                        expected_ms: e * 1e3,
                        threshold_ms: limit(k) * 1e3,
                    });
                    pts.remove(k);
                }
                None => break,
            }
        }
    }
    out.sort_by_key(|o| o.line);
    out
}

impl QcReport {
    /// True when something deserves the surveyor's attention.
    pub fn has_findings(&self) -> bool {
        !self.reciprocal_beyond_tolerance.is_empty()
            || !self.outliers.is_empty()
            || !self.warnings.is_empty()
    }

    /// The report as text for a terminal.
    pub fn to_text(&self, file: &str) -> String {
        use std::fmt::Write;
        let mut s = String::new();
        let opt = |v: Option<f64>| v.map_or("     -".to_string(), |v| format!("{v:6.0}"));
        let _ = writeln!(s, "Picks file   {file}");
        let _ = writeln!(
            s,
            "Geometry     {} shots, {} receivers, {} picks ({} without sigma)",
            self.shots, self.receivers, self.picks, self.picks_without_sigma
        );
        let _ = writeln!(
            s,
            "Line         x {:.2} to {:.2} m, elevation {:.2} to {:.2} m, receiver spacing from {:.2} m",
            self.x_range_m[0], self.x_range_m[1], self.z_range_m[0], self.z_range_m[1], self.min_receiver_spacing_m
        );
        let _ = writeln!(
            s,
            "Offsets      {:.2} to {:.2} m;  times {:.2} to {:.2} ms",
            self.offset_range_m[0],
            self.offset_range_m[1],
            self.time_range_ms[0],
            self.time_range_ms[1]
        );
        if self.zero_offset_picks > 0 {
            let _ = writeln!(
                s,
                "Zero offset  {} picks with the receiver at the source: accepted, and left out of every inversion (no information on the velocity)",
                self.zero_offset_picks
            );
        }
        let _ = writeln!(s);
        let _ = writeln!(s, "Apparent velocities (m/s), robust slopes of the nearest and farthest third of each side:");
        let _ = writeln!(
            s,
            "  shot          source x   picks   lower-x near    far   higher-x near    far"
        );
        for p in &self.per_shot {
            let _ = writeln!(
                s,
                "  {:<12} {:>9.2} {:>7}         {}  {}          {}  {}",
                p.shot,
                p.source_x,
                p.picks,
                opt(p.left_near_mps),
                opt(p.left_far_mps),
                opt(p.right_near_mps),
                opt(p.right_far_mps)
            );
        }
        let _ = writeln!(s);
        match (self.reciprocal_mean_ms, self.reciprocal_max_ms) {
            (Some(mean), Some(max)) => {
                let _ = writeln!(
                    s,
                    "Reciprocal pairs  {} found; mismatch mean {:.2} ms, largest {:.2} ms; {} beyond tolerance (larger of {:.1} ms and {:.0} % of the time)",
                    self.reciprocal_pairs,
                    mean,
                    max,
                    self.reciprocal_beyond_tolerance.len(),
                    self.settings.reciprocal_abs_s * 1e3,
                    self.settings.reciprocal_rel * 100.0
                );
                for p in &self.reciprocal_beyond_tolerance {
                    let _ = writeln!(
                        s,
                        "  lines {} and {}: shot {} {:.2} ms vs shot {} {:.2} ms, mismatch {:.2} ms > {:.2} ms",
                        p.line_a, p.line_b, p.shot_a, p.time_a_ms, p.shot_b, p.time_b_ms, p.mismatch_ms, p.tolerance_ms
                    );
                }
            }
            _ => {
                let _ = writeln!(
                    s,
                    "Reciprocal pairs  none found (no shot was recorded at another shot's position within {:.2} m)",
                    self.settings.position_tol_m
                );
            }
        }
        if self.outliers.is_empty() {
            let _ = writeln!(s, "Outliers     none");
        } else {
            let _ = writeln!(
                s,
                "Outliers     {} picks far from their shot's trend:",
                self.outliers.len()
            );
            for o in &self.outliers {
                let _ = writeln!(
                    s,
                    "  line {}: shot {} at x={:.2} m: {:.2} ms, neighbours suggest {:.2} ms (threshold {:.2} ms)",
                    o.line, o.shot, o.receiver_x, o.time_ms, o.expected_ms, o.threshold_ms
                );
            }
        }
        if !self.warnings.is_empty() {
            let _ = writeln!(s, "Warnings:");
            for w in &self.warnings {
                let _ = writeln!(s, "  {w}");
            }
        }
        let _ = writeln!(
            s,
            "\nVerdict      usable{}",
            if self.has_findings() {
                "; review the findings above before inverting"
            } else {
                ""
            }
        );
        s
    }
}
