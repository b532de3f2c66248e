//! The comparison's figures: every model side by side on one colour scale with its
//! difference from the reference, and the travel-time fits of every model on one plot.

use std::path::Path;

use plotters::coord::Shift;
use plotters::prelude::*;

use super::{colour, colour_bar, render, shot_colour, tick, DrawResult, FigureError};
use crate::model::GridSpec;
use crate::survey::{Point, Surface};

/// One model panel: its title and node values (velocity, m/s), air `NaN`.
#[derive(Debug, Clone)]
pub struct ModelPanel<'a> {
    /// Title over the panel.
    pub title: String,
    /// Velocity per node of the figure's grid.
    pub v: &'a [f64],
    /// Difference from the reference per node, %, when the panel has one.
    pub diff: Option<Vec<f64>>,
}

/// What the side-by-side figure shows.
#[derive(Debug, Clone)]
pub struct SideBySide<'a> {
    /// Figure title.
    pub title: String,
    /// The grid every panel is on.
    pub spec: GridSpec,
    /// The panels, one row each: velocity left, difference right.
    pub panels: Vec<ModelPanel<'a>>,
    /// What the differences are taken from ("the truth", "pinn").
    pub reference: String,
    /// Nodes the statistics are taken over; the rest is washed grey and hatched in every
    /// panel.
    pub mask: &'a [bool],
    /// Ground surface.
    pub surface: &'a Surface,
    /// Receiver positions.
    pub receivers: &'a [Point],
    /// Source positions.
    pub sources: &'a [Point],
}

/// Blue–white–red for differences (negative: slower than the reference, blue).
fn diverging(d: f64, lim: f64) -> RGBColor {
    let t = (d / lim).clamp(-1.0, 1.0);
    let (r, g, b) = if t < 0.0 {
        let a = -t;
        (
            255.0 - a * (255.0 - 33.0),
            255.0 - a * (255.0 - 102.0),
            255.0 - a * (255.0 - 172.0),
        )
    } else {
        (
            255.0 - t * (255.0 - 178.0),
            255.0 - t * (255.0 - 24.0),
            255.0 - t * (255.0 - 43.0),
        )
    };
    RGBColor(r as u8, g as u8, b as u8)
}

/// A colour washed towards grey: outside the mask.
fn washed(c: RGBColor) -> RGBColor {
    let f = |x: u8| ((x as u16 + 2 * 205) / 3) as u8;
    RGBColor(f(c.0), f(c.1), f(c.2))
}

/// Width of the figure and of the colour-bar strip, px.
const WIDTH: u32 = 1500;
const BAR_W: u32 = 170;

/// Vertical exaggeration and plot height for a panel `plot_w` px wide.
fn panel_geometry(spec: &GridSpec, surface: &Surface, plot_w: f64) -> (f64, f64, (f64, f64)) {
    let zhi = surface
        .nodes
        .iter()
        .map(|p| p.z)
        .fold(spec.z_max(), f64::max)
        + 0.5;
    let aspect = (zhi - spec.z0) / (spec.x_max() - spec.x0).max(1e-9);
    let ve = [1.0, 2.0, 3.0, 5.0]
        .into_iter()
        .find(|ve| plot_w * aspect * ve >= 120.0)
        .unwrap_or(5.0);
    (
        (plot_w * aspect * ve).clamp(110.0, 420.0),
        ve,
        (spec.z0, zhi),
    )
}

/// Draws every model side by side: velocity on one scale on the left, the difference
/// from the reference on one symmetric scale on the right, the same grey wash and hatching outside
/// the common mask in every panel. The difference scale spans the 95th percentile of
/// |difference| over the mask (at least ±5 %), so one outlier node does not flatten
/// the rest.
pub fn side_by_side(stem: &Path, f: &SideBySide) -> Result<(), FigureError> {
    let s = f.spec;
    let rows = f.panels.len().max(1);
    let panel_w = (WIDTH - BAR_W) / 2;
    let (plot_h, ve, zr) = panel_geometry(&s, f.surface, panel_w as f64 - 90.0);
    let row_h = plot_h as u32 + 90;
    let height = 60 + rows as u32 * row_h + 40;
    // one velocity range: that of the masked ground of every panel (the ground outside
    // the mask, where a model is whatever its regulariser made it, is clamped to it)
    let (mut vlo, mut vhi) = (f64::INFINITY, f64::NEG_INFINITY);
    for p in &f.panels {
        for (k, &v) in p.v.iter().enumerate() {
            if f.mask[k] && !v.is_nan() {
                vlo = vlo.min(v);
                vhi = vhi.max(v);
            }
        }
    }
    if !vlo.is_finite() {
        (vlo, vhi) = (0.0, 1.0);
    }
    if vhi - vlo < 1.0 {
        (vlo, vhi) = (vlo - 1.0, vhi + 1.0);
    }
    let mut absd: Vec<f64> = f
        .panels
        .iter()
        .filter_map(|p| p.diff.as_ref())
        .flat_map(|d| {
            d.iter()
                .enumerate()
                .filter(|(k, _)| f.mask[*k])
                .map(|(_, x)| x.abs())
        })
        .filter(|x| x.is_finite())
        .collect();
    let dlim = crate::stats::quantile(&mut absd, 0.95)
        .unwrap_or(5.0)
        .max(5.0);
    let dlim = (dlim / super::nice_step(dlim, 4.0)).ceil() * super::nice_step(dlim, 4.0);
    let title = format!("{}  (vertical exaggeration {ve}×)", f.title);
    figure!(stem, (WIDTH, height), |root| {
        side_by_side_body(&root, f, (vlo, vhi), dlim, zr, row_h, &title)
    })
}

fn side_by_side_body<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    f: &SideBySide,
    (vlo, vhi): (f64, f64),
    dlim: f64,
    zr: (f64, f64),
    row_h: u32,
    title: &str,
) -> DrawResult
where
    DB::ErrorType: 'static,
{
    let s = f.spec;
    root.fill(&WHITE)?;
    let (w, h) = root.dim_in_pixel();
    let (main, bar) = root.split_horizontally(w - BAR_W);
    let (head, rest) = main.split_vertically(60);
    head.draw(&Text::new(
        title.to_string(),
        (20, 18),
        ("sans-serif", 22).into_font(),
    ))?;
    let (grid_area, foot) = rest.split_vertically(h - 60 - 40);
    foot.draw(&Text::new(
        format!(
            "hatched: ground that not every model's rays reach (left out of every statistic); ▲ receivers  ● shots; right: (model − {r}) / {r}, %",
            r = f.reference
        ),
        (20, 10),
        ("sans-serif", 14).into_font(),
    ))?;
    let rows = grid_area.split_evenly((f.panels.len().max(1), 2));
    let xr = (s.x0, s.x_max());
    for (r, p) in f.panels.iter().enumerate() {
        for col in 0..2 {
            let area = &rows[2 * r + col];
            let values: Option<&[f64]> = if col == 0 {
                Some(p.v)
            } else {
                p.diff.as_deref()
            };
            let Some(values) = values else {
                if r == 0 {
                    area.draw(&Text::new(
                        format!("{}: the reference of the differences", p.title),
                        (40, (row_h / 2) as i32),
                        ("sans-serif", 15).into_font().color(&RGBColor(90, 90, 90)),
                    ))?;
                }
                continue;
            };
            let caption = if col == 0 {
                p.title.clone()
            } else {
                format!("{} − {}", p.title, f.reference)
            };
            let mut ch = ChartBuilder::on(area)
                .caption(caption, ("sans-serif", 16))
                .margin(6)
                .x_label_area_size(38)
                .y_label_area_size(58)
                .build_cartesian_2d(xr.0..xr.1, zr.0..zr.1)?;
            ch.configure_mesh()
                .disable_mesh()
                .x_label_formatter(&tick)
                .y_label_formatter(&tick)
                .x_labels(6)
                .y_labels(4)
                .x_desc("distance along the line (m)")
                .y_desc("elevation (m)")
                .label_style(("sans-serif", 12))
                .axis_desc_style(("sans-serif", 12))
                .draw()?;
            let (hx, hz) = (0.5 * s.dx, 0.5 * s.dz);
            ch.draw_series(
                (0..s.nz)
                    .flat_map(|j| (0..s.nx).map(move |i| (i, j)))
                    .filter_map(|(i, j)| {
                        let k = s.idx(i, j);
                        let v = values[k];
                        if v.is_nan() || p.v[k].is_nan() {
                            return None;
                        }
                        let mut c = if col == 0 {
                            colour(v, vlo, vhi)
                        } else {
                            diverging(v, dlim)
                        };
                        if !f.mask[k] {
                            c = washed(c);
                        }
                        let (x, z) = (s.x(i), s.z(j));
                        Some(Rectangle::new(
                            [
                                ((x - hx).max(xr.0), (z - hz).max(zr.0)),
                                ((x + hx).min(xr.1), (z + hz).min(zr.1)),
                            ],
                            c.filled(),
                        ))
                    }),
            )?;
            // the ground outside the common mask is hatched as in every section
            super::hatch_nodes(&ch, &s, |k| !f.mask[k] && !p.v[k].is_nan())?;
            let n = 300;
            ch.draw_series(std::iter::once(PathElement::new(
                (0..=n)
                    .map(|k| {
                        let x = xr.0 + (xr.1 - xr.0) * k as f64 / n as f64;
                        (x, f.surface.elevation(x))
                    })
                    .collect::<Vec<_>>(),
                BLACK.stroke_width(1),
            )))?;
            ch.draw_series(
                f.receivers
                    .iter()
                    .map(|q| TriangleMarker::new((q.x, q.z), 3, RGBColor(30, 30, 30).filled())),
            )?;
            ch.draw_series(
                f.sources
                    .iter()
                    .map(|q| Circle::new((q.x, q.z), 3, RGBColor(220, 40, 40).filled())),
            )?;
        }
    }
    // two colour bars: velocity over difference
    let (top, bottom) = bar.split_vertically(h / 2);
    for (area, lo, hi, label, is_v) in [
        (&top, vlo, vhi, "velocity (m/s)", true),
        (&bottom, -dlim, dlim, "difference (%)", false),
    ] {
        let mut cb = colour_bar(area, lo..hi)?;
        let n = 100;
        cb.draw_series((0..n).map(|k| {
            let a = lo + (hi - lo) * k as f64 / n as f64;
            let b = lo + (hi - lo) * (k + 1) as f64 / n as f64;
            let m = 0.5 * (a + b);
            let c = if is_v {
                colour(m, vlo, vhi)
            } else {
                diverging(m, dlim)
            };
            Rectangle::new([(0.0, a), (1.0, b)], c.filled())
        }))?;
        cb.configure_mesh()
            .disable_mesh()
            .disable_x_axis()
            .y_desc(label)
            .y_label_formatter(&tick)
            .label_style(("sans-serif", 13))
            .axis_desc_style(("sans-serif", 14))
            .draw()?;
    }
    root.present()?;
    Ok(())
}

/// One model's predicted times for the fit figure.
#[derive(Debug, Clone)]
pub struct FitSeries {
    /// The model's name.
    pub name: String,
    /// Predicted time of every pick, ms.
    pub predicted_ms: Vec<f64>,
}

/// The picks for the fit figure.
#[derive(Debug, Clone)]
pub struct FitPicks<'a> {
    /// Receiver x of every pick, m.
    pub receiver_x: &'a [f64],
    /// Observed time of every pick, ms.
    pub observed_ms: &'a [f64],
    /// Shot index of every pick.
    pub shot: &'a [usize],
    /// Source x of every shot, m.
    pub source_x: &'a [f64],
    /// Typical σ of the picks, ms (the ±σ lines of the residual panel).
    pub sigma_ms: f64,
}

/// Observed picks (grey dots) with every model's predicted travel-time curves (one
/// colour per model, a line per shot and side), and beneath it every model's
/// residuals, observed − predicted, against the receiver position, each model's dots
/// shifted a little along the line so that they do not hide one another.
pub fn fits_overlay(
    stem: &Path,
    title: &str,
    picks: &FitPicks,
    series: &[FitSeries],
) -> Result<(), FigureError> {
    let (w, h) = (1400u32, 1000u32);
    let xs = picks.receiver_x.iter().chain(picks.source_x.iter());
    let (xlo, xhi) = xs.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| {
        (a.min(x), b.max(x))
    });
    let (xlo, xhi) = if xlo.is_finite() {
        (xlo, xhi)
    } else {
        (0.0, 1.0)
    };
    let pad = 0.02 * (xhi - xlo).max(1.0);
    let tmax = picks
        .observed_ms
        .iter()
        .chain(series.iter().flat_map(|s| s.predicted_ms.iter()))
        .fold(1.0f64, |a, &b| if b.is_finite() { a.max(b) } else { a });
    let mut res: Vec<f64> = series
        .iter()
        .flat_map(|s| {
            s.predicted_ms
                .iter()
                .zip(picks.observed_ms)
                .map(|(p, o)| (o - p).abs())
        })
        .filter(|r| r.is_finite())
        .collect();
    // the residual axis spans the 99th percentile (a wild pick does not squash the rest)
    let rlim = crate::stats::quantile(&mut res, 0.99)
        .unwrap_or(1.0)
        .max(3.0 * picks.sigma_ms)
        .max(0.5)
        * 1.15;
    let spacing = {
        let mut x: Vec<f64> = picks.receiver_x.to_vec();
        x.sort_by(f64::total_cmp);
        x.dedup_by(|a, b| (*a - *b).abs() < 1e-6);
        let mut gaps: Vec<f64> = x.windows(2).map(|p| p[1] - p[0]).collect();
        crate::stats::median(&mut gaps).unwrap_or(1.0)
    };
    figure!(stem, (w, h), |root| {
        fits_body(
            &root,
            title,
            picks,
            series,
            (xlo - pad, xhi + pad),
            tmax,
            rlim,
            spacing,
        )
    })
}

#[allow(clippy::too_many_arguments)]
fn fits_body<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    title: &str,
    picks: &FitPicks,
    series: &[FitSeries],
    (x0, x1): (f64, f64),
    tmax: f64,
    rlim: f64,
    spacing: f64,
) -> DrawResult
where
    DB::ErrorType: 'static,
{
    root.fill(&WHITE)?;
    let (legend, rest) = root.split_vertically(70);
    let (top, rest) = rest.split_vertically(560);
    let (_, h) = rest.dim_in_pixel();
    let (bottom, foot) = rest.split_vertically(h - 28);
    legend.draw(&Text::new(
        title.to_string(),
        (80, 10),
        ("sans-serif", 22).into_font(),
    ))?;
    legend.draw(&Circle::new((90, 52), 3, RGBColor(120, 120, 120).filled()))?;
    legend.draw(&Text::new(
        "picks",
        (100, 44),
        ("sans-serif", 15).into_font(),
    ))?;
    let mut at = 170;
    for (m, s) in series.iter().enumerate() {
        let col = shot_colour(m);
        legend.draw(&PathElement::new(
            vec![(at, 52), (at + 24, 52)],
            col.stroke_width(3),
        ))?;
        legend.draw(&Text::new(
            s.name.clone(),
            (at + 30, 44),
            ("sans-serif", 15).into_font(),
        ))?;
        at += 50 + 9 * s.name.chars().count() as i32;
    }
    let mut ch = ChartBuilder::on(&top)
        .margin(12)
        .x_label_area_size(35)
        .y_label_area_size(65)
        .build_cartesian_2d(x0..x1, 0.0..tmax * 1.05)?;
    ch.configure_mesh()
        .light_line_style(RGBColor(235, 235, 235))
        .y_desc("first-arrival time (ms)")
        .x_label_formatter(&tick)
        .y_label_formatter(&tick)
        .label_style(("sans-serif", 15))
        .axis_desc_style(("sans-serif", 16))
        .draw()?;
    ch.draw_series(
        picks
            .receiver_x
            .iter()
            .zip(picks.observed_ms)
            .map(|(&x, &t)| Circle::new((x, t), 2, RGBColor(120, 120, 120).filled())),
    )?;
    let n_shots = picks.source_x.len();
    for (m, s) in series.iter().enumerate() {
        let col = shot_colour(m);
        for shot in 0..n_shots {
            let sx = picks.source_x[shot];
            for left in [true, false] {
                let mut pts: Vec<(f64, f64)> = (0..picks.shot.len())
                    .filter(|&k| picks.shot[k] == shot && (picks.receiver_x[k] < sx) == left)
                    .map(|k| (picks.receiver_x[k], s.predicted_ms[k]))
                    .filter(|p| p.1.is_finite())
                    .collect();
                pts.sort_by(|a, b| a.0.total_cmp(&b.0));
                ch.draw_series(LineSeries::new(pts, col.stroke_width(2)))?;
            }
        }
    }
    let mut rc = ChartBuilder::on(&bottom)
        .margin(12)
        .x_label_area_size(45)
        .y_label_area_size(65)
        .build_cartesian_2d(x0..x1, -rlim..rlim)?;
    rc.configure_mesh()
        .light_line_style(RGBColor(235, 235, 235))
        .x_desc("receiver position along the line (m)")
        .y_desc("observed − predicted (ms)")
        .x_label_formatter(&tick)
        .y_label_formatter(&tick)
        .label_style(("sans-serif", 15))
        .axis_desc_style(("sans-serif", 16))
        .draw()?;
    for sgn in [-1.0, 1.0] {
        rc.draw_series(std::iter::once(PathElement::new(
            vec![(x0, sgn * picks.sigma_ms), (x1, sgn * picks.sigma_ms)],
            RGBColor(60, 60, 60).stroke_width(2),
        )))?;
    }
    let nser = series.len().max(1) as f64;
    for (m, s) in series.iter().enumerate() {
        let col = shot_colour(m);
        let shift = (m as f64 - 0.5 * (nser - 1.0)) * 0.6 * spacing / nser;
        rc.draw_series(
            picks
                .receiver_x
                .iter()
                .zip(picks.observed_ms)
                .zip(&s.predicted_ms)
                .filter(|(_, p)| p.is_finite())
                .map(|((&x, &o), &p)| {
                    Circle::new((x + shift, (o - p).clamp(-rlim, rlim)), 2, col.filled())
                }),
        )?;
    }
    foot.draw(&Text::new(
        format!(
            "dots: each model's residuals, in its colour (shifted a little along the line); dark lines: ±σ = {:.2} ms",
            picks.sigma_ms
        ),
        (80, 4),
        ("sans-serif", 14).into_font(),
    ))?;
    root.present()?;
    Ok(())
}
