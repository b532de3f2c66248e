//! Figures: the velocity section, the ray coverage behind it, observed against
//! predicted travel times, and the loss curves of a training run. Each is written as
//! PNG and SVG, atomically.
//!
//! Plain data in; the figure module knows nothing of solvers.

use std::path::Path;
use std::sync::Once;

use plotters::coord::combinators::BindKeyPoints;
use plotters::coord::ranged1d::AsRangedCoord;
use plotters::coord::types::RangedCoordf64;
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::colors::colormaps::ViridisRGB;

use crate::model::{GridSpec, VelocityGrid};
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

/// Plot extent and image size shared by the section figures, so a velocity section
/// and a coverage figure of the same grid line up when viewed side by side.
#[derive(Debug, Clone, Copy)]
struct SectionFrame {
    /// Plotted x range, m: the grid's columns.
    x: (f64, f64),
    /// Plotted elevation range, m: the grid's rows, raised to clear the highest
    /// surface vertex.
    z: (f64, f64),
    /// Vertical exaggeration.
    ve: f64,
    /// Image size, px.
    size: (u32, u32),
}

/// Extent, vertical exaggeration and image size of a section over grid `s`. The
/// exaggeration is the smallest of 1, 2, 3, 5 that gives a readable height: flat
/// sections are stretched no more than they need to be.
fn section_frame(s: &GridSpec, surface: Option<&Surface>) -> SectionFrame {
    let (xlo, xhi) = (s.x0, s.x_max());
    let (zlo, mut zhi) = (s.z0, s.z_max());
    if let Some(surf) = surface {
        zhi = surf.nodes.iter().map(|p| p.z).fold(zhi, f64::max) + 0.5;
    }
    let width = 1400u32;
    let plot_w = 1150.0;
    let aspect = (zhi - zlo) / (xhi - xlo);
    let ve = [1.0, 2.0, 3.0, 5.0]
        .into_iter()
        .find(|ve| plot_w * aspect * ve >= 260.0)
        .unwrap_or(5.0);
    let plot_h = (plot_w * aspect * ve).clamp(200.0, 900.0);
    let height = (plot_h + 190.0) as u32;
    SectionFrame {
        x: (xlo, xhi),
        z: (zlo, zhi),
        ve,
        size: (width, height),
    }
}

/// What a drawing helper returns: `T`, or the backend's error.
type Drawn<T, DB> = Result<T, DrawingAreaErrorKind<<DB as DrawingBackend>::ErrorType>>;

/// A chart in metres along the line and of elevation.
type SectionChart<'a, DB> = ChartContext<'a, DB, Cartesian2d<RangedCoordf64, RangedCoordf64>>;

/// The three panels of a section figure on a white page: plot, footer line under it,
/// and the colour bar's strip on the right.
fn section_panels<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    fr: &SectionFrame,
) -> Drawn<[DrawingArea<DB, Shift>; 3], DB> {
    let (width, height) = fr.size;
    root.fill(&WHITE)?;
    let (main, bar) = root.split_horizontally(width - 150);
    let (main, foot) = main.split_vertically(height - 30);
    Ok([main, foot, bar])
}

/// The section's axes with their labels, captioned `title`.
fn section_axes<'a, DB: DrawingBackend>(
    main: &'a DrawingArea<DB, Shift>,
    fr: &SectionFrame,
    title: &str,
) -> Drawn<SectionChart<'a, DB>, DB> {
    let mut ch = ChartBuilder::on(main)
        .caption(title, ("sans-serif", 22))
        .margin(12)
        .x_label_area_size(45)
        .y_label_area_size(65)
        .build_cartesian_2d(fr.x.0..fr.x.1, fr.z.0..fr.z.1)?;
    ch.configure_mesh()
        .disable_mesh()
        .x_desc("distance along the line (m)")
        .y_desc("elevation (m)")
        .x_label_formatter(&tick)
        .y_label_formatter(&tick)
        .label_style(("sans-serif", 15))
        .axis_desc_style(("sans-serif", 16))
        .draw()?;
    Ok(ch)
}

/// The filled cell of node `(i, j)`, cut at the plot's edges so the border nodes'
/// half cells do not spill over the axes.
fn node_cell(
    s: &GridSpec,
    fr: &SectionFrame,
    i: usize,
    j: usize,
    c: RGBColor,
) -> Rectangle<(f64, f64)> {
    let (half_x, half_z) = (0.5 * s.dx, 0.5 * s.dz);
    let (x, z) = (s.x(i), s.z(j));
    Rectangle::new(
        [
            ((x - half_x).max(fr.x.0), (z - half_z).max(fr.z.0)),
            ((x + half_x).min(fr.x.1), (z + half_z).min(fr.z.1)),
        ],
        c.filled(),
    )
}

/// The ground surface as a line across the plot, sampled finely enough to follow
/// every vertex of a surveyed profile.
fn draw_surface<DB: DrawingBackend>(
    ch: &mut SectionChart<DB>,
    fr: &SectionFrame,
    surface: Option<&Surface>,
) -> Drawn<(), DB> {
    if let Some(surf) = surface {
        let (xlo, xhi) = fr.x;
        let n = 400;
        let pts: Vec<(f64, f64)> = (0..=n)
            .map(|k| {
                let x = xlo + (xhi - xlo) * k as f64 / n as f64;
                (x, surf.elevation(x))
            })
            .collect();
        ch.draw_series(std::iter::once(PathElement::new(
            pts,
            BLACK.stroke_width(2),
        )))?;
    }
    Ok(())
}

/// Receivers (dark triangles) and shots (red dots), drawn last so nothing covers them.
fn draw_stations<DB: DrawingBackend>(
    ch: &mut SectionChart<DB>,
    receivers: &[Point],
    sources: &[Point],
) -> Drawn<(), DB> {
    ch.draw_series(
        receivers
            .iter()
            .map(|p| TriangleMarker::new((p.x, p.z), 5, RGBColor(30, 30, 30).filled())),
    )?;
    ch.draw_series(
        sources
            .iter()
            .map(|p| Circle::new((p.x, p.z), 6, RGBColor(220, 40, 40).filled())),
    )?;
    Ok(())
}

/// The legend line under the plot and, in grey from `note_x` on, the footnote.
fn draw_footer<DB: DrawingBackend>(
    foot: &DrawingArea<DB, Shift>,
    legend: &str,
    footnote: Option<&str>,
    note_x: i32,
) -> Drawn<(), DB> {
    foot.draw(&Text::new(legend, (80, 2), ("sans-serif", 14).into_font()))?;
    if let Some(f) = footnote {
        foot.draw(&Text::new(
            f,
            (note_x, 2),
            ("sans-serif", 13).into_font().color(&RGBColor(90, 90, 90)),
        ))?;
    }
    Ok(())
}

/// The colour bar's chart in the right-hand panel: x across the bar (0..1), y the
/// scale's values.
fn colour_bar<'a, DB: DrawingBackend, Y: AsRangedCoord<Value = f64>>(
    bar: &'a DrawingArea<DB, Shift>,
    y: Y,
) -> Drawn<ChartContext<'a, DB, Cartesian2d<RangedCoordf64, Y::CoordDescType>>, DB> {
    ChartBuilder::on(bar)
        .margin_top(50)
        .margin_bottom(60)
        .margin_right(70)
        .y_label_area_size(0)
        .right_y_label_area_size(60)
        .build_cartesian_2d(0.0..1.0, y)
}

/// Draws a velocity section: colour-filled model, contours, ground surface, stations
/// and a colour bar, with the vertical exaggeration stated.
pub fn velocity_section(
    stem: &Path,
    m: &VelocityGrid,
    d: &SectionDecor,
) -> Result<(), FigureError> {
    let s = m.spec;
    let fr = section_frame(&s, d.surface);
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
    let title = format!("{}  (vertical exaggeration {}×)", d.title, fr.ve);
    figure!(stem, fr.size, |root| {
        let [main, foot, bar] = section_panels(&root, &fr)?;
        let mut ch = section_axes(&main, &fr, &title)?;
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
                ch.draw_series(std::iter::once(node_cell(&s, &fr, i, j, c)))?;
            }
        }
        for (_, ss) in &segs {
            ch.draw_series(
                ss.iter().map(|sg| {
                    PathElement::new(vec![sg[0], sg[1]], BLACK.mix(0.75).stroke_width(1))
                }),
            )?;
        }
        draw_surface(&mut ch, &fr, d.surface)?;
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
        draw_stations(&mut ch, d.receivers, d.sources)?;
        let legend = "▲ receivers   ● shots   — ground surface   black lines: velocity contours";
        draw_footer(&foot, legend, d.footnote.as_deref(), 560)?;
        let mut cb = colour_bar(&bar, vlo..vhi)?;
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

/// What the ray-coverage figure shows: where the rays of a run went, to be read next
/// to the velocity section of the same grid.
#[derive(Debug, Clone)]
pub struct CoverageFigure<'a> {
    /// Figure title.
    pub title: String,
    /// The node grid `dws` is given on.
    pub spec: GridSpec,
    /// Derivative weight sum per node (Toomey & Foulger 1989), index `j·nx + i`: the
    /// ray length attributed to the node through the interpolation weights, m. NaN
    /// marks air (not drawn), 0 ground no ray reached.
    pub dws: &'a [f64],
    /// Ray paths as (x, elevation) polylines, already thinned by the caller.
    pub rays: &'a [Vec<(f64, f64)>],
    /// Ground surface.
    pub surface: Option<&'a Surface>,
    /// Receiver positions.
    pub receivers: &'a [Point],
    /// Source positions.
    pub sources: &'a [Point],
    /// A line of text under the plot (cautions, provenance).
    pub footnote: Option<String>,
}

/// At most this many rays are drawn. More only blacken the section further, and each
/// one adds its vertices to the SVG.
const MAX_RAYS_DRAWN: usize = 3000;

/// Colour of ground nodes no ray reached: a flat grey outside the colour map, so
/// "unconstrained" is not read as "weakly constrained".
const NO_RAY: RGBColor = RGBColor(225, 225, 225);

/// Light-to-dark sequence for the derivative weight sum: the yellow–orange–brown
/// scheme of ColorBrewer (Harrower & Brewer 2003) without its near-white end, which
/// would vanish against the page and the no-ray grey. Deliberately unlike the viridis
/// of the velocity section, so a coverage figure is never read as velocities.
const DWS_PALETTE: [(u8, u8, u8); 8] = [
    (255, 247, 188),
    (254, 227, 145),
    (254, 196, 79),
    (254, 153, 41),
    (236, 112, 20),
    (204, 76, 2),
    (153, 52, 4),
    (102, 37, 6),
];

/// The palette colour of `t` in `[0, 1]` (clamped), interpolated linearly.
fn dws_colour(t: f64) -> RGBColor {
    let f = t.clamp(0.0, 1.0) * (DWS_PALETTE.len() - 1) as f64;
    let k = (f.floor() as usize).min(DWS_PALETTE.len() - 2);
    let w = f - k as f64;
    let (a, b) = (DWS_PALETTE[k], DWS_PALETTE[k + 1]);
    let mix = |p: u8, q: u8| (p as f64 + w * (q as f64 - p as f64)).round() as u8;
    RGBColor(mix(a.0, b.0), mix(a.1, b.1), mix(a.2, b.2))
}

/// The colour scale's range in log10 of the derivative weight sum: the 2nd to 99.5th
/// percentiles of the positive values. Next to a shot the sum is orders of magnitude
/// above the rest (every ray of the shot starts there), and one such node spanning
/// the scale would leave the rest of the section in one pale colour. At least half a
/// decade wide, so a uniform coverage still gets a scale.
fn log_dws_range(dws: &[f64]) -> (f64, f64) {
    let mut v: Vec<f64> = dws
        .iter()
        .copied()
        .filter(|d| *d > 0.0 && d.is_finite())
        .collect();
    if v.is_empty() {
        return (0.0, 1.0);
    }
    v.sort_by(f64::total_cmp);
    let at = |q: f64| v[((v.len() - 1) as f64 * q).round() as usize].log10();
    let (lo, hi) = (at(0.02), at(0.995));
    if hi - lo < 0.5 {
        let mid = 0.5 * (lo + hi);
        (mid - 0.25, mid + 0.25)
    } else {
        (lo, hi)
    }
}

/// Ticks of a log scale over log10 values `lo..=hi` as (value, label): the powers of
/// ten when at least two fall in the range, else 1, 2 and 5 times the powers of ten.
/// The labels are made from the mantissa and exponent rather than by formatting the
/// value, which would print 10^-1 as "0.09999…" or "0.10".
fn log_ticks(lo: f64, hi: f64) -> Vec<(f64, String)> {
    let label = |m: u32, e: i32| -> String {
        match e {
            0..=4 => format!("{}", m as u64 * 10u64.pow(e as u32)),
            -3..=-1 => format!("{:.*}", (-e) as usize, m as f64 * 10f64.powi(e)),
            _ => format!("{m}e{e}"),
        }
    };
    let inside = |l: f64| l >= lo - 1e-9 && l <= hi + 1e-9;
    let (e0, e1) = (lo.floor() as i32, hi.ceil() as i32);
    let mantissas: &[u32] = if (e0..=e1).filter(|&e| inside(e as f64)).count() >= 2 {
        &[1]
    } else {
        &[1, 2, 5]
    };
    (e0..=e1)
        .flat_map(|e| mantissas.iter().map(move |&m| (m, e)))
        .filter(|&(m, e)| inside(e as f64 + (m as f64).log10()))
        .map(|(m, e)| (m as f64 * 10f64.powi(e), label(m, e)))
        .collect()
}

/// Opacity of the ray lines: 0.25, so a few rays read as lines and bunches darken;
/// lower when the rays are so many that at 0.25 they would hide the node colours
/// under solid black. It is set so that where as many lines cross a pixel as on
/// average over the reached ground, `(1 − α)^n = 0.6`: six tenths of the node colour
/// still shows, and only the busier places turn dark.
fn ray_alpha<'r, DB: DrawingBackend>(
    ch: &SectionChart<DB>,
    s: &GridSpec,
    dws: &[f64],
    rays: impl Iterator<Item = &'r Vec<(f64, f64)>>,
) -> f64 {
    let px = |p: &(f64, f64)| {
        let (u, v) = ch.backend_coord(p);
        (u as f64, v as f64)
    };
    let length: f64 = rays
        .flat_map(|r| r.windows(2))
        .map(|w| {
            let (a, b) = (px(&w[0]), px(&w[1]));
            (b.0 - a.0).hypot(b.1 - a.1)
        })
        .sum();
    let (o, e) = (px(&(s.x0, s.z0)), px(&(s.x0 + s.dx, s.z0 + s.dz)));
    let cell = ((e.0 - o.0) * (e.1 - o.1)).abs().max(1.0);
    let reached = dws.iter().filter(|d| **d > 0.0).count() as f64 * cell;
    if reached <= 0.0 || length <= 0.0 {
        return 0.25;
    }
    let n = length / reached;
    (1.0 - 0.6f64.powf(1.0 / n)).clamp(0.03, 0.25)
}

/// "2nd", "3rd", "11th", "21st".
fn ordinal(k: usize) -> String {
    let suffix = match (k % 10, k % 100) {
        (_, 11..=13) => "th",
        (1, _) => "st",
        (2, _) => "nd",
        (3, _) => "rd",
        _ => "th",
    };
    format!("{k}{suffix}")
}

/// Draws where the rays went: each node coloured by the log of its derivative weight
/// sum, ground no ray reached in grey, the rays over it as faint lines that darken
/// where they bunch (see `ray_alpha`), with the surface, stations and vertical exaggeration of the
/// velocity section, so the two figures can be laid side by side. The colour scale
/// spans the 2nd to 99.5th percentiles of the positive sums (see `log_dws_range`); at
/// most 3000 rays are drawn, every k-th when there are more, and the legend says so.
/// A `dws` that does not hold one value per node of `spec` is an error.
pub fn ray_coverage(stem: &Path, f: &CoverageFigure) -> Result<(), FigureError> {
    let s = f.spec;
    if f.dws.len() != s.len() {
        return Err(FigureError::Draw {
            file: stem.with_extension("png").display().to_string(),
            message: format!(
                "{} derivative weight sums for a grid of {} nodes",
                f.dws.len(),
                s.len()
            ),
        });
    }
    let fr = section_frame(&s, f.surface);
    let (llo, lhi) = log_dws_range(f.dws);
    let ticks = log_ticks(llo, lhi);
    let every = f.rays.len().div_ceil(MAX_RAYS_DRAWN).max(1);
    let rays_note = if every > 1 {
        format!("lines: every {} of {} rays", ordinal(every), f.rays.len())
    } else {
        "lines: rays".to_string()
    };
    let legend = format!("▲ receivers   ● shots   — ground surface   {rays_note}   grey: no ray");
    let title = format!("{}  (vertical exaggeration {}×)", f.title, fr.ve);
    let tick_label = |v: &f64| -> String {
        let far = |t: &(f64, String)| (t.0.log10() - v.log10()).abs();
        ticks
            .iter()
            .min_by(|a, b| far(a).total_cmp(&far(b)))
            .map(|t| t.1.clone())
            .unwrap_or_default()
    };
    let shade = |d: f64| dws_colour((d.log10() - llo) / (lhi - llo));
    figure!(stem, fr.size, |root| {
        let [main, foot, bar] = section_panels(&root, &fr)?;
        let mut ch = section_axes(&main, &fr, &title)?;
        let cells = (0..s.nz).flat_map(|j| (0..s.nx).map(move |i| (i, j)));
        ch.draw_series(cells.filter_map(|(i, j)| {
            let d = f.dws[s.idx(i, j)];
            if d.is_nan() {
                return None; // air
            }
            let c = if d > 0.0 { shade(d) } else { NO_RAY };
            Some(node_cell(&s, &fr, i, j, c))
        }))?;
        let alpha = ray_alpha(&ch, &s, f.dws, f.rays.iter().step_by(every));
        ch.draw_series(
            f.rays
                .iter()
                .step_by(every)
                .map(|r| PathElement::new(r.as_slice(), BLACK.mix(alpha).stroke_width(1))),
        )?;
        draw_surface(&mut ch, &fr, f.surface)?;
        draw_stations(&mut ch, f.receivers, f.sources)?;
        // the footnote after the legend: with the ray note this legend can run past the
        // velocity section's footnote position
        let legend_w = foot
            .estimate_text_size(&legend, &("sans-serif", 14).into())?
            .0;
        let note_x = (80 + legend_w as i32 + 40).max(560);
        draw_footer(&foot, &legend, f.footnote.as_deref(), note_x)?;
        let keys: Vec<f64> = ticks.iter().map(|t| t.0).collect();
        let (dlo, dhi) = (10f64.powf(llo), 10f64.powf(lhi));
        let mut cb = colour_bar(&bar, (dlo..dhi).log_scale().with_key_points(keys))?;
        let n = 120;
        cb.draw_series((0..n).map(|k| {
            let at = |k: f64| 10f64.powf(llo + (lhi - llo) * k / n as f64);
            Rectangle::new(
                [(0.0, at(k as f64)), (1.0, at(k as f64 + 1.0))],
                dws_colour((k as f64 + 0.5) / n as f64).filled(),
            )
        }))?;
        cb.configure_mesh()
            .disable_mesh()
            .disable_x_axis()
            .y_desc("derivative weight sum (m, log scale)")
            .y_label_formatter(&tick_label)
            .label_style(("sans-serif", 14))
            .axis_desc_style(("sans-serif", 15))
            .draw()?;
        // the no-ray grey as a swatch under the bar, outside the scale it is not part of
        let (bx, by) = cb.plotting_area().get_pixel_range();
        let top = by.end + 12;
        root.draw(&Rectangle::new(
            [(bx.start, top), (bx.end, top + 14)],
            NO_RAY.filled(),
        ))?;
        root.draw(&Text::new(
            "no ray",
            (bx.end + 5, top),
            ("sans-serif", 14).into_font(),
        ))?;
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

mod comparison;
pub use comparison::{fits_overlay, side_by_side, FitPicks, FitSeries, ModelPanel, SideBySide};
