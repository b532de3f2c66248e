//! Shared by the three method-comparison experiments (`picks_count`, `checkerboard`,
//! `runtime_scaling`): the synthetic site, synthetic picks, running every method of
//! `compare` on one survey, and the plotting.
//!
//! Picks are made as `site_suite` makes them: fast marching through the true model on
//! a 0.125 m grid (sampled in slowness), plus seeded Gaussian noise
//! (`slowfield::synthetic::picks_with`).

#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::sync::Once;

use plotters::coord::combinators::BindKeyPoints;
use plotters::coord::types::RangedCoordf64;
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::FontStyle;

use slowfield::compare::{Contender, Entry};
use slowfield::inversion::{self, Event, MethodDetail, Problem, Resume, Silent};
use slowfield::model::{GridSpec, VelocityGrid};
use slowfield::pinn::Checkpoint;
use slowfield::settings::RunSettings;
use slowfield::survey::{Pick, Point, Survey};

/// Noise of the synthetic picks, s.
pub const SIGMA: f64 = 0.5e-3;
/// Seed of the noise.
pub const SEED: u64 = 7;
/// Cell of the fast marching that makes the synthetic picks (a quarter of the default
/// inversion cell, as in `site_suite`).
pub const DATA_CELL: f64 = 0.125;

/// `--quick` on the command line or `QUICK=1`: a smoke run (short PINN training,
/// fewer cases); its results are not the ones committed.
pub fn quick() -> bool {
    std::env::args().any(|a| a == "--quick")
        || std::env::var("QUICK").is_ok_and(|v| !v.is_empty() && v != "0")
}

/// The product's default settings, or in a quick run a PINN of 200 steps and two
/// refinement iterations.
pub fn base_settings() -> RunSettings {
    let mut s = RunSettings::default();
    if quick() {
        s.pinn.steps = 200;
        s.refine.iterations = 2;
    }
    s
}

/// The folder of an experiment's results (`experiments/results/<name>`, or
/// `target/method_compare_quick/<name>` for a quick run, never committed).
pub fn results_dir(name: &str) -> anyhow::Result<PathBuf> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let dir = if quick() {
        root.join("target/method_compare_quick").join(name)
    } else {
        root.join("experiments/results").join(name)
    };
    std::fs::create_dir_all(&dir)?;
    Ok(dir)
}

/// The refractor site of experiments 1 and 3 (invented for them): a 120 m line of 61
/// receivers 2 m apart over gently rolling ground; 450 + 35·depth m/s soil over rock
/// of 2100 + 50·(depth below its head) m/s (at most 3000 m/s). The rock head
/// undulates 5 ± 1.5 m deep (70 m period) and drops into a trough 4 m deeper at
/// x = 84 m; the soil is 15 % slower west of x ≈ 40 m (a smooth step 10 m wide).
pub struct Site;

impl Site {
    /// Ground elevation, m.
    pub fn ground(x: f64) -> f64 {
        60.0 + 0.02 * x + 1.0 * (x / 20.0).sin()
    }

    /// Depth of the rock head below the ground, m.
    pub fn rockhead(x: f64) -> f64 {
        5.0 + 1.5 * (2.0 * std::f64::consts::PI * x / 70.0).sin()
            + 4.0 * (-((x - 84.0) / 6.0).powi(2)).exp()
    }

    /// True velocity at `x` and `depth` below the ground, m/s.
    pub fn velocity(x: f64, depth: f64) -> f64 {
        let h = Site::rockhead(x);
        if depth < h {
            let slow = 1.0 - 0.15 * 0.5 * (1.0 - ((x - 40.0) / 5.0).tanh());
            (450.0 + 35.0 * depth) * slow
        } else {
            (2100.0 + 50.0 * (depth - h)).min(3000.0)
        }
    }

    /// Receiver positions, m.
    pub fn receivers() -> Vec<f64> {
        (0..61).map(|k| 2.0 * k as f64).collect()
    }

    /// Every shot position any experiment uses: one at every other receiver (4 m)
    /// and one 6 m off each end.
    pub fn shots() -> Vec<f64> {
        let mut s = vec![-6.0];
        s.extend((0..31).map(|k| 4.0 * k as f64));
        s.push(126.0);
        s
    }
}

impl Site {
    /// The picks of `all` (made on every receiver and every shot of [`Site::shots`])
    /// that a level keeps: receivers every `receiver_m`, shots every `shot_m` along
    /// the line and the two off-end shots.
    pub fn level(all: &Survey, receiver_m: f64, shot_m: f64) -> Survey {
        let on_step = |x: f64, step: f64| {
            let k = x / step;
            (k - k.round()).abs() < 1e-6
        };
        let end = |x: f64| !(0.0..=120.0).contains(&x);
        all.without(|p| {
            !(on_step(p.receiver.x, receiver_m) && (end(p.source.x) || on_step(p.source.x, shot_m)))
        })
        .0
    }
}

/// Picks with placeholder times for every (shot, receiver) pair, on `ground`, no
/// trace at the shot itself.
pub fn geometry(shots: &[f64], receivers: &[f64], ground: fn(f64) -> f64) -> Survey {
    let mut picks = Vec::new();
    for &s in shots {
        for &r in receivers {
            if (r - s).abs() < 0.01 {
                continue;
            }
            picks.push(Pick {
                shot: format!("S{s:+06.1}"),
                source: Point::new(s, ground(s)),
                receiver: Point::new(r, ground(r)),
                time: 1.0,
                sigma: None,
                line: 0,
            });
        }
    }
    Survey::from_picks(picks).expect("geometry")
}

/// The true model of a velocity function (of x and depth below the ground) on a grid
/// of `cell` over `survey`, 60 m deep, air above the ground.
pub fn true_grid(survey: &Survey, cell: f64, velocity: impl Fn(f64, f64) -> f64) -> VelocityGrid {
    let (x0, x1) = survey.x_range();
    let top = survey.surface.highest();
    let spec = GridSpec::covering(x0, x1, top - 60.0, top, cell);
    VelocityGrid::from_fn(spec, Some(&survey.surface), |x, z| {
        velocity(x, survey.surface.elevation(x) - z)
    })
}

/// Synthetic picks of `geometry` through `truth`: fast marching on the data cell plus
/// noise of σ = 0.5 ms (seed 7), as `site_suite` makes them.
pub fn synthetic(geometry: &Survey, truth: &VelocityGrid) -> Survey {
    slowfield::synthetic::picks_with(geometry, truth, DATA_CELL, |_| SIGMA, SEED)
        .expect("true times")
}

/// One method's result on one survey.
pub struct Ran {
    /// `compare`'s name of the method.
    pub name: String,
    /// What ran, in words.
    pub label: String,
    /// The model (on the run's inversion grid).
    pub model: VelocityGrid,
    /// Wall-clock seconds (pinn-refined: the PINN's training run plus its own).
    pub seconds: f64,
    /// PINN: training steps; grid: Gauss–Newton forward solves after the first.
    pub steps: usize,
    /// Grid tomography: its number of cells (unknowns).
    pub cells: Option<usize>,
    /// The settings the run resolved (derived values filled in).
    pub resolved: RunSettings,
    /// The run's own judge χ² (on its own problem).
    pub chi2: f64,
}

impl Ran {
    /// The entry for `compare`.
    pub fn entry(&self) -> Entry {
        Entry {
            name: self.name.clone(),
            label: self.label.clone(),
            model: self.model.clone(),
            runtime_s: Some(self.seconds),
        }
    }
}

/// Keeps the last training checkpoint.
#[derive(Default)]
struct Keep(Option<Checkpoint>);

impl inversion::Observer for Keep {
    fn on(&mut self, e: Event<'_>) {
        if let Event::Checkpoint(c) = e {
            self.0 = Some(c.clone());
        }
    }
}

fn ran(name: String, inv: &inversion::Inversion, seconds: f64) -> Ran {
    let (steps, cells) = match &inv.detail {
        MethodDetail::Pinn(p) => (p.steps, None),
        MethodDetail::Grid(g) => (g.forward.solves.saturating_sub(1), Some(g.cells)),
    };
    Ran {
        name,
        label: inv.label.clone(),
        model: inv.model.clone(),
        seconds,
        steps,
        cells,
        resolved: inv.settings.clone(),
        chi2: inv.judge.misfit.chi2,
    }
}

/// Runs each of `methods` on `survey` with `base`'s settings, in sequence, in this
/// process. `pinn` and `pinn-refined` share one training: the PINN runs with its
/// refinement off, and `pinn-refined` resumes from the checkpoint of that finished
/// training (with `steps` set to the steps done, so it cannot train further) and
/// refines; its time is the training run's plus its own. `tag` prefixes the progress
/// lines on stderr.
pub fn run_methods(
    survey: &Survey,
    base: &RunSettings,
    methods: &[Contender],
    tag: &str,
) -> anyhow::Result<Vec<Ran>> {
    let mut out = Vec::new();
    let wants = |c: Contender| methods.contains(&c);
    if wants(Contender::Pinn) || wants(Contender::PinnRefined) {
        let settings = Contender::Pinn.settings(base);
        let problem = Problem::new(survey.clone(), &settings);
        let mut keep = Keep::default();
        let inv = inversion::run(&problem, &settings, Resume::default(), &mut keep)?;
        let pinn = ran(Contender::Pinn.name(), &inv, inv.seconds);
        eprintln!(
            "{tag} {:<22} {:>7.1} s  χ² {:.2}",
            pinn.name, pinn.seconds, pinn.chi2
        );
        if wants(Contender::PinnRefined) {
            let cp = keep
                .0
                .ok_or_else(|| anyhow::anyhow!("the PINN run gave no checkpoint"))?;
            let mut settings = Contender::PinnRefined.settings(base);
            settings.pinn.steps = cp.step();
            let problem = Problem::new(survey.clone(), &settings);
            let inv = inversion::run(
                &problem,
                &settings,
                Resume {
                    checkpoint: Some(cp),
                    outer: None,
                },
                &mut Silent,
            )?;
            let r = ran(
                Contender::PinnRefined.name(),
                &inv,
                pinn.seconds + inv.seconds,
            );
            if r.steps != pinn.steps {
                anyhow::bail!(
                    "pinn-refined trained on: {} steps against the PINN's {}",
                    r.steps,
                    pinn.steps
                );
            }
            eprintln!(
                "{tag} {:<22} {:>7.1} s  χ² {:.2}  (refinement alone {:.1} s)",
                r.name, r.seconds, r.chi2, inv.seconds
            );
            if wants(Contender::Pinn) {
                out.push(pinn);
            }
            out.push(r);
        } else {
            out.push(pinn);
        }
    }
    for &c in methods {
        if matches!(c, Contender::Grid(_)) {
            let settings = c.settings(base);
            let problem = Problem::new(survey.clone(), &settings);
            let inv = inversion::run(&problem, &settings, Resume::default(), &mut Silent)?;
            let r = ran(c.name(), &inv, inv.seconds);
            eprintln!(
                "{tag} {:<22} {:>7.1} s  χ² {:.2}  ({} steps, {} cells)",
                r.name,
                r.seconds,
                r.chi2,
                r.steps,
                r.cells.unwrap_or(0)
            );
            out.push(r);
        }
    }
    // in the order asked
    out.sort_by_key(|r| methods.iter().position(|c| c.name() == r.name));
    Ok(out)
}

/// `Contender::all()`, or the comma-separated list in `METHODS` (names as `compare`
/// takes them).
pub fn methods() -> anyhow::Result<Vec<Contender>> {
    match std::env::var("METHODS") {
        Ok(list) => slowfield::compare::parse_list(&list).map_err(|e| anyhow::anyhow!(e)),
        Err(_) => Ok(Contender::all()),
    }
}

// ---------------------------------------------------------------------------------
// plotting

static FONT: Once = Once::new();

/// Registers the embedded DejaVu Sans as `sans-serif` (as `src/figures.rs` does).
pub fn font() {
    FONT.call_once(|| {
        let bytes: &'static [u8] = include_bytes!("../../assets/DejaVuSans.ttf");
        let _ = plotters::style::register_font("sans-serif", FontStyle::Normal, bytes);
        let _ = plotters::style::register_font("sans-serif", FontStyle::Bold, bytes);
    });
}

/// Colour and marker of a method in every line plot.
pub fn style_of(name: &str) -> (RGBColor, Marker) {
    match name {
        "pinn" => (RGBColor(230, 120, 0), Marker::Triangle),
        "pinn-refined" => (RGBColor(200, 20, 30), Marker::Triangle),
        "grid-smoothness" => (RGBColor(20, 90, 200), Marker::Circle),
        "grid-total-variation" => (RGBColor(0, 170, 190), Marker::Circle),
        "grid-minimum-support" => (RGBColor(40, 150, 40), Marker::Circle),
        "grid-wavelet-haar" => (RGBColor(130, 40, 170), Marker::Square),
        "grid-wavelet-d4" => (RGBColor(200, 60, 170), Marker::Square),
        _ => (RGBColor(90, 90, 90), Marker::Circle),
    }
}

/// Marker shape of a series.
#[derive(Clone, Copy)]
pub enum Marker {
    /// filled circle
    Circle,
    /// filled triangle
    Triangle,
    /// filled square
    Square,
}

/// One series of a line plot.
pub struct Series {
    /// Legend text.
    pub name: String,
    /// Points (x, y); non-finite ones are skipped.
    pub points: Vec<(f64, f64)>,
    /// Colour.
    pub color: RGBColor,
    /// Marker.
    pub marker: Marker,
}

impl Series {
    /// A series styled for method `name`.
    pub fn method(name: &str, points: Vec<(f64, f64)>) -> Series {
        let (color, marker) = style_of(name);
        Series {
            name: name.to_string(),
            points,
            color,
            marker,
        }
    }
}

/// A panel of a line plot.
pub struct Panel {
    /// Title above the panel.
    pub title: String,
    /// x-axis label (with unit).
    pub x_label: String,
    /// y-axis label (with unit).
    pub y_label: String,
    /// Logarithmic y axis.
    pub log_y: bool,
    /// Logarithmic x axis.
    pub log_x: bool,
    /// The lines.
    pub series: Vec<Series>,
    /// Horizontal reference line (y, label).
    pub reference: Option<(f64, String)>,
}

fn range_of(vals: impl Iterator<Item = f64>, log: bool) -> (f64, f64) {
    let v: Vec<f64> = vals
        .filter(|v| v.is_finite() && (!log || *v > 0.0))
        .collect();
    let lo = v.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = v.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !lo.is_finite() {
        return (1.0, 10.0);
    }
    if log {
        (lo / 1.25, hi * 1.25)
    } else {
        // from zero when every value is positive: the reader sees proportions
        let pad = 0.06 * (hi - lo).max(1e-9);
        (if lo >= 0.0 { 0.0 } else { lo - pad }, hi + pad)
    }
}

fn draw_markers<
    'a,
    DB: DrawingBackend + 'a,
    CT: plotters::coord::CoordTranslate<From = (f64, f64)>,
>(
    chart: &mut ChartContext<'a, DB, CT>,
    s: &Series,
) -> Result<(), DrawingAreaErrorKind<DB::ErrorType>> {
    let pts: Vec<(f64, f64)> = s
        .points
        .iter()
        .copied()
        .filter(|p| p.0.is_finite() && p.1.is_finite())
        .collect();
    let c = s.color;
    let style = ShapeStyle::from(&c).stroke_width(2);
    chart.draw_series(LineSeries::new(pts.clone(), style))?;
    chart.draw_series(pts.iter().map(|&p| {
        EmptyElement::at(p) + Polygon::new(marker_points(s.marker, 4), s.color.filled())
    }))?;
    Ok(())
}

/// A marker's outline relative to its point (every shape a polygon, so that one
/// element type draws them all).
fn marker_points(m: Marker, r: i32) -> Vec<(i32, i32)> {
    match m {
        Marker::Circle => (0..10)
            .map(|k| {
                let a = std::f64::consts::TAU * k as f64 / 10.0;
                (
                    (r as f64 * a.cos()).round() as i32,
                    (r as f64 * a.sin()).round() as i32,
                )
            })
            .collect(),
        Marker::Square => vec![(-r, -r), (r, -r), (r, r), (-r, r)],
        Marker::Triangle => vec![(0, -r - 1), (r + 1, r), (-r - 1, r)],
    }
}

type DrawResult<E> = Result<(), DrawingAreaErrorKind<E>>;

/// Key points of a logarithmic axis from `lo` to `hi`: 1, 2 and 5 times the powers of
/// ten (and 3 when that leaves fewer than four).
fn log_keys(lo: f64, hi: f64) -> Vec<f64> {
    let mut out = Vec::new();
    if !(lo > 0.0 && hi > lo && hi.is_finite()) {
        return out;
    }
    for mult in [vec![1.0, 2.0, 5.0], vec![1.0, 2.0, 3.0, 5.0, 7.0]] {
        out.clear();
        let mut p = 10f64.powf(lo.log10().floor());
        while p <= hi {
            for m in &mult {
                let v = m * p;
                if v >= lo && v <= hi {
                    out.push(v);
                }
            }
            p *= 10.0;
        }
        if out.len() >= 4 {
            break;
        }
    }
    out
}

/// A tick label without trailing zeros.
pub fn tick(v: f64) -> String {
    let s = if v.abs() >= 100.0 {
        format!("{v:.0}")
    } else {
        format!("{v:.2}")
    };
    let s = if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    };
    if s == "-0" {
        "0".into()
    } else {
        s
    }
}

fn draw_panel<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    p: &Panel,
) -> DrawResult<DB::ErrorType> {
    let (xlo, xhi) = range_of(
        p.series.iter().flat_map(|s| s.points.iter().map(|q| q.0)),
        p.log_x,
    );
    let (ylo, yhi) = range_of(
        p.series
            .iter()
            .flat_map(|s| s.points.iter().map(|q| q.1))
            .chain(p.reference.iter().map(|r| r.0)),
        p.log_y,
    );
    let mut chart = ChartBuilder::on(area);
    chart
        .caption(&p.title, ("sans-serif", 19))
        .margin(14)
        .margin_right(22)
        .x_label_area_size(50)
        .y_label_area_size(66);
    let fmt = |v: &f64| tick(*v);
    macro_rules! finish {
        ($chart:expr) => {{
            let mut chart = $chart;
            chart
                .configure_mesh()
                .x_desc(&p.x_label)
                .y_desc(&p.y_label)
                .x_label_formatter(&fmt)
                .y_label_formatter(&fmt)
                .label_style(("sans-serif", 14))
                .axis_desc_style(("sans-serif", 16))
                .light_line_style(RGBColor(240, 240, 240))
                .bold_line_style(RGBColor(215, 215, 215))
                .draw()?;
            if let Some((y, _)) = &p.reference {
                let grey = RGBColor(110, 110, 110);
                chart.draw_series(LineSeries::new(
                    vec![(xlo, *y), (xhi, *y)],
                    ShapeStyle::from(&grey).stroke_width(1),
                ))?;
            }
            for s in &p.series {
                draw_markers(&mut chart, s)?;
            }
        }};
    }
    let (xk, yk) = (log_keys(xlo, xhi), log_keys(ylo, yhi));
    match (p.log_x, p.log_y) {
        (true, true) => finish!(chart.build_cartesian_2d(
            (xlo..xhi).log_scale().with_key_points(xk),
            (ylo..yhi).log_scale().with_key_points(yk)
        )?),
        (true, false) => {
            finish!(chart.build_cartesian_2d((xlo..xhi).log_scale().with_key_points(xk), ylo..yhi)?)
        }
        (false, true) => {
            finish!(chart.build_cartesian_2d(xlo..xhi, (ylo..yhi).log_scale().with_key_points(yk))?)
        }
        (false, false) => finish!(chart.build_cartesian_2d(xlo..xhi, ylo..yhi)?),
    }
    Ok(())
}

/// Height of a line figure's title and legend rows, px.
const HEAD: u32 = 100;

/// Draws `panels` side by side (`cols` per row) under a common `title` and one legend
/// for all of them, into `stem.png` and `stem.svg`.
pub fn line_figure(
    stem: &Path,
    title: &str,
    panels: &[Panel],
    cols: usize,
    panel: (u32, u32),
) -> anyhow::Result<()> {
    font();
    let rows = panels.len().div_ceil(cols);
    let size = (panel.0 * cols as u32, panel.1 * rows as u32 + HEAD);
    let png = stem.with_extension("png");
    {
        let root = BitMapBackend::new(&png, size).into_drawing_area();
        draw_line_figure(&root, title, panels, cols, rows)
            .map_err(|e| anyhow::anyhow!("{}: {e}", png.display()))?;
        root.present().map_err(|e| anyhow::anyhow!("{e}"))?;
    }
    let svg = stem.with_extension("svg");
    {
        let root = SVGBackend::new(&svg, size).into_drawing_area();
        draw_line_figure(&root, title, panels, cols, rows)
            .map_err(|e| anyhow::anyhow!("{}: {e}", svg.display()))?;
        root.present().map_err(|e| anyhow::anyhow!("{e}"))?;
    }
    Ok(())
}

fn draw_line_figure<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    title: &str,
    panels: &[Panel],
    cols: usize,
    rows: usize,
) -> DrawResult<DB::ErrorType> {
    root.fill(&WHITE)?;
    let (top, rest) = root.split_vertically(HEAD);
    top.draw(&Text::new(
        title.to_string(),
        (14, 10),
        ("sans-serif", 22).into_font().style(FontStyle::Bold),
    ))?;
    // one legend for every panel: each series once, then the reference line
    let mut seen: Vec<(String, RGBColor, Option<Marker>)> = Vec::new();
    for p in panels {
        for s in &p.series {
            if !seen.iter().any(|e| e.0 == s.name) {
                seen.push((s.name.clone(), s.color, Some(s.marker)));
            }
        }
    }
    for p in panels {
        if let Some((_, text)) = &p.reference {
            if !seen.iter().any(|e| &e.0 == text) {
                seen.push((text.clone(), RGBColor(110, 110, 110), None));
            }
        }
    }
    let width = top.dim_in_pixel().0 as i32;
    let legend_font: TextStyle = ("sans-serif", 15).into();
    let (mut x, mut y) = (20i32, 54i32);
    for (name, color, marker) in &seen {
        let w = top.estimate_text_size(name, &legend_font)?.0 as i32 + 30 + 22;
        if x + w > width - 10 && x > 20 {
            x = 20;
            y += 24;
        }
        top.draw(&PathElement::new(
            vec![(x, y), (x + 24, y)],
            ShapeStyle::from(color).stroke_width(if marker.is_some() { 2 } else { 1 }),
        ))?;
        if let Some(m) = marker {
            top.draw(
                &(EmptyElement::at((x + 12, y))
                    + Polygon::new(marker_points(*m, 4), color.filled())),
            )?;
        }
        top.draw(&Text::new(
            name.clone(),
            (x + 30, y - 8),
            legend_font.clone(),
        ))?;
        x += w;
    }
    let areas = rest.split_evenly((rows, cols));
    for (a, p) in areas.iter().zip(panels) {
        draw_panel(a, p)?;
    }
    Ok(())
}

/// Diverging blue–white–red colour of `v` in −`lim`..`lim`.
pub fn diverging(v: f64, lim: f64) -> RGBColor {
    let t = (v / lim).clamp(-1.0, 1.0);
    let (r, g, b) = if t >= 0.0 {
        // white to red
        (1.0, 1.0 - 0.85 * t, 1.0 - 0.85 * t)
    } else {
        let t = -t;
        (1.0 - 0.85 * t, 1.0 - 0.6 * t, 1.0)
    };
    RGBColor((r * 255.0) as u8, (g * 255.0) as u8, (b * 255.0) as u8)
}

/// Draws one section (`value` at each node, `None` where not drawn: air, or pale
/// grey where `pale` says so) into `area` with axes in metres, `z_exag` the vertical
/// exaggeration of the frame's aspect.
pub struct Section<'a> {
    /// The grid.
    pub spec: GridSpec,
    /// Value at each node (NaN: air, left white).
    pub value: &'a [f64],
    /// Nodes drawn pale (outside the mask).
    pub pale: Option<&'a [bool]>,
    /// Value to colour.
    pub color: &'a dyn Fn(f64) -> RGBColor,
    /// Title above the panel.
    pub title: String,
    /// Elevation range shown, m.
    pub z_range: (f64, f64),
    /// x range shown, m.
    pub x_range: (f64, f64),
    /// Draw axis labels.
    pub axis_labels: bool,
}

/// The chart of a section panel (to draw on it further).
pub type SectionChart<'a, DB> = ChartContext<'a, DB, Cartesian2d<RangedCoordf64, RangedCoordf64>>;

/// Draws a section panel; returns its chart.
pub fn draw_section<'a, DB: DrawingBackend>(
    area: &'a DrawingArea<DB, Shift>,
    s: &Section<'_>,
) -> Result<SectionChart<'a, DB>, DrawingAreaErrorKind<DB::ErrorType>> {
    let sp = s.spec;
    let mut chart = ChartBuilder::on(area)
        .caption(&s.title, ("sans-serif", 15))
        .margin(6)
        .x_label_area_size(if s.axis_labels { 34 } else { 22 })
        .y_label_area_size(if s.axis_labels { 50 } else { 34 })
        .build_cartesian_2d(s.x_range.0..s.x_range.1, s.z_range.0..s.z_range.1)?;
    let mut mesh = chart.configure_mesh();
    let fmt = |v: &f64| tick(*v);
    mesh.disable_mesh()
        .x_label_formatter(&fmt)
        .y_label_formatter(&fmt)
        .label_style(("sans-serif", 11))
        .axis_desc_style(("sans-serif", 12))
        .x_labels(6)
        .y_labels(4);
    if s.axis_labels {
        mesh.x_desc("x, m").y_desc("elevation, m");
    }
    mesh.draw()?;
    let (hx, hz) = (0.5 * sp.dx, 0.5 * sp.dz);
    let mut rects = Vec::new();
    for j in 0..sp.nz {
        let z = sp.z(j);
        if z < s.z_range.0 - hz || z > s.z_range.1 + hz {
            continue;
        }
        for i in 0..sp.nx {
            let k = sp.idx(i, j);
            let v = s.value[k];
            if v.is_nan() {
                continue;
            }
            let x = sp.x(i);
            if x < s.x_range.0 - hx || x > s.x_range.1 + hx {
                continue;
            }
            let c = if s.pale.is_some_and(|p| !p[k]) {
                RGBColor(228, 228, 228)
            } else {
                (s.color)(v)
            };
            rects.push(Rectangle::new(
                [(x - hx, z + hz), (x + hx, z - hz)],
                c.filled(),
            ));
        }
    }
    chart.draw_series(rects)?;
    Ok(chart)
}

/// A horizontal colour bar from `lo` to `hi` with `label`.
pub fn color_bar<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    lo: f64,
    hi: f64,
    label: &str,
    color: &dyn Fn(f64) -> RGBColor,
) -> DrawResult<DB::ErrorType> {
    let mut chart = ChartBuilder::on(area)
        .margin_left(200)
        .margin_right(200)
        .margin_top(4)
        .x_label_area_size(40)
        .build_cartesian_2d(lo..hi, 0.0..1.0)?;
    chart
        .configure_mesh()
        .disable_mesh()
        .disable_y_axis()
        .x_label_formatter(&|v| tick(*v))
        .x_desc(label)
        .label_style(("sans-serif", 13))
        .axis_desc_style(("sans-serif", 14))
        .draw()?;
    let n = 200;
    chart.draw_series((0..n).map(|k| {
        let a = lo + (hi - lo) * k as f64 / n as f64;
        let b = lo + (hi - lo) * (k + 1) as f64 / n as f64;
        Rectangle::new([(a, 0.0), (b, 1.0)], color(0.5 * (a + b)).filled())
    }))?;
    Ok(())
}

/// Writes CSV rows (first the header) to `path`.
pub fn write_csv(path: &Path, header: &[&str], rows: &[Vec<String>]) -> anyhow::Result<()> {
    let mut w = csv::Writer::from_path(path)?;
    w.write_record(header)?;
    for r in rows {
        w.write_record(r)?;
    }
    w.flush()?;
    Ok(())
}

/// The rows of a CSV file written by [`write_csv`] (the header left out).
pub fn read_csv(path: &Path) -> anyhow::Result<Vec<Vec<String>>> {
    let mut r = csv::Reader::from_path(path)?;
    let mut out = Vec::new();
    for rec in r.records() {
        out.push(rec?.iter().map(str::to_string).collect());
    }
    Ok(out)
}

/// `--replot` on the command line: redraw the figures from the committed CSV files
/// without running anything.
pub fn replot() -> bool {
    std::env::args().any(|a| a == "--replot")
}

/// `v` with `digits` decimals, empty when absent or not finite.
pub fn fmt_opt(v: Option<f64>, digits: usize) -> String {
    v.filter(|v| v.is_finite())
        .map_or(String::new(), |v| format!("{v:.digits$}"))
}
