//! The demo's page: one self-contained report of the whole job on the shipped site.

use std::path::{Path, PathBuf};

use super::html::{embedded, escape, report_body, STYLE};
use super::InvertReport;
use crate::compare::Comparison;

/// The demo's `report.html`: what the demo shows and how long each stage took, both
/// methods against the site's true model, then each method's report in full (figures
/// embedded from the run folders `dirs`, the comparison's from `cmp_dir`).
pub fn demo_page(
    reports: &[&InvertReport],
    dirs: &[PathBuf],
    cmp: &Comparison,
    cmp_dir: &Path,
    timings: &[(String, f64)],
    total_s: f64,
) -> String {
    let read = |dir: &Path, stem: &str| std::fs::read(dir.join(format!("{stem}.png"))).ok();
    let stages: String = timings
        .iter()
        .map(|(name, s)| {
            format!(
                "<tr><td>{}</td><td class=\"n\">{s:.1}</td></tr>",
                escape(name)
            )
        })
        .collect();
    let runs: String = reports
        .iter()
        .zip(dirs)
        .map(|(r, d)| {
            format!(
                "<div class=\"method\"><h2 style=\"font-size:1.5em\">Method: {}</h2><p class=\"small\">Run folder: {}</p></div>\n{}",
                escape(&r.label),
                escape(&d.display().to_string()),
                report_body(r, &|stem| read(d, stem), 3)
            )
        })
        .collect();
    let members = reports
        .iter()
        .filter_map(|r| {
            r.ensemble
                .as_ref()
                .map(|e| format!("{}: {} members", r.method, e.members))
        })
        .collect::<Vec<_>>()
        .join(", ");
    format!(
        "<!doctype html><html lang=\"en\"><head><meta charset=\"utf-8\"><meta name=\"viewport\" content=\"width=device-width\">\
<title>slowfield demo: the whole job on a synthetic site</title><style>{STYLE}</style></head><body>\n\
<section class=\"first\"><h1>slowfield demo: velocity section and depth to rock from first-arrival picks</h1>\
<p>The shipped site is a scenario of our own (<code>demo-picks/README.md</code>): a footbridge approach, 60 geophones 2 m apart, {picks} picks from {shots} shots, over a weathered cover with a soft peat lens, and a rock head 4.5–7.5 m deep with a buried channel; the picks were made by fast marching through that known model, with 0.5 ms of picking noise. \
Because the true model is known, this page can show what a real survey cannot: how far each method's section is from the ground.</p>\
<p>The picks were checked, then inverted twice: by the PINN (a network for travel time and one for velocity, trained on the eikonal equation and the picks, then refined against fast marching) and by grid tomography (Gauss–Newton on cells). \
Each method also ran an ensemble ({members}), each member inverting the picks redrawn within their σ and the starting model redrawn by 10 %; the sections shown are each method's main result (the picks as given), the spread maps the members' standard deviation, and the depth to {iso:.0} m/s carries the members' 68 % band. \
Every model is judged by the same fast-marching solver, never by the method's own fit.</p>\
<p class=\"caution\"><b>Caution.</b> {caution}</p>\
<h2>Run time by stage</h2><table><tr><th>stage</th><th class=\"n\">seconds</th></tr>{stages}<tr><th>whole demo</th><th class=\"n\">{total_s:.1}</th></tr></table>\
<p class=\"small\">Wall-clock time on this machine; the inversion times include their fast-marching judge.</p></section>\n\
<section><h2>Both methods against the true model</h2>{table}\
<p>The <b>truth</b> row is the true model judged like the others: its χ² is the floor the picks' noise sets. Model errors are |v − v<sub>true</sub>| / v<sub>true</sub> over the {mask:.0} % of the section that the rays of every model and of the truth reach; the depth error is the mean |depth − true depth| of {iso:.0} m/s over the columns where both reach it.</p>\
{sections}{fits}</section>\n{runs}</body></html>\n",
        picks = reports.first().map_or(0, |r| r.n_picks),
        shots = reports.first().map_or(0, |r| r.n_shots),
        iso = cmp.iso_velocity_mps,
        caution = escape(super::CAUTION),
        table = super::comparison::table(cmp),
        mask = cmp.mask_pct,
        sections = embedded(
            read(cmp_dir, "sections"),
            "every model side by side",
            "<b>The sections side by side.</b> Left: the true model and each method's section on one velocity scale. Right: each section's difference from the truth in %, blue slower, red faster. Hatched ground is ground that not every model's rays reach; it is left out of every statistic above.",
        ),
        fits = embedded(
            read(cmp_dir, "traveltimes"),
            "travel-time fits of every model",
            "<b>Travel-time fits.</b> Grey dots: the picks; lines: each model's first arrivals by the judge; below, each model's residuals with ±σ.",
        ),
    )
}
