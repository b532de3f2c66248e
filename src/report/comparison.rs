//! What `compare` leaves for a reader: the side-by-side figure, the fits of every
//! model, and `comparison.html`, a page that holds its figures (no outside files).

use std::path::Path;

use anyhow::Context;
use base64::Engine;

use super::html::escape;
use crate::compare::Comparison;
use crate::figures::{self, FitPicks, FitSeries, ModelPanel, SideBySide};
use crate::inversion::Problem;
use crate::output::write_atomic;
use crate::survey::Point;

/// Writes `sections.png|svg`, `traveltimes.png|svg` and `comparison.html` into `dir`.
pub fn write(dir: &Path, problem: &Problem, cmp: &Comparison, picks: &str) -> anyhow::Result<()> {
    let survey = &problem.survey;
    let receivers = survey.receivers();
    let sources: Vec<Point> = survey.shots.iter().map(|s| s.source).collect();
    // differences from the truth, or from the first model
    let (reference, ref_v) = match &cmp.truth {
        Some(t) => ("truth".to_string(), &t.model.v),
        None => (cmp.judged[0].name.clone(), &cmp.judged[0].model.v),
    };
    let diff = |v: &[f64]| -> Vec<f64> {
        v.iter()
            .zip(ref_v)
            .map(|(a, b)| 100.0 * (a - b) / b)
            .collect()
    };
    let mut panels = Vec::new();
    if let Some(t) = &cmp.truth {
        panels.push(ModelPanel {
            title: "truth".into(),
            v: &t.model.v,
            diff: None,
        });
    }
    for (k, j) in cmp.judged.iter().enumerate() {
        let is_ref = cmp.truth.is_none() && k == 0;
        panels.push(ModelPanel {
            title: j.name.clone(),
            v: &j.model.v,
            diff: (!is_ref).then(|| diff(&j.model.v)),
        });
    }
    figures::side_by_side(
        &dir.join("sections"),
        &SideBySide {
            title: "Every model on one colour scale".into(),
            spec: cmp.judged[0].model.spec,
            panels,
            reference: reference.clone(),
            mask: &cmp.mask,
            surface: &survey.surface,
            receivers: &receivers,
            sources: &sources,
        },
    )?;
    let shot_of: Vec<usize> = {
        let mut v = vec![0; survey.picks.len()];
        for (s, shot) in survey.shots.iter().enumerate() {
            for &k in &shot.picks {
                v[k] = s;
            }
        }
        v
    };
    let rx: Vec<f64> = survey.picks.iter().map(|p| p.receiver.x).collect();
    let obs: Vec<f64> = survey.picks.iter().map(|p| p.time * 1e3).collect();
    let sx: Vec<f64> = survey.shots.iter().map(|s| s.source.x).collect();
    let mut sig: Vec<f64> = problem.sigma_s.iter().map(|s| s * 1e3).collect();
    let sigma_ms = crate::stats::median(&mut sig).unwrap_or(0.0);
    let series: Vec<FitSeries> = cmp
        .truth
        .iter()
        .chain(cmp.judged.iter())
        .map(|j| FitSeries {
            name: j.name.clone(),
            predicted_ms: j.times.iter().map(|t| t * 1e3).collect(),
        })
        .collect();
    figures::fits_overlay(
        &dir.join("traveltimes"),
        "Picks and every model's travel times (fast-marching judge)",
        &FitPicks {
            receiver_x: &rx,
            observed_ms: &obs,
            shot: &shot_of,
            source_x: &sx,
            sigma_ms,
        },
        &series,
    )?;
    let html = page(dir, cmp, picks, &reference)?;
    write_atomic(&dir.join("comparison.html"), html.as_bytes())
        .with_context(|| format!("cannot write {}", dir.join("comparison.html").display()))?;
    Ok(())
}

/// A PNG of `dir` as a `data:` URI.
fn embedded(dir: &Path, name: &str) -> anyhow::Result<String> {
    let p = dir.join(name);
    let bytes = std::fs::read(&p).with_context(|| format!("cannot read {}", p.display()))?;
    Ok(format!(
        "data:image/png;base64,{}",
        base64::engine::general_purpose::STANDARD.encode(bytes)
    ))
}

/// The table's rows, one per model (truth first), as HTML.
fn table_rows(cmp: &Comparison) -> String {
    let opt = |v: Option<f64>, d: usize| v.map_or("–".to_string(), |v| format!("{v:.d$}"));
    let mut rows = String::new();
    for r in &cmp.rows {
        rows += &format!(
            "<tr><td><b>{}</b></td><td>{:.3}</td><td>{:.2}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{:.0}</td><td>{}</td><td class=\"l\">{}</td></tr>\n",
            escape(&r.method),
            r.rms_ms,
            r.chi2,
            opt(r.runtime_s, 1),
            opt(r.model_rel_error, 1),
            opt(r.p90_rel_error, 1),
            opt(r.iso_depth_error_m, 2),
            r.ray_coverage_pct,
            r.picks,
            escape(&r.label)
        );
    }
    rows
}

/// The comparison table with its header.
pub(crate) fn table(cmp: &Comparison) -> String {
    format!(
        "<table><tr><th class=\"l\">method</th><th>RMS (ms)</th><th>χ²</th><th>run time (s)</th><th>median error (%)</th><th>90th pct error (%)</th><th>depth error of {iso:.0} m/s (m)</th><th>ray coverage (%)</th><th>picks</th><th class=\"l\">what ran</th></tr>\n{rows}</table>",
        iso = cmp.iso_velocity_mps,
        rows = table_rows(cmp)
    )
}

fn page(dir: &Path, cmp: &Comparison, picks: &str, reference: &str) -> anyhow::Result<String> {
    let truth_note = if cmp.truth.is_some() {
        format!(
            "The <b>truth</b> row is the true model judged like the others: its χ² is the floor the picks' noise sets. Model errors are |v − v<sub>true</sub>| / v<sub>true</sub> over the {:.0} % of the section that the rays of every model and of the truth reach; the depth error is the mean |depth − true depth| of {:.0} m/s over the columns where both reach it there.",
            cmp.mask_pct, cmp.iso_velocity_mps
        )
    } else {
        "No true model was given (<code>--truth</code>): the model errors are empty, and the differences in the figure are from the first model.".to_string()
    };
    let sections = embedded(dir, "sections.png")?;
    let fits = embedded(dir, "traveltimes.png")?;
    let shared = cmp.judged.iter().any(|j| j.name == "pinn-refined")
        && cmp.judged.iter().any(|j| j.name == "pinn");
    Ok(format!(
        "<!doctype html><html><head><meta charset=\"utf-8\"><title>slowfield comparison</title>\
<style>body{{font-family:sans-serif;max-width:1500px;margin:1em auto;color:#222}}\
table{{border-collapse:collapse}}td,th{{padding:.2em .7em;text-align:right;border-bottom:1px solid #ddd}}td.l,th.l{{text-align:left}}td:first-child{{white-space:nowrap}}\
.caution{{border:2px solid #b33;padding:.6em 1em;background:#fff4f4}}img{{max-width:100%}}\
@media print{{h2{{page-break-before:always}}img{{max-width:100%;page-break-inside:avoid}}}}</style></head><body>\
<h1>Methods compared on the same picks</h1>\
<p>Picks: <code>{picks}</code>, {n} picks. Every model is put on one grid and judged by the same fast-marching solver on a {cell} m grid (half the inversion cell, sampled in slowness): the RMS and χ² below are not any method's own misfit.</p>\
{table}\
<p>{truth_note}</p>{shared_note}\
<h2>The sections side by side</h2><img src=\"{sections}\" alt=\"every model side by side\">\
<p>Left: every model on one velocity scale. Right: each model's difference from {reference} in %, blue slower, red faster. Hatched ground is ground that not every model's rays reach; it is left out of every statistic above.</p>\
<h2>Travel-time fits</h2><img src=\"{fits}\" alt=\"travel-time fits of every model\">\
<p>Grey dots: the picks; lines: each model's first arrivals by the judge; below, each model's residuals against the receiver position, with ±σ. A model whose residuals run in streaks along the line misses a structure there.</p>\
<p class=\"caution\"><b>Caution.</b> {caution} A comparison on synthetic picks says how the methods behave on that kind of ground; on a real site no method's error is known.</p>\
<p>Files: comparison.csv (the table), comparison.json (the same for scripts), sections.png/.svg, traveltimes.png/.svg; each method's full run in its own folder.</p></body></html>\n",
        picks = escape(picks),
        n = cmp.rows.first().map_or(0, |r| r.picks),
        cell = cmp.judge_cell_m,
        table = table(cmp),
        truth_note = truth_note,
        shared_note = if shared {
            "<p><b>pinn-refined</b> continues the training of <b>pinn</b> (one training, two results); its run time counts the training.</p>"
        } else {
            ""
        },
        sections = sections,
        fits = fits,
        reference = escape(reference),
        caution = escape(super::CAUTION),
    ))
}
