//! The plain HTML page of a run, next to its figures.

use super::InvertReport;
use crate::inversion::MethodDetail;

pub(crate) fn escape(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
}

/// The page of a run: cautions, a summary table, the figures.
pub fn html_report(r: &InvertReport) -> String {
    let row =
        |k: &str, v: String| format!("<tr><th>{}</th><td>{}</td></tr>\n", escape(k), escape(&v));
    let mut t = String::new();
    t += &row("picks file", r.picks.clone());
    t += &row("shots / picks", format!("{} / {}", r.n_shots, r.n_picks));
    t += &row("method", r.label.clone());
    t += &row(
        &format!(
            "fast-marching check on a {} m grid (half the inversion's): RMS, χ²",
            r.judge.cell_m
        ),
        format!(
            "{:.3} ms, {:.3}",
            r.judge.misfit.rms_ms, r.judge.misfit.chi2
        ),
    );
    t += &row(
        &format!(
            "fast marching on the inversion's own {} m grid: RMS, χ²",
            r.problem.cell_m
        ),
        format!(
            "{:.3} ms, {:.3}",
            r.judge.inversion_grid.rms_ms, r.judge.inversion_grid.chi2
        ),
    );
    if let Some(o) = &r.own_fit {
        t += &row(
            &format!("{}: RMS, χ²", o.source),
            format!("{:.3} ms, {:.3}", o.misfit.rms_ms, o.misfit.chi2),
        );
    }
    let mut steps_table = String::new();
    match &r.detail {
        MethodDetail::Pinn(p) => {
            t += &row("eikonal residual RMS", format!("{:.4}", p.eikonal_rms));
            t += &row("training steps, stop", format!("{} ({})", p.steps, p.stop));
        }
        MethodDetail::Grid(g) => {
            t += &row(
                "cells (unknowns) / reached by no ray (keep the starting model)",
                format!(
                    "{} of {} m / {}",
                    g.cells,
                    g.cell_m,
                    g.unconstrained
                        .map_or("— (the starting model was kept)".into(), |n| n
                            .to_string())
                ),
            );
            t += &row(
                "time: fast marching / rays / linear solves (LSQR)",
                format!(
                    "{:.2} s / {:.2} s / {:.2} s over {} forward solves",
                    g.seconds_fmm, g.seconds_rays, g.seconds_lsqr, g.forward.solves
                ),
            );
            steps_table = grid_steps(r, g);
        }
    }
    if let Some(f) = &r.refinement {
        t += &row(
            "fast-marching χ² on the inversion grid: PINN velocity → refined",
            format!(
                "{:.3} → {:.3} ({} refinement iterations, iteration {} kept)",
                f.pinn_chi2, f.refined_chi2, f.iterations, f.kept
            ),
        );
    }
    let st = &r.problem.start;
    let start = if st.model.jump_m.is_finite() {
        format!(
            "{:.0} m/s to {:.2} m, then {:.0} m/s (RMS {:.2} ms)",
            st.model.v0,
            st.model.jump_m,
            st.model.v_cap,
            st.rms_s * 1e3
        )
    } else {
        format!(
            "v = {:.0} m/s + {:.1}/s × depth, at most {:.0} m/s (RMS {:.2} ms)",
            st.model.v0,
            st.model.g,
            st.model.v_cap,
            st.rms_s * 1e3
        )
    };
    t += &row("starting model", start);
    t += &row(
        "model depth / grid cell",
        format!("{:.1} m / {} m", r.problem.depth_m, r.problem.cell_m),
    );
    t += &row(
        "ray-covered share of the section",
        format!("{:.0} %", 100.0 * r.coverage.fraction),
    );
    t += &row(
        "seed / run time",
        format!("{} / {:.1} s", r.seed, r.run_seconds),
    );
    let mut derived = String::from(
        "<h2>Settings that follow the survey</h2><p>Values the settings left open were derived from the line and the picks; a value given in the settings or on the command line is kept (\"given\").</p><table>",
    );
    for c in &r.derived {
        derived += &format!(
            "<tr><th>{}</th><td>{} {}</td><td>{}</td></tr>\n",
            escape(c.setting),
            c.value,
            escape(c.unit),
            escape(&c.rule)
        );
    }
    derived += "</table>";
    let list = |title: &str, items: &[String]| {
        if items.is_empty() {
            String::new()
        } else {
            format!(
                "<h2>{title}</h2><ul>{}</ul>",
                items
                    .iter()
                    .map(|w| format!("<li>{}</li>", escape(w)))
                    .collect::<String>()
            )
        }
    };
    format!(
        "<!doctype html><html><head><meta charset=\"utf-8\"><title>slowfield inversion</title>\
<style>body{{font-family:sans-serif;max-width:1450px;margin:1em auto;color:#222}}th{{text-align:left;padding-right:1.5em}}\
.caution{{border:2px solid #b33;padding:.6em 1em;background:#fff4f4}}img{{max-width:100%}}</style></head><body>\
<h1>Velocity section from first-arrival picks</h1>\
<p class=\"caution\"><b>Caution.</b> {}</p><table>{}</table>{}{}\
<h2>Velocity section</h2><img src=\"velocity.png\" alt=\"velocity section\">\
<p>Depth to {:.0} m/s where the rays reach it: <code>interface-depth.csv</code>.</p>\
<h2>Travel times</h2><img src=\"traveltimes.png\" alt=\"travel-time curves\">\
<h2>Ray coverage</h2><img src=\"coverage.png\" alt=\"ray coverage\">\
<p>The derivative weight sum of each node (the ray length attributed to it; Toomey &amp; Foulger 1989) is in <code>coverage.csv</code> beside the coverage flag: a guide to where the section is resolved, not a measure of its error.</p>\
{}{}{}\
<p>Files: velocity.csv, coverage.csv, fit.csv, interface-depth.csv, report.json, settings.toml, {}.</p></body></html>\n",
        escape(r.caution),
        t,
        list("Warnings", &r.warnings),
        list("Notes", &r.notes),
        r.iso_depth.velocity_mps,
        match &r.detail {
            MethodDetail::Pinn(_) =>
                "<h2>Training</h2><img src=\"loss.png\" alt=\"loss curves\">",
            MethodDetail::Grid(_) =>
                "<h2>Gauss–Newton iterations</h2><img src=\"iterations.png\" alt=\"chi-square per iteration\">",
        },
        if r.refinement.is_some() {
            "<h2>Refinement</h2><img src=\"refinement.png\" alt=\"refinement chi-square\">"
        } else {
            ""
        },
        steps_table + &derived,
        match &r.detail {
            MethodDetail::Pinn(_) => "checkpoint.bin, refine.bin (the states a resumed run continues from)",
            MethodDetail::Grid(_) => "grid.bin (the state a resumed run continues from)",
        }
    )
}

/// The table of grid tomography's steps: every weight tried, the χ² of the model it
/// proposed, and what LSQR did.
fn grid_steps(r: &InvertReport, g: &crate::inversion::GridDetail) -> String {
    let Some(iterations) = r.stages.iter().find_map(|s| match &s.history {
        crate::inversion::History::Linearised { iterations, .. } => Some(iterations),
        crate::inversion::History::Training { .. } => None,
    }) else {
        return String::new();
    };
    let mut out = format!(
        "<h2>Regularisation weight</h2><p>{}; the χ² of each model is the fast-marching one on the inversion grid. A step whose χ² did not fall was halved (share of the step below).</p><table><tr><th>iteration</th><th>weight λ</th><th>step</th><th>χ²</th><th>RMS (ms)</th><th>regulariser</th><th>kept as best</th></tr>\n",
        if g.weight_chosen {
            "The weight was chosen by the run: it starts smooth and falls after every full step while χ² is above the target, and holds after a shortened one (the discrepancy principle)"
        } else {
            "The weight was given in the settings"
        }
    );
    for h in iterations {
        out += &format!(
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{:.3}</td><td>{:.3}</td><td>{:.4}</td><td>{}</td></tr>\n",
            h.iteration,
            if h.weight.is_finite() { format!("{:.3e}", h.weight) } else { "— (start)".into() },
            if h.iteration == 0 { "—".into() } else { format!("{:.3}", h.step) },
            h.chi2,
            h.rms_ms,
            h.regulariser,
            if h.accepted { "yes" } else { "no" }
        );
    }
    let resumed = r.stages.iter().find_map(|s| match &s.history {
        crate::inversion::History::Linearised { resumed_from, .. } => *resumed_from,
        crate::inversion::History::Training { .. } => None,
    });
    out += &match resumed {
        Some(k) => format!("</table><p>LSQR per step since the resume at iteration {k}: "),
        None => "</table><p>LSQR per step: ".into(),
    };
    out += &g
        .steps
        .iter()
        .map(|s| format!("{} iterations ({:?})", s.lsqr_iterations, s.lsqr_stop))
        .collect::<Vec<_>>()
        .join("; ");
    out += ".</p>";
    out
}
