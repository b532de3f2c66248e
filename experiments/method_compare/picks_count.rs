//! Experiment 1 of the method comparison (issue 11 §4): accuracy against the number of
//! picks.
//!
//! One synthetic site with a refractor and lateral change (`common::Site`: a 120 m
//! line, 2 m receivers, a rock head undulating 5 ± 1.5 m deep with a trough 4 m deeper
//! at x = 84 m (10.4 m there), soil 15 % slower west of x = 40 m). The picks of every shot at
//! every other receiver (4 m) and off both ends to every receiver are made once
//! (fast marching on 0.125 m, σ = 0.5 ms, seed 7); each data level keeps a subset of
//! them (every receiver / every 2nd / every 4th; shots every 4, 8, 16 or 32 m, the
//! two off-end shots always), so that the levels share their noise. Every method of
//! `compare` inverts every level with the product's defaults, except that the model
//! space does not change with the data: grid tomography's cell is held at 1 m
//! (`grid.cell_m`; by default half the receiver spacing) and the refinement's detail
//! wavelength at 8 m (`refine.detail_wavelength_m`; by default 4 × the receiver
//! spacing), their full-spread defaults, and the model depth and the velocity bounds
//! the densest level derives are given to every level (`depth_m`, `v_min`, `v_max`;
//! by default derived from each level's picks), so that every level has the same grid.
//!
//! One `compare` per level judges the models: its median |v error| is taken over that
//! level's mask (the nodes reached by the rays of every model and of the truth), which
//! shrinks with the data. The same statistic over the zone common to every level's
//! mask (`common_median_pct`, `common_p90_pct`) holds the place fixed.
//!
//! Run: `cargo run --release --example picks_count` (`--quick` or `QUICK=1`: three
//! levels, a 200-step PINN, results under
//! `target/method_compare_quick/`; `METHODS=a,b`
//! runs only those methods; `--replot` redraws the figures from `results.csv`). Writes `experiments/results/picks_count/`: `results.csv`
//! (one row per level and method, the truth's row too), `accuracy_vs_picks.png|svg`,
//! `site.png|svg`.

#[path = "common.rs"]
mod common;

use common::{fmt_opt, Panel, Series, Site};
use slowfield::compare::{self, Contender};
use slowfield::inversion::Problem;

/// A data level: its name, receiver spacing (m) and shot spacing (m).
const LEVELS: [(&str, f64, f64); 6] = [
    ("r2-s4", 2.0, 4.0),
    ("r2-s8", 2.0, 8.0),
    ("r4-s8", 4.0, 8.0),
    ("r8-s8", 8.0, 8.0),
    ("r8-s16", 8.0, 16.0),
    ("r8-s32", 8.0, 32.0),
];

/// One level's judged models (name, model on the comparison grid).
type Judged = Vec<(String, slowfield::model::VelocityGrid)>;

const HEADER: [&str; 18] = [
    "level",
    "receiver_spacing_m",
    "shot_spacing_m",
    "shots",
    "receivers",
    "picks",
    "method",
    "rms_ms",
    "chi2",
    "runtime_s",
    "model_rel_error_pct",
    "p90_rel_error_pct",
    "iso_depth_error_m",
    "ray_coverage_pct",
    "mask_pct",
    "steps",
    "common_median_pct",
    "common_p90_pct",
];

fn main() -> anyhow::Result<()> {
    let out = common::results_dir("picks_count")?;
    let methods = common::methods()?;
    // every pick any level uses, made once
    let full_geometry = common::geometry(&Site::shots(), &Site::receivers(), Site::ground);
    let truth = common::true_grid(&full_geometry, common::DATA_CELL, Site::velocity);
    let all = common::synthetic(&full_geometry, &truth);
    site_figure(&out.join("site"), &all, &truth)?;
    if common::replot() {
        let rows = common::read_csv(&out.join("results.csv"))?;
        return plot(&out, &rows, &methods);
    }
    let mut base = common::base_settings();
    base.grid.cell_m = Some(1.0);
    base.refine.detail_wavelength_m = Some(8.0);
    let levels: Vec<_> = if common::quick() {
        vec![LEVELS[1], LEVELS[3], LEVELS[5]]
    } else {
        LEVELS.to_vec()
    };
    let t0 = std::time::Instant::now();
    let mut rows: Vec<Vec<String>> = Vec::new();
    // per level: the judged models (name, model) and the mask, for the common zone
    let mut kept: Vec<(Judged, Vec<bool>)> = Vec::new();
    let mut grid = None;
    let mut truth_on_grid = None;
    for (name, rs, ss) in levels {
        let survey = Site::level(&all, rs, ss);
        let receivers = survey.receivers().len();
        eprintln!(
            "== {name}: receivers every {rs} m ({receivers}), shots every {ss} m ({} shots), {} picks",
            survey.shots.len(),
            survey.picks.len()
        );
        if base.depth_m.is_none() {
            base.depth_m = Some(Problem::new(survey.clone(), &base).depth_m);
        }
        let ran = common::run_methods(&survey, &base, &methods, name)?;
        if base.v_min.is_none() {
            base.v_min = ran[0].resolved.v_min;
            base.v_max = ran[0].resolved.v_max;
            eprintln!(
                "   given to every level: depth_m {:?}, v_min {:?}, v_max {:?}",
                base.depth_m, base.v_min, base.v_max
            );
        }
        let entries: Vec<_> = ran.iter().map(|r| r.entry()).collect();
        let problem = Problem::new(survey.clone(), &Contender::Pinn.settings(&base));
        if *grid.get_or_insert(problem.grid) != problem.grid {
            anyhow::bail!("{name}: the grid differs from the first level's");
        }
        let c = compare::compare(&problem, &entries, Some(&truth), base.interface_mps)?;
        eprint!("{}", compare::table_text(&c));
        eprintln!("   (mask: {:.0} % of the ground nodes)", c.mask_pct);
        for r in &c.rows {
            let steps = ran
                .iter()
                .find(|x| x.name == r.method)
                .map_or(String::new(), |x| x.steps.to_string());
            rows.push(vec![
                name.to_string(),
                format!("{rs}"),
                format!("{ss}"),
                survey.shots.len().to_string(),
                receivers.to_string(),
                r.picks.to_string(),
                r.method.clone(),
                format!("{:.4}", r.rms_ms),
                format!("{:.4}", r.chi2),
                fmt_opt(r.runtime_s, 2),
                fmt_opt(r.model_rel_error, 3),
                fmt_opt(r.p90_rel_error, 3),
                fmt_opt(r.iso_depth_error_m, 3),
                format!("{:.2}", r.ray_coverage_pct),
                format!("{:.2}", c.mask_pct),
                steps,
                String::new(),
                String::new(),
            ]);
        }
        let t = c.truth.as_ref().expect("truth judged");
        truth_on_grid.get_or_insert_with(|| t.model.clone());
        kept.push((
            std::iter::once(t)
                .chain(&c.judged)
                .map(|j| (j.name.clone(), j.model.clone()))
                .collect(),
            c.mask.clone(),
        ));
        // written after every level, so that a failed run leaves what it did
        common::write_csv(&out.join("results.csv"), &HEADER, &rows)?;
    }
    // the zone every level's mask holds
    let n = kept[0].1.len();
    let zone: Vec<bool> = (0..n).map(|k| kept.iter().all(|(_, m)| m[k])).collect();
    let ground = kept[0].0[0].1.v.iter().filter(|v| !v.is_nan()).count();
    let zone_n = zone.iter().filter(|&&z| z).count();
    eprintln!(
        "common zone: {zone_n} nodes, {:.1} % of the ground nodes",
        100.0 * zone_n as f64 / ground as f64
    );
    let t = truth_on_grid.expect("a level ran");
    let surface = &all.surface;
    let mut k = 0;
    for (models, _) in &kept {
        for (name, m) in models {
            let e = compare::against_truth(m, &t, &zone, surface, base.interface_mps);
            let row = &mut rows[k];
            assert_eq!(&row[col("method")], name);
            row[col("common_median_pct")] = fmt_opt(Some(e.median_pct), 3);
            row[col("common_p90_pct")] = fmt_opt(Some(e.p90_pct), 3);
            k += 1;
        }
    }
    common::write_csv(&out.join("results.csv"), &HEADER, &rows)?;
    std::fs::write(
        out.join("common_zone.txt"),
        format!(
            "nodes of the zone common to every level's mask: {zone_n} of {ground} ground nodes ({:.1} %)\n",
            100.0 * zone_n as f64 / ground as f64
        ),
    )?;
    eprintln!("all levels: {:.0} s", t0.elapsed().as_secs_f64());
    plot(&out, &rows, &methods)?;
    eprintln!("wrote {}", out.display());
    Ok(())
}

fn col(name: &str) -> usize {
    HEADER.iter().position(|h| *h == name).unwrap()
}

/// Accuracy against the number of picks: one line per method.
fn plot(out: &std::path::Path, rows: &[Vec<String>], methods: &[Contender]) -> anyhow::Result<()> {
    let series = |column: &str| -> Vec<Series> {
        methods
            .iter()
            .map(|m| {
                let pts = rows
                    .iter()
                    .filter(|r| r[col("method")] == m.name())
                    .map(|r| {
                        (
                            r[col("picks")].parse::<f64>().unwrap_or(f64::NAN),
                            r[col(column)].parse::<f64>().unwrap_or(f64::NAN),
                        )
                    })
                    .collect();
                Series::method(&m.name(), pts)
            })
            .collect()
    };
    let truth_chi2: Vec<(f64, f64)> = rows
        .iter()
        .filter(|r| r[col("method")] == "truth")
        .map(|r| {
            (
                r[col("picks")].parse().unwrap_or(f64::NAN),
                r[col("chi2")].parse().unwrap_or(f64::NAN),
            )
        })
        .collect();
    let mut chi2 = series("chi2");
    chi2.push(Series {
        name: "true model".into(),
        points: truth_chi2,
        color: plotters::style::RGBColor(60, 60, 60),
        marker: common::Marker::Circle,
    });
    let pct = |title: &str, y: &str, column: &str| Panel {
        title: title.into(),
        x_label: "picks".into(),
        y_label: y.into(),
        log_x: true,
        log_y: false,
        series: series(column),
        reference: None,
    };
    let panels = [
        pct(
            "Median |v error|, each level's ray mask",
            "median |v − v_true| / v_true, %",
            "model_rel_error_pct",
        ),
        pct(
            "Median |v error|, zone common to all levels",
            "median |v − v_true| / v_true, %",
            "common_median_pct",
        ),
        Panel {
            title: "Judge χ² (fast marching, half cell)".into(),
            x_label: "picks".into(),
            y_label: "reduced χ²".into(),
            log_x: true,
            log_y: true,
            series: chi2,
            reference: Some((1.0, "χ² = 1".into())),
        },
        pct(
            "90th percentile |v error|, each level's mask",
            "p90 |v − v_true| / v_true, %",
            "p90_rel_error_pct",
        ),
        pct(
            "90th percentile |v error|, common zone",
            "p90 |v − v_true| / v_true, %",
            "common_p90_pct",
        ),
        pct(
            "Depth error of the 1500 m/s level",
            "mean |depth error|, m",
            "iso_depth_error_m",
        ),
    ];
    common::line_figure(
        &out.join("accuracy_vs_picks"),
        "Accuracy against the number of picks (refractor site, σ = 0.5 ms, every method)",
        &panels,
        3,
        (580, 440),
    )
}

/// The true model with the full geometry's stations.
fn site_figure(
    stem: &std::path::Path,
    survey: &slowfield::survey::Survey,
    truth: &slowfield::model::VelocityGrid,
) -> anyhow::Result<()> {
    use plotters::prelude::*;
    use plotters::style::colors::colormaps::ViridisRGB;
    common::font();
    // the truth on a 0.25 m grid is plenty for a picture
    let spec = slowfield::model::GridSpec::covering(
        truth.spec.x0,
        truth.spec.x_max(),
        truth.spec.z0,
        truth.spec.z_max(),
        0.25,
    );
    let t = truth.resample(spec, Some(&survey.surface));
    let (lo, hi) = (300.0, 3000.0);
    let color =
        move |v: f64| ViridisRGB.get_color_normalized(v.clamp(lo, hi) as f32, lo as f32, hi as f32);
    let top = survey.surface.highest();
    let size = (1100, 420);
    let draw = |root: DrawingArea<_, plotters::coord::Shift>| -> anyhow::Result<()> {
        let e = |e: DrawingAreaErrorKind<_>| anyhow::anyhow!("{e:?}");
        root.fill(&WHITE).map_err(e)?;
        let (main, bar) = root.split_vertically(350);
        let section = common::Section {
            spec,
            value: &t.v,
            pale: None,
            color: &color,
            title: "Refractor site: true velocity (σ = 0.5 ms picks; ▲ shots every 4 m, · receivers every 2 m)".into(),
            z_range: (top - 22.0, top + 0.5),
            x_range: (-8.0, 128.0),
            axis_labels: true,
        };
        let mut chart = common::draw_section(&main, &section).map_err(e)?;
        let receivers = survey.receivers();
        chart
            .draw_series(
                receivers
                    .iter()
                    .map(|p| Circle::new((p.x, p.z), 2, BLACK.filled())),
            )
            .map_err(e)?;
        chart
            .draw_series(survey.shots.iter().map(|s| {
                TriangleMarker::new(
                    (s.source.x, s.source.z + 0.6),
                    5,
                    RGBColor(200, 20, 30).filled(),
                )
            }))
            .map_err(e)?;
        common::color_bar(&bar, lo, hi, "velocity, m/s", &color).map_err(e)?;
        Ok(())
    };
    let png = stem.with_extension("png");
    draw(BitMapBackend::new(&png, size).into_drawing_area())?;
    Ok(())
}
