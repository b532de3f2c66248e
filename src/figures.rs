//! Figures: the velocity section, observed against predicted travel times, and the
//! loss curves of a training run. Each is written as PNG and SVG, atomically.
//!
//! Plain data in; the figure module knows nothing of solvers.

use std::path::Path;
use std::sync::Once;

use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::colors::colormaps::ViridisRGB;

use crate::model::VelocityGrid;
use crate::survey::{Point, Surface};

/// What went wrong while drawing.
#[derive(Debug, thiserror::Error)]
pub enum FigureError {
    /// The drawing backend failed.
    #[error("cannot draw {file}: {message}")]
    Draw {
        /// figure file
        file: String,
        /// backend message
        message: String,
    },
    /// Writing the file failed.
    #[error("cannot write {file}: {source}")]
    Io {
        /// figure file
        file: String,
        /// cause
        source: std::io::Error,
    },
}

type DrawResult = Result<(), Box<dyn std::error::Error>>;

static FONT: Once = Once::new();

/// Registers the embedded DejaVu Sans (see `assets/`), so figures look the same on
/// every machine, with or without system fonts.
fn font() {
    FONT.call_once(|| {
        let bytes: &'static [u8] = include_bytes!("../assets/DejaVuSans.ttf");
        let _ = plotters::style::register_font("sans-serif", FontStyle::Normal, bytes);
        let _ = plotters::style::register_font("sans-serif", FontStyle::Bold, bytes);
    });
}

/// Renders one figure to `stem.png` and `stem.svg`; the two closures are the same
/// drawing code for the two backends (see the `figure!` macro).
fn render(
    stem: &Path,
    size: (u32, u32),
    png_draw: impl FnOnce(DrawingArea<BitMapBackend, Shift>) -> DrawResult,
    svg_draw: impl FnOnce(DrawingArea<SVGBackend, Shift>) -> DrawResult,
) -> Result<(), FigureError> {
    font();
    let png = stem.with_extension("png");
    let svg = stem.with_extension("svg");
    let err = |f: &Path, e: Box<dyn std::error::Error>| FigureError::Draw {
        file: f.display().to_string(),
        message: e.to_string(),
    };
    let io = |f: &Path, e: std::io::Error| FigureError::Io {
        file: f.display().to_string(),
        source: e,
    };
    // PNG: drawn under a temporary name (the encoder goes by the extension), then renamed.
    let name = png
        .file_stem()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let tmp = png.with_file_name(format!(".{name}.part-{}.png", std::process::id()));
    let drawn = {
        let root = BitMapBackend::new(&tmp, size).into_drawing_area();
        png_draw(root)
    };
    if let Err(e) = drawn {
        let _ = std::fs::remove_file(&tmp);
        return Err(err(&png, e));
    }
    std::fs::rename(&tmp, &png).map_err(|e| io(&png, e))?;
    let mut text = String::new();
    {
        let root = SVGBackend::with_string(&mut text, size).into_drawing_area();
        svg_draw(root).map_err(|e| err(&svg, e))?;
    }
    crate::output::write_atomic(&svg, text.as_bytes()).map_err(|e| io(&svg, e))
}

/// Expands one drawing body for both backends and renders it.
macro_rules! figure {
    ($stem:expr, $size:expr, |$root:ident| $body:block) => {{
        let png_draw = |$root: DrawingArea<BitMapBackend, Shift>| -> DrawResult { $body };
        let svg_draw = |$root: DrawingArea<SVGBackend, Shift>| -> DrawResult { $body };
        render($stem, $size, png_draw, svg_draw)
    }};
}

/// A "nice" step for about `n` intervals over `span` (1, 2, 2.5 or 5 × 10^k).
pub fn nice_step(span: f64, n: f64) -> f64 {
    let raw = (span / n).max(1e-12);
    let mag = 10f64.powf(raw.log10().floor());
    let f = raw / mag;
    let nice = if f <= 1.0 {
        1.0
    } else if f <= 2.0 {
        2.0
    } else if f <= 2.5 {
        2.5
    } else if f <= 5.0 {
        5.0
    } else {
        10.0
    };
    nice * mag
}

/// What to draw on a velocity section besides the model.
#[derive(Debug, Clone, Default)]
pub struct SectionDecor<'a> {
    /// Figure title.
    pub title: String,
    /// Ground surface.
    pub surface: Option<&'a Surface>,
    /// Receiver positions.
    pub receivers: &'a [Point],
    /// Source positions.
    pub sources: &'a [Point],
    /// Per-node flag: true where rays constrain the model (unconstrained nodes are greyed).
    pub covered: Option<&'a [bool]>,
    /// Velocity range of the colour scale, m/s (default: the model's range).
    pub v_range: Option<(f64, f64)>,
    /// Velocity contour levels, m/s (default: nice levels over the range).
    pub contours: Option<Vec<f64>>,
    /// A line of text under the plot (cautions, provenance).
    pub footnote: Option<String>,
    /// An interface to draw as a dashed white line: (x, elevation) points and its label.
    pub interface: Option<(Vec<(f64, f64)>, String)>,
}

/// A straight piece of a contour line.
type Segment = [(f64, f64); 2];

/// Marching-squares segments of the level `c` over the grid's non-air cells.
fn contour_segments(m: &VelocityGrid, c: f64) -> Vec<Segment> {
    let s = &m.spec;
    let mut out = Vec::new();
    for j in 0..s.nz.saturating_sub(1) {
        for i in 0..s.nx.saturating_sub(1) {
            let corners = [(i, j), (i + 1, j), (i + 1, j + 1), (i, j + 1)];
            let v: Vec<f64> = corners.iter().map(|&(a, b)| m.v[s.idx(a, b)]).collect();
            if v.iter().any(|x| x.is_nan()) {
                continue;
            }
            let mut pts = Vec::with_capacity(4);
            for e in 0..4 {
                let (a, b) = (e, (e + 1) % 4);
                let (va, vb) = (v[a], v[b]);
                if (va < c) != (vb < c) {
                    let t = (c - va) / (vb - va);
                    let (pa, pb) = (corners[a], corners[b]);
                    let x = s.x(pa.0) + t * (s.x(pb.0) - s.x(pa.0));
                    let z = s.z(pa.1) + t * (s.z(pb.1) - s.z(pa.1));
                    pts.push((x, z));
                }
            }
            if pts.len() == 2 {
                out.push([pts[0], pts[1]]);
            } else if pts.len() == 4 {
                out.push([pts[0], pts[1]]);
                out.push([pts[2], pts[3]]);
            }
        }
    }
    out
}

/// Distinguishable line colours for shots and series (a qualitative palette of our own).
fn shot_colour(k: usize) -> RGBAColor {
    const C: [(u8, u8, u8); 10] = [
        (31, 92, 168),
        (214, 96, 20),
        (40, 150, 60),
        (200, 30, 45),
        (120, 80, 170),
        (130, 85, 60),
        (210, 80, 160),
        (90, 90, 90),
        (150, 150, 20),
        (20, 160, 170),
    ];
    let (r, g, b) = C[k % C.len()];
    RGBColor(r, g, b).to_rgba()
}

/// Tick labels without trailing zeros.
fn tick(v: &f64) -> String {
    let s = format!("{v:.2}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    if s == "-0" {
        "0".into()
    } else {
        s.into()
    }
}

fn colour(v: f64, lo: f64, hi: f64) -> RGBColor {
    ViridisRGB.get_color_normalized(v.clamp(lo, hi) as f32, lo as f32, hi as f32)
}

/// Draws a velocity section: colour-filled model, contours, ground surface, stations
/// and a colour bar, with the vertical exaggeration stated.
pub fn velocity_section(
    stem: &Path,
    m: &VelocityGrid,
    d: &SectionDecor,
) -> Result<(), FigureError> {
    let s = m.spec;
    let (xlo, xhi) = (s.x0, s.x_max());
    let (zlo, mut zhi) = (s.z0, s.z_max());
    if let Some(surf) = d.surface {
        zhi = surf.nodes.iter().map(|p| p.z).fold(zhi, f64::max) + 0.5;
    }
    let width = 1400u32;
    let plot_w = 1150.0;
    let aspect = (zhi - zlo) / (xhi - xlo);
    // vertical exaggeration: the smallest of 1, 2, 3, 5 that gives a readable height
    let ve = [1.0, 2.0, 3.0, 5.0]
        .into_iter()
        .find(|ve| plot_w * aspect * ve >= 260.0)
        .unwrap_or(5.0);
    let plot_h = (plot_w * aspect * ve).clamp(200.0, 900.0);
    let height = (plot_h + 190.0) as u32;
    let (vlo, vhi) = d.v_range.unwrap_or_else(|| m.range());
    let (vlo, vhi) = if vhi - vlo < 1.0 {
        (vlo - 1.0, vhi + 1.0)
    } else {
        (vlo, vhi)
    };
    let levels = d.contours.clone().unwrap_or_else(|| {
        let st = nice_step(vhi - vlo, 6.0);
        let mut l = Vec::new();
        let mut c = (vlo / st).ceil() * st;
        while c < vhi {
            l.push(c);
            c += st;
        }
        l
    });
    let segs: Vec<(f64, Vec<Segment>)> = levels
        .iter()
        .map(|&c| (c, contour_segments(m, c)))
        .collect();
    let title = format!("{}  (vertical exaggeration {ve}×)", d.title);
    figure!(stem, (width, height), |root| {
        root.fill(&WHITE)?;
        let (main, bar) = root.split_horizontally(width - 150);
        let (main, foot) = main.split_vertically(height - 30);
        let mut ch = ChartBuilder::on(&main)
            .caption(&title, ("sans-serif", 22))
            .margin(12)
            .x_label_area_size(45)
            .y_label_area_size(65)
            .build_cartesian_2d(xlo..xhi, zlo..zhi)?;
        ch.configure_mesh()
            .disable_mesh()
            .x_desc("distance along the line (m)")
            .y_desc("elevation (m)")
            .x_label_formatter(&tick)
            .y_label_formatter(&tick)
            .label_style(("sans-serif", 15))
            .axis_desc_style(("sans-serif", 16))
            .draw()?;
        let half_x = 0.5 * s.dx;
        let half_z = 0.5 * s.dz;
        for j in 0..s.nz {
            for i in 0..s.nx {
                let k = s.idx(i, j);
                let v = m.v[k];
                if v.is_nan() {
                    continue;
                }
                let mut c = colour(v, vlo, vhi);
                if let Some(cov) = d.covered {
                    if !cov[k] {
                        // unconstrained: wash towards grey
                        c = RGBColor(
                            ((c.0 as u16 + 2 * 200) / 3) as u8,
                            ((c.1 as u16 + 2 * 200) / 3) as u8,
                            ((c.2 as u16 + 2 * 200) / 3) as u8,
                        );
                    }
                }
                let (x, z) = (s.x(i), s.z(j));
                ch.draw_series(std::iter::once(Rectangle::new(
                    [
                        ((x - half_x).max(xlo), (z - half_z).max(zlo)),
                        ((x + half_x).min(xhi), (z + half_z).min(zhi)),
                    ],
                    c.filled(),
                )))?;
            }
        }
        for (_, ss) in &segs {
            ch.draw_series(
                ss.iter().map(|sg| {
                    PathElement::new(vec![sg[0], sg[1]], BLACK.mix(0.75).stroke_width(1))
                }),
            )?;
        }
        if let Some(surf) = d.surface {
            let mut pts: Vec<(f64, f64)> = Vec::new();
            let n = 400;
            for k in 0..=n {
                let x = xlo + (xhi - xlo) * k as f64 / n as f64;
                pts.push((x, surf.elevation(x)));
            }
            ch.draw_series(std::iter::once(PathElement::new(
                pts,
                BLACK.stroke_width(2),
            )))?;
        }
        if let Some((pts, label)) = &d.interface {
            // dashed: every other short piece between neighbouring columns
            let white = RGBColor(255, 255, 255);
            for (k, w) in pts.windows(2).enumerate() {
                if k % 2 == 0 && (w[1].0 - w[0].0).abs() < 3.0 * s.dx {
                    ch.draw_series(std::iter::once(PathElement::new(
                        vec![w[0], w[1]],
                        white.stroke_width(3),
                    )))?;
                }
            }
            if let Some(first) = pts.first() {
                ch.draw_series(std::iter::once(Text::new(
                    label.clone(),
                    (first.0 + 1.0, first.1 - 0.8),
                    ("sans-serif", 14).into_font().color(&white),
                )))?;
            }
        }
        ch.draw_series(
            d.receivers
                .iter()
                .map(|p| TriangleMarker::new((p.x, p.z), 5, RGBColor(30, 30, 30).filled())),
        )?;
        ch.draw_series(
            d.sources
                .iter()
                .map(|p| Circle::new((p.x, p.z), 6, RGBColor(220, 40, 40).filled())),
        )?;
        let legend = "▲ receivers   ● shots   — ground surface   black lines: velocity contours";
        foot.draw(&Text::new(legend, (80, 2), ("sans-serif", 14).into_font()))?;
        if let Some(f) = &d.footnote {
            foot.draw(&Text::new(
                f.clone(),
                (560, 2),
                ("sans-serif", 13).into_font().color(&RGBColor(90, 90, 90)),
            ))?;
        }
        // colour bar
        let mut cb = ChartBuilder::on(&bar)
            .margin_top(50)
            .margin_bottom(60)
            .margin_right(70)
            .y_label_area_size(0)
            .right_y_label_area_size(60)
            .build_cartesian_2d(0.0..1.0, vlo..vhi)?;
        let n = 120;
        cb.draw_series((0..n).map(|k| {
            let a = vlo + (vhi - vlo) * k as f64 / n as f64;
            let b = vlo + (vhi - vlo) * (k + 1) as f64 / n as f64;
            Rectangle::new(
                [(0.0, a), (1.0, b)],
                colour(0.5 * (a + b), vlo, vhi).filled(),
            )
        }))?;
        for &c in &levels {
            cb.draw_series(std::iter::once(PathElement::new(
                vec![(0.0, c), (1.0, c)],
                BLACK.stroke_width(1),
            )))?;
        }
        cb.configure_mesh()
            .disable_mesh()
            .disable_x_axis()
            .y_desc("velocity (m/s)")
            .y_label_formatter(&tick)
            .label_style(("sans-serif", 14))
            .axis_desc_style(("sans-serif", 15))
            .draw()?;
        root.present()?;
        Ok(())
    })
}

/// (receiver x, observed ms, predicted ms).
type Obs = (f64, f64, f64);

/// One shot's travel-time curve.
#[derive(Debug, Clone)]
pub struct ShotCurve {
    /// Shot id.
    pub shot: String,
    /// Source x, m.
    pub source_x: f64,
    /// (receiver x, observed ms, predicted ms), sorted by x.
    pub points: Vec<(f64, f64, f64)>,
}

/// Observed picks (dots) against predicted times (lines) for every shot, and the
/// residuals beneath.
pub fn traveltime_curves(
    stem: &Path,
    title: &str,
    curves: &[ShotCurve],
    sigma_ms: f64,
) -> Result<(), FigureError> {
    let (w, h) = (1400u32, 950u32);
    let all = curves.iter().flat_map(|c| c.points.iter());
    let (mut xlo, mut xhi, mut tmax, mut rmax) = (f64::INFINITY, f64::NEG_INFINITY, 0.0f64, 0.0f64);
    for &(x, o, p) in all {
        xlo = xlo.min(x);
        xhi = xhi.max(x);
        tmax = tmax.max(o).max(p);
        rmax = rmax.max((o - p).abs());
    }
    for c in curves {
        xlo = xlo.min(c.source_x);
        xhi = xhi.max(c.source_x);
    }
    if !xlo.is_finite() {
        (xlo, xhi) = (0.0, 1.0);
    }
    let pad = 0.02 * (xhi - xlo).max(1.0);
    let rlim = (rmax * 1.1).max(3.0 * sigma_ms).max(0.5);
    figure!(stem, (w, h), |root| {
        root.fill(&WHITE)?;
        let (top, bottom) = root.split_vertically(650);
        let mut ch = ChartBuilder::on(&top)
            .caption(title, ("sans-serif", 22))
            .margin(12)
            .x_label_area_size(35)
            .y_label_area_size(65)
            .build_cartesian_2d((xlo - pad)..(xhi + pad), 0.0..(tmax * 1.05).max(1.0))?;
        ch.configure_mesh()
            .light_line_style(RGBColor(235, 235, 235))
            .y_desc("first-arrival time (ms)")
            .x_label_formatter(&tick)
            .y_label_formatter(&tick)
            .label_style(("sans-serif", 15))
            .axis_desc_style(("sans-serif", 16))
            .draw()?;
        for (k, c) in curves.iter().enumerate() {
            let col = shot_colour(k);
            let (left, right): (Vec<&Obs>, Vec<&Obs>) =
                c.points.iter().partition(|p| p.0 < c.source_x);
            for side in [left, right] {
                ch.draw_series(LineSeries::new(
                    side.iter().map(|p| (p.0, p.2)),
                    col.stroke_width(2),
                ))?;
            }
            ch.draw_series(
                c.points
                    .iter()
                    .map(|p| Circle::new((p.0, p.1), 3, col.filled())),
            )?;
            ch.draw_series(std::iter::once(TriangleMarker::new(
                (c.source_x, 0.0),
                7,
                col.filled(),
            )))?;
        }
        let mut rc = ChartBuilder::on(&bottom)
            .margin(12)
            .x_label_area_size(45)
            .y_label_area_size(65)
            .build_cartesian_2d((xlo - pad)..(xhi + pad), -rlim..rlim)?;
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
                vec![(xlo - pad, sgn * sigma_ms), (xhi + pad, sgn * sigma_ms)],
                RGBColor(60, 60, 60).stroke_width(2),
            )))?;
        }
        for (k, c) in curves.iter().enumerate() {
            let col = shot_colour(k);
            rc.draw_series(
                c.points
                    .iter()
                    .map(|p| Circle::new((p.0, p.1 - p.2), 3, col.filled())),
            )?;
        }
        bottom.draw(&Text::new(
            format!("dots: picks, lines: predicted, triangles: shots; dark horizontal lines: ±σ = {sigma_ms:.2} ms"),
            (80, 280),
            ("sans-serif", 14).into_font(),
        ))?;
        root.present()?;
        Ok(())
    })
}

/// Tick label on a log axis: plain digits from 0.01 to 10 000 ("0.2", "9", "300"),
/// powers of ten written as such beyond.
fn log_tick(v: &f64) -> String {
    let a = v.abs();
    if (0.00999..10_001.0).contains(&a) {
        let digits = (-a.log10().floor()).max(0.0) as usize;
        format!("{v:.digits$}")
    } else {
        format!("{v:.0e}")
    }
}

/// Loss curves on a logarithmic axis; each series is (name, [(step, value)]). The axis
/// spans at least from the decade below the smallest value to the one above the
/// largest, so it always carries labelled ticks.
pub fn loss_curves(
    stem: &Path,
    title: &str,
    (x_label, y_label): (&str, &str),
    series: &[(String, Vec<(f64, f64)>)],
) -> Result<(), FigureError> {
    let (w, h) = (1100u32, 600u32);
    let pts = series
        .iter()
        .flat_map(|s| s.1.iter())
        .filter(|p| p.1 > 0.0 && p.1.is_finite());
    let (mut smax, mut lo, mut hi) = (1.0f64, f64::INFINITY, f64::NEG_INFINITY);
    for &(s, v) in pts {
        smax = smax.max(s);
        lo = lo.min(v);
        hi = hi.max(v);
    }
    if !lo.is_finite() {
        (lo, hi) = (1e-3, 1.0);
    }
    let lo = (lo * 0.8).min(10f64.powf(lo.log10().floor()));
    let hi = (hi * 1.25).max(10f64.powf(hi.log10().ceil()));
    figure!(stem, (w, h), |root| {
        root.fill(&WHITE)?;
        let mut ch = ChartBuilder::on(&root)
            .caption(title, ("sans-serif", 22))
            .margin(14)
            .x_label_area_size(45)
            .y_label_area_size(75)
            .build_cartesian_2d(0.0..smax, (lo..hi).log_scale())?;
        ch.configure_mesh()
            .light_line_style(RGBColor(235, 235, 235))
            .x_desc(x_label)
            .y_desc(y_label)
            .x_label_formatter(&tick)
            .y_label_formatter(&log_tick)
            .label_style(("sans-serif", 15))
            .axis_desc_style(("sans-serif", 16))
            .draw()?;
        for (k, (name, s)) in series.iter().enumerate() {
            let col = shot_colour(k);
            ch.draw_series(LineSeries::new(
                s.iter().copied().filter(|p| p.1 > 0.0 && p.1.is_finite()),
                col.stroke_width(2),
            ))?
            .label(name.clone())
            .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 20, y)], col.stroke_width(2)));
        }
        ch.configure_series_labels()
            .background_style(WHITE.mix(0.85))
            .border_style(BLACK)
            .label_font(("sans-serif", 15))
            .draw()?;
        root.present()?;
        Ok(())
    })
}
