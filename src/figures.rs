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
    /// The 68 % band of the depth to the interface's velocity, one entry per model
    /// column that has one: (x, upper elevation, lower elevation), sorted by x. Drawn
    /// as a light translucent band under the dashed `interface` line, broken where
    /// neighbouring columns are more than 3 grid steps apart.
    pub band: Option<Vec<(f64, f64, f64)>>,
    /// What the node values are, and so the colour scale and its label.
    pub scale: SectionScale,
}

/// What the values of a section are: they decide its colour scale and bar label.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub enum SectionScale {
    /// P-wave velocity, m/s, in viridis.
    #[default]
    Velocity,
    /// Spread (1σ) of an ensemble of models, m/s, in a pale-lilac-to-black ramp that
    /// is not to be read as velocity.
    Spread,
}

impl SectionScale {
    /// The colour of `v` on this scale over `lo..hi`.
    fn colour(self, v: f64, lo: f64, hi: f64) -> RGBColor {
        match self {
            SectionScale::Velocity => colour(v, lo, hi),
            SectionScale::Spread => ramp(&SPREAD_PALETTE, (v - lo) / (hi - lo)),
        }
    }

    /// The colour bar's label.
    fn label(self) -> &'static str {
        match self {
            SectionScale::Velocity => "velocity (m/s)",
            SectionScale::Spread => "ensemble spread, 1σ (m/s)",
        }
    }

    /// What the contour lines are, in the legend.
    fn contours(self) -> &'static str {
        match self {
            SectionScale::Velocity => "velocity contours",
            SectionScale::Spread => "spread contours",
        }
    }
}

/// Light-to-dark sequence for the ensemble spread: pale lilac through violet and
/// plum to near black. Neither viridis (velocity) nor the coverage figure's
/// yellow-to-brown, so a spread map is not read as either. It starts short of white,
/// so the smallest spreads stand apart from the page and from air.
const SPREAD_PALETTE: [(u8, u8, u8); 7] = [
    (240, 234, 246),
    (206, 188, 226),
    (167, 134, 202),
    (128, 84, 172),
    (93, 44, 132),
    (55, 18, 80),
    (14, 4, 20),
];

/// The colour at `t` in `[0, 1]` (clamped) along a palette, interpolated linearly
/// between its entries.
fn ramp(palette: &[(u8, u8, u8)], t: f64) -> RGBColor {
    let t = if t.is_nan() { 0.0 } else { t.clamp(0.0, 1.0) };
    let f = t * (palette.len() - 1) as f64;
    let k = (f.floor() as usize).min(palette.len() - 2);
    let w = f - k as f64;
    let (a, b) = (palette[k], palette[k + 1]);
    let mix = |p: u8, q: u8| (p as f64 + w * (q as f64 - p as f64)).round() as u8;
    RGBColor(mix(a.0, b.0), mix(a.1, b.1), mix(a.2, b.2))
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

/// The filled cells of every node `colour` gives a colour (`None`: not drawn), each
/// run of neighbours of one colour along a row merged into one rectangle. The pixels
/// are those of the single cells (see `node_cell`), but a smooth model's SVG has a
/// fraction of the elements.
fn cell_runs(
    s: &GridSpec,
    fr: &SectionFrame,
    colour: impl Fn(usize) -> Option<RGBColor>,
) -> Vec<Rectangle<(f64, f64)>> {
    let (half_x, half_z) = (0.5 * s.dx, 0.5 * s.dz);
    let mut out = Vec::new();
    for j in 0..s.nz {
        let z = s.z(j);
        let (zlo, zhi) = ((z - half_z).max(fr.z.0), (z + half_z).min(fr.z.1));
        let mut i = 0;
        while i < s.nx {
            let Some(c) = colour(s.idx(i, j)) else {
                i += 1;
                continue;
            };
            let start = i;
            while i + 1 < s.nx && colour(s.idx(i + 1, j)) == Some(c) {
                i += 1;
            }
            out.push(Rectangle::new(
                [
                    ((s.x(start) - half_x).max(fr.x.0), zlo),
                    ((s.x(i) + half_x).min(fr.x.1), zhi),
                ],
                c.filled(),
            ));
            i += 1;
        }
    }
    out
}

/// Colour of the hatching over unconstrained ground.
const HATCH: RGBColor = RGBColor(58, 58, 58);

/// Distance between neighbouring hatch lines along a pixel row or column, px: the
/// lines are 45° on screen, so they are 13/√2 ≈ 9.2 px apart.
const HATCH_STEP: i32 = 13;

/// Hatches the cells of the nodes of `s` for which `mark(k)` holds: thin dark-grey
/// lines rising at 45° on the screen, whatever the vertical exaggeration, clipped to
/// those cells (and to the plot). The cells are rasterised into a mask of the plot's
/// pixels, and each line is drawn as one piece per run of masked pixels it crosses,
/// so a hatched region of many nodes costs a few elements per line, not per node.
fn hatch_nodes<DB: DrawingBackend>(
    ch: &SectionChart<DB>,
    s: &GridSpec,
    mark: impl Fn(usize) -> bool,
) -> Drawn<(), DB> {
    let area = ch.plotting_area().strip_coord_spec();
    let (w, h) = area.dim_in_pixel();
    let (w, h) = (w as i32, h as i32);
    let (bx, by) = area.get_base_pixel();
    let (xr, zr) = (ch.x_range(), ch.y_range());
    // cell edges from one formula, so neighbouring cells share theirs exactly
    let x_edge = |e: usize| (s.x0 + (e as f64 - 0.5) * s.dx).clamp(xr.start, xr.end);
    let z_edge = |e: usize| (s.z0 + (e as f64 - 0.5) * s.dz).clamp(zr.start, zr.end);
    let mut mask = vec![false; (w.max(0) * h.max(0)) as usize];
    let mut any = false;
    for j in 0..s.nz {
        for i in 0..s.nx {
            if !mark(s.idx(i, j)) {
                continue;
            }
            // the cell's pixels, half-open so that a line stops short of the
            // neighbouring cell
            let a = ch.backend_coord(&(x_edge(i), z_edge(j + 1)));
            let b = ch.backend_coord(&(x_edge(i + 1), z_edge(j)));
            let (u0, u1) = ((a.0 - bx).clamp(0, w), (b.0 - bx).clamp(0, w));
            let (v0, v1) = ((a.1 - by).clamp(0, h), (b.1 - by).clamp(0, h));
            for v in v0..v1 {
                let row = (v * w) as usize;
                mask[row + u0 as usize..row + u1 as usize].fill(true);
                any |= u1 > u0;
            }
        }
    }
    if !any {
        return Ok(());
    }
    // the lines u + v = c; along one, u runs over [c − (h − 1), c] within the plot
    let mut pieces = Vec::new();
    for c in (HATCH_STEP / 2..w + h).step_by(HATCH_STEP as usize) {
        let (ua, ub) = ((c - (h - 1)).max(0), c.min(w - 1));
        let mut start = None;
        for u in ua..=ub + 1 {
            let on = u <= ub && mask[((c - u) * w + u) as usize];
            match (on, start) {
                (true, None) => start = Some(u),
                (false, Some(u0)) => {
                    if u - 1 > u0 {
                        pieces.push(vec![(u0, c - u0), (u - 1, c - (u - 1))]);
                    }
                    start = None;
                }
                _ => {}
            }
        }
    }
    for p in pieces {
        area.draw(&PathElement::new(p, HATCH.stroke_width(1)))?;
    }
    Ok(())
}

/// The band of `band` ((x, upper, lower) per column, sorted by x) as translucent
/// white polygons with thin white edges, one per run of columns no more than
/// `max_gap` apart; a lone column is drawn `dx` wide.
fn draw_band<DB: DrawingBackend>(
    ch: &mut SectionChart<DB>,
    band: &[(f64, f64, f64)],
    max_gap: f64,
    dx: f64,
) -> Drawn<(), DB> {
    let fill = WHITE.mix(0.45);
    let edge = WHITE.mix(0.9).stroke_width(1);
    let mut start = 0;
    for end in 1..=band.len() {
        if end < band.len() && (band[end].0 - band[end - 1].0).abs() <= max_gap {
            continue;
        }
        let run = &band[start..end];
        start = end;
        let run = match *run {
            [(x, a, b)] => vec![(x - 0.5 * dx, a, b), (x + 0.5 * dx, a, b)],
            _ => run.to_vec(),
        };
        let upper: Vec<(f64, f64)> = run.iter().map(|&(x, a, _)| (x, a)).collect();
        let lower: Vec<(f64, f64)> = run.iter().map(|&(x, _, b)| (x, b)).collect();
        let outline: Vec<(f64, f64)> = upper.iter().chain(lower.iter().rev()).copied().collect();
        ch.draw_series(std::iter::once(Polygon::new(outline, fill.filled())))?;
        ch.draw_series([upper, lower].map(|l| PathElement::new(l, edge)))?;
    }
    Ok(())
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
/// and a colour bar, with the vertical exaggeration stated. Ground the rays do not
/// constrain (`covered` false) is washed grey and hatched; the `band` is drawn under
/// the dashed `interface`; `scale` picks the colour scale (velocity, or an ensemble's
/// spread). The section is the same for any node values: a spread map is drawn
/// through it too.
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
    // unconstrained ground: covered false, not air
    let open = |k: usize| d.covered.and_then(|c| c.get(k)) == Some(&false) && !m.v[k].is_nan();
    let mut legend = String::from("▲ receivers   ● shots   — ground surface");
    if !levels.is_empty() {
        legend += &format!("   black lines: {}", d.scale.contours());
    }
    if (0..s.len()).any(open) {
        legend += "   hatched: no ray coverage";
    }
    if d.band.as_ref().is_some_and(|b| !b.is_empty()) {
        legend += "   light band: 68 % range of the dashed line";
    }
    figure!(stem, fr.size, |root| {
        let [main, foot, bar] = section_panels(&root, &fr)?;
        let mut ch = section_axes(&main, &fr, &title)?;
        ch.draw_series(cell_runs(&s, &fr, |k| {
            let v = m.v[k];
            if v.is_nan() {
                return None; // air
            }
            let c = d.scale.colour(v, vlo, vhi);
            if !open(k) {
                return Some(c);
            }
            // unconstrained: wash towards grey
            let wash = |x: u8| ((x as u16 + 2 * 200) / 3) as u8;
            Some(RGBColor(wash(c.0), wash(c.1), wash(c.2)))
        }))?;
        hatch_nodes(&ch, &s, open)?;
        for (_, ss) in &segs {
            ch.draw_series(
                ss.iter().map(|sg| {
                    PathElement::new(vec![sg[0], sg[1]], BLACK.mix(0.75).stroke_width(1))
                }),
            )?;
        }
        draw_surface(&mut ch, &fr, d.surface)?;
        if let Some(band) = &d.band {
            draw_band(&mut ch, band, 3.0 * s.dx, s.dx)?;
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
        draw_stations(&mut ch, d.receivers, d.sources)?;
        let legend_w = foot
            .estimate_text_size(&legend, &("sans-serif", 14).into())?
            .0;
        let note_x = (80 + legend_w as i32 + 40).max(560);
        draw_footer(&foot, &legend, d.footnote.as_deref(), note_x)?;
        let mut cb = colour_bar(&bar, vlo..vhi)?;
        let n = 120;
        cb.draw_series((0..n).map(|k| {
            let a = vlo + (vhi - vlo) * k as f64 / n as f64;
            let b = vlo + (vhi - vlo) * (k + 1) as f64 / n as f64;
            Rectangle::new(
                [(0.0, a), (1.0, b)],
                d.scale.colour(0.5 * (a + b), vlo, vhi).filled(),
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
            .y_desc(d.scale.label())
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
    ramp(&DWS_PALETTE, t)
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

/// Width of a bin of the residual histogram, in σ.
const RESIDUAL_BIN: f64 = 0.25;

/// The residual histogram spans ±this many σ; values beyond fall into the end bins.
const RESIDUAL_LIMIT: f64 = 4.0;

/// Share of a standard normal variable beyond ±2: 2·(1 − Φ(2)).
const NORMAL_BEYOND_2: f64 = 0.045_500_26;

/// Histogram of the normalised residuals r/σ (observed − predicted over each pick's
/// σ; `residuals_ms[k]` and `sigma_ms[k]` belong to pick `k`) in bins 0.25 wide over
/// −4..4, values beyond ±4 counted in the end bins, with the standard normal density
/// scaled to counts over it: what the histogram would be if the misfit were nothing
/// but picking noise of the stated σ. The legend gives the number of picks, the mean
/// and RMS of r/σ and the share beyond ±2 against the normal's 4.6 %. Picks with a
/// non-finite residual or a σ that is not positive are left out (and the count says
/// so); slices of different lengths are an error; no picks draw an empty figure.
pub fn residual_histogram(
    stem: &Path,
    title: &str,
    residuals_ms: &[f64],
    sigma_ms: &[f64],
) -> Result<(), FigureError> {
    if residuals_ms.len() != sigma_ms.len() {
        return Err(FigureError::Draw {
            file: stem.with_extension("png").display().to_string(),
            message: format!(
                "{} residuals against {} pick σ",
                residuals_ms.len(),
                sigma_ms.len()
            ),
        });
    }
    let z: Vec<f64> = residuals_ms
        .iter()
        .zip(sigma_ms)
        .filter(|(r, s)| r.is_finite() && s.is_finite() && **s > 0.0)
        .map(|(r, s)| r / s)
        .collect();
    let skipped = residuals_ms.len() - z.len();
    let nbins = (2.0 * RESIDUAL_LIMIT / RESIDUAL_BIN).round() as usize;
    let mut counts = vec![0usize; nbins];
    for &v in &z {
        let b = ((v + RESIDUAL_LIMIT) / RESIDUAL_BIN).floor();
        counts[b.clamp(0.0, (nbins - 1) as f64) as usize] += 1;
    }
    let n = z.len();
    let beyond = z.iter().filter(|v| v.abs() > RESIDUAL_LIMIT).count();
    let peak = n as f64 * RESIDUAL_BIN / (2.0 * std::f64::consts::PI).sqrt();
    // at least 0..5 picks, so a near-empty figure does not get fractional ticks
    let ymax = (counts.iter().copied().max().unwrap_or(0) as f64)
        .max(peak)
        .max(5.0)
        * 1.15;
    let mut lines = vec![if n == 0 {
        "no picks".to_string()
    } else if skipped > 0 {
        format!("{n} picks ({skipped} without a finite residual and σ left out)")
    } else {
        format!("{n} picks")
    }];
    if n > 0 {
        let mean = z.iter().sum::<f64>() / n as f64;
        let rms = (z.iter().map(|v| v * v).sum::<f64>() / n as f64).sqrt();
        let over2 = z.iter().filter(|v| v.abs() > 2.0).count() as f64 / n as f64;
        lines.push(format!(
            "mean r/σ {mean:+.2}, RMS r/σ {rms:.2} (noise alone: 0, 1)"
        ));
        lines.push(format!(
            "|r/σ| > 2: {:.1} % (noise alone: {:.1} %)",
            100.0 * over2,
            100.0 * NORMAL_BEYOND_2
        ));
    }
    if beyond > 0 {
        lines.push(format!("{beyond} beyond ±4, counted in the end bins"));
    }
    let curve: Vec<(f64, f64)> = (0..=400)
        .map(|k| {
            let x = -RESIDUAL_LIMIT + 2.0 * RESIDUAL_LIMIT * k as f64 / 400.0;
            (x, peak * (-0.5 * x * x).exp())
        })
        .collect();
    let bar = RGBColor(86, 124, 176);
    let normal = RGBColor(196, 58, 36);
    figure!(stem, (1100, 600), |root| {
        root.fill(&WHITE)?;
        let mut ch = ChartBuilder::on(&root)
            .caption(title, ("sans-serif", 22))
            .margin(14)
            .x_label_area_size(45)
            .y_label_area_size(75)
            .build_cartesian_2d(-RESIDUAL_LIMIT..RESIDUAL_LIMIT, 0.0..ymax)?;
        ch.configure_mesh()
            .light_line_style(TRANSPARENT)
            .bold_line_style(RGBColor(232, 232, 232))
            .x_desc("residual / σ (observed − predicted)")
            .y_desc("picks per bin")
            .x_label_formatter(&tick)
            // counts: whole numbers only
            .y_label_formatter(&|v: &f64| {
                if (v - v.round()).abs() < 1e-9 {
                    format!("{v:.0}")
                } else {
                    String::new()
                }
            })
            .label_style(("sans-serif", 15))
            .axis_desc_style(("sans-serif", 16))
            .draw()?;
        // (left edge, count) of every bar drawn
        let bars: Vec<(f64, f64)> = counts
            .iter()
            .enumerate()
            .filter(|c| *c.1 > 0)
            .map(|(b, &c)| (-RESIDUAL_LIMIT + b as f64 * RESIDUAL_BIN, c as f64))
            .collect();
        ch.draw_series(
            bars.iter()
                .map(|&(x, c)| Rectangle::new([(x, 0.0), (x + RESIDUAL_BIN, c)], bar.filled())),
        )?
        .label("picks, bins 0.25 σ wide")
        .legend(move |(x, y)| Rectangle::new([(x, y - 6), (x + 20, y + 6)], bar.filled()));
        // thin white gaps between neighbouring bars
        ch.draw_series(
            bars.iter()
                .map(|&(x, c)| PathElement::new(vec![(x, 0.0), (x, c)], WHITE.stroke_width(1))),
        )?;
        let curve = if n > 0 { curve.as_slice() } else { &[] };
        ch.draw_series(LineSeries::new(
            curve.iter().copied(),
            normal.stroke_width(2),
        ))?
        .label("standard normal × picks × 0.25: picking noise of the stated σ alone")
        .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 20, y)], normal.stroke_width(2)));
        // ±2: where the share beyond is counted, over the bars
        let dash = RGBColor(100, 100, 100);
        for x in [-2.0, 2.0] {
            let drawn = ch.draw_series(DashedLineSeries::new(
                [(x, 0.0), (x, ymax)],
                6,
                4,
                dash.stroke_width(1),
            ))?;
            if x > 0.0 {
                drawn.label("|r/σ| = 2").legend(move |(x, y)| {
                    EmptyElement::at((x, y))
                        + PathElement::new(vec![(0, 0), (7, 0)], dash.stroke_width(1))
                        + PathElement::new(vec![(12, 0), (19, 0)], dash.stroke_width(1))
                });
            }
        }
        ch.configure_series_labels()
            .position(SeriesLabelPosition::UpperRight)
            .background_style(WHITE.mix(0.85))
            .border_style(BLACK)
            .label_font(("sans-serif", 14))
            .draw()?;
        let (px, py) = ch.plotting_area().get_pixel_range();
        let font = ("sans-serif", 14).into_font();
        for (k, l) in lines.iter().enumerate() {
            root.draw(&Text::new(
                l.clone(),
                (px.start + 10, py.start + 10 + 20 * k as i32),
                font.clone(),
            ))?;
        }
        root.present()?;
        Ok(())
    })
}

mod comparison;
pub use comparison::{fits_overlay, side_by_side, FitPicks, FitSeries, ModelPanel, SideBySide};
