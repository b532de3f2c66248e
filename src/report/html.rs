//! The plain HTML page of a run, next to its figures.

use super::InvertReport;
use crate::inversion::MethodDetail;

pub(crate) fn escape(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
}

/// The print stylesheet and screen look shared by every page of the tool: sections
/// start on a new page in print, figures and tables are not split.
pub(crate) const STYLE: &str = "body{font-family:'DejaVu Sans',Arial,sans-serif;max-width:1200px;margin:1em auto;padding:0 1em;color:#222;line-height:1.4}\
h1{font-size:1.6em;margin-bottom:.2em}h2{border-bottom:1px solid #bbb;padding-bottom:.2em;margin-top:1.6em}\
table{border-collapse:collapse;margin:.6em 0}th,td{text-align:left;padding:.2em .9em .2em 0;vertical-align:top;border-bottom:1px solid #eee}\
td.n,th.n{text-align:right}figure{margin:1em 0}figure img{max-width:100%;border:1px solid #ddd}\
figcaption{font-size:.92em;color:#333;margin-top:.3em}.caution{border:2px solid #b33;padding:.6em 1em;background:#fff4f4}\
.warn{border-left:4px solid #c80;padding-left:.8em}.small{font-size:.85em;color:#555}\
@media print{body{max-width:none;margin:0;font-size:9.5pt}figure img{max-height:135mm;width:auto;max-width:100%}section{break-before:page;page-break-before:always}\
section.first{break-before:auto;page-break-before:auto}.method{break-before:page;page-break-before:always}figure,table,.caution{break-inside:avoid;page-break-inside:avoid}\
h2{break-after:avoid;page-break-after:avoid}a{color:inherit;text-decoration:none}}\
@page{size:A4 landscape;margin:12mm}";

/// A figure as an `<img>` with its PNG inside the page (a `data:` URI), or a line
/// saying it is missing.
pub(crate) fn embedded(png: Option<Vec<u8>>, alt: &str, caption: &str) -> String {
    use base64::Engine;
    match png {
        Some(bytes) => format!(
            "<figure><img src=\"data:image/png;base64,{}\" alt=\"{}\"><figcaption>{}</figcaption></figure>\n",
            base64::engine::general_purpose::STANDARD.encode(bytes),
            escape(alt),
            caption
        ),
        None => format!("<p class=\"small\">(figure {} not drawn)</p>\n", escape(alt)),
    }
}

/// The page of a run, one file: summary, every figure embedded with a caption that
/// says how to read it, the iso-velocity table, the cautions. `figure` gives a
/// figure's PNG bytes by file stem (`None`: not drawn for this run).
pub fn html_report(r: &InvertReport, figure: &dyn Fn(&str) -> Option<Vec<u8>>) -> String {
    let body = report_body(r, figure, 2);
    format!(
        "<!doctype html><html lang=\"en\"><head><meta charset=\"utf-8\"><meta name=\"viewport\" content=\"width=device-width\">\
<title>slowfield: velocity section from {}</title><style>{STYLE}</style></head><body>\n{body}</body></html>\n",
        escape(&r.picks)
    )
}

/// The sections of a run's report (headings from level `h`), for a page of its own
/// or inside the demo's page.
pub(crate) fn report_body(
    r: &InvertReport,
    figure: &dyn Fn(&str) -> Option<Vec<u8>>,
    h: u8,
) -> String {
    let row =
        |k: &str, v: String| format!("<tr><th>{}</th><td>{}</td></tr>\n", escape(k), escape(&v));
    let mut t = String::new();
    t += &row("picks file", r.picks.clone());
    t += &row("shots / picks", format!("{} / {}", r.n_shots, r.n_picks));
    if let Some(q) = &r.qc {
        t += &row(
            "pick quality control",
            format!(
                "{} receiver positions, offsets {:.1}–{:.1} m; {}",
                q.receivers,
                q.offset_range_m[0],
                q.offset_range_m[1],
                q.findings.join("; ")
            ),
        );
    }
    t += &row("method", r.label.clone());
    t += &row(
        &format!(
            "fast-marching check on a {} m grid (half the inversion's): RMS, χ²",
            r.judge.cell_m
        ),
        format!(
            "{:.3} ms, {:.3} (χ² ≈ 1: the picks are fitted to their σ)",
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
            if p.eikonal_rms.is_finite() {
                t += &row("eikonal residual RMS", format!("{:.4}", p.eikonal_rms));
            }
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
    if let Some(e) = &r.ensemble {
        // (the median leaves out NaN: a member whose method has no χ²)
        let med = crate::stats::median(&mut e.member_chi2.clone());
        t += &row(
            "ensemble",
            format!(
                "{} members ({} start), {:.1} members a minute; each member's χ² against its own redrawn picks: median {}; the section shown is the main run's (the picks as given); the members' mean (velocity_mean.csv) has χ² {:.3} against the picks",
                e.members,
                match e.start { crate::settings::MemberStart::Cold => "cold", crate::settings::MemberStart::Warm => "warm" },
                e.members_per_minute,
                med.map_or("—".into(), |m| format!("{m:.3}")),
                e.mean_judge.chi2
            ),
        );
        t += &row(
            "ensemble spread (1σ), median over the ray-covered section",
            format!(
                "{} ({} of the velocity); outside the coverage {}",
                e.spread_covered_median_mps
                    .map_or("—".into(), |v| format!("{v:.0} m/s")),
                e.spread_covered_median_pct
                    .map_or("—".into(), |v| format!("{v:.1} %")),
                e.spread_covered_median_mps
                    .and(e.spread_uncovered_median_mps)
                    .map_or("—".into(), |v| format!("{v:.0} m/s"))
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
        format!(
            "{:.0} % ({} nodes{})",
            100.0 * r.coverage.fraction,
            r.section.covered_nodes,
            r.section
                .covered_velocity_mps
                .map_or(String::new(), |[lo, m, hi]| format!(
                    ", velocities {lo:.0}–{hi:.0} m/s, median {m:.0}"
                ))
        ),
    );
    t += &row(
        "settings",
        format!(
            "σ of picks without their own {} ms; velocity bounds {}; seed {}; settings.toml has every value",
            r.settings.sigma_ms,
            match (r.derived.iter().find(|c| c.setting == "v_min"), r.derived.iter().find(|c| c.setting == "v_max")) {
                (Some(a), Some(b)) => format!("{:.0}–{:.0} m/s", a.value, b.value),
                _ => "—".into(),
            },
            r.seed
        ),
    );
    t += &row(
        "run time",
        format!(
            "{:.1} s ({})",
            r.run_seconds,
            r.stages
                .iter()
                .map(|s| format!("{} {:.1} s", s.name, s.seconds))
                .collect::<Vec<_>>()
                .join(", ")
        ),
    );
    let mut derived = String::from("<table>");
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
                "<h{h}>{title}</h{h}><ul class=\"warn\">{}</ul>",
                items
                    .iter()
                    .map(|w| format!("<li>{}</li>", escape(w)))
                    .collect::<String>()
            )
        }
    };
    let iso = &r.iso_depth;
    let v_iso = format!("{:.0} m/s", iso.velocity_mps);
    let band_text = if r.ensemble.is_some() {
        " The pale band around it is the 68 % range (16th to 84th percentile) of the same depth over the ensemble's members: where it is wide, the picks leave the depth loose."
    } else {
        " No ensemble ran, so the depth has no band (run with --ensemble N)."
    };
    let ens_fig = if r.ensemble.is_some() {
        embedded(
            figure("spread"),
            "ensemble spread",
            "<b>Ensemble spread.</b> The standard deviation of the members' velocities at each node (m/s; darker is looser). Each member inverted the picks redrawn within their σ, with the starting model redrawn by 10 % and its own seed (randomise-then-optimise; Bardsley et al. 2014). Small spread where many rays cross, large where few do or none (hatched). The spread reflects the picks' noise and the method's own randomness only: not the other models the regulariser rules out, nor hidden layers.",
        )
    } else {
        String::new()
    };
    let mut iso_rows = String::new();
    let reached: Vec<&super::IsoColumn> = iso.columns.iter().collect();
    let every = (reached.len() / 40).max(1);
    for c in reached.iter().step_by(every) {
        let f = |v: Option<f64>| v.map_or("—".to_string(), |v| format!("{v:.2}"));
        iso_rows += &format!(
            "<tr><td class=\"n\">{:.1}</td><td class=\"n\">{:.2}</td><td class=\"n\">{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td><td>{}</td></tr>\n",
            c.x,
            c.ground_m,
            f(c.depth_m),
            f(c.elevation_m),
            match (c.depth_p16_m, c.depth_p84_m, c.members_reaching) {
                (Some(a), Some(b), _) => format!("{a:.2} – {b:.2}"),
                (Some(a), None, _) => format!("{a:.2} – deeper than the rays reach"),
                (None, _, Some(_)) => "deeper than the rays reach".into(),
                _ => "—".into(),
            },
            match c.status {
                super::IsoStatus::Reached => "reached",
                super::IsoStatus::NotReachedInCoveredPart => "not reached where rays reach",
                super::IsoStatus::NoRayCoverage => "no ray coverage",
            }
        );
    }
    let iso_summary = if iso.reached_columns == 0 {
        format!("<p class=\"warn\"><b>{v_iso} is not reached anywhere in the ray-covered section</b> (covered velocities {}): no depth is given and no line is drawn. Choose another velocity with --iso-velocity.</p>",
            r.section.covered_velocity_mps.map_or("—".into(), |[lo, _, hi]| format!("{lo:.0}–{hi:.0} m/s")))
    } else {
        format!(
            "<p>{v_iso} ({}) is reached in {} of the {} columns the rays reach{}.</p>",
            escape(&iso.source),
            iso.reached_columns,
            iso.covered_columns,
            iso.band_median_width_m.map_or(String::new(), |w| format!(
                "; the 68 % band is {w:.2} m wide (median)"
            ))
        )
    };
    let cautions: String = r
        .cautions
        .iter()
        .map(|c| format!("<li>{}</li>", escape(c)))
        .collect();
    let training_fig = match &r.detail {
        MethodDetail::Pinn(p) if p.steps > 0 => embedded(
            figure("loss"),
            "PINN training loss",
            "<b>Training.</b> The loss terms of the PINN per step (log scale): the data term is the mean squared pick misfit in units of σ, the eikonal term how far the travel-time network is from solving the eikonal equation through the velocity network. Both should fall and flatten.",
        ),
        MethodDetail::Pinn(_) => String::new(),
        MethodDetail::Grid(_) => embedded(
            figure("iterations"),
            "Gauss-Newton chi-square",
            "<b>Gauss–Newton iterations.</b> χ² of each iteration's model by fast marching (and what the linearisation predicted). It should fall to about 1, the level of the picks' noise.",
        ),
    };
    let refine_fig = if r.refinement.is_some() {
        embedded(
            figure("refinement"),
            "refinement chi-square",
            "<b>Refinement against fast marching.</b> χ² of the velocity network by fast marching per outer iteration, with the linearisation's prediction; the iteration with the lowest χ² is kept.",
        )
    } else {
        String::new()
    };
    format!(
        "<section class=\"first\"><h1>Velocity section from first-arrival picks</h1>\
<p class=\"small\">{tool}; picks {picks}</p>\
<p class=\"caution\"><b>Caution.</b> {caution} The full list is at the end of this report.</p>\
<h{h}>Summary</h{h}><table>{t}</table>{warn}{notes}</section>\n\
<section><h{h}>Velocity section and depth to {v_iso}</h{h}>{fig_v}{iso_summary}\
<table><tr><th class=\"n\">x (m)</th><th class=\"n\">ground (m)</th><th class=\"n\">depth to {v_iso} (m)</th><th class=\"n\">elevation (m)</th><th class=\"n\">68 % band of the depth (m)</th><th>column</th></tr>{iso_rows}</table>\
<p class=\"small\">Every {every_m} column shown; every column is in iso-depth.csv.</p></section>\n\
<section><h{h}>Uncertainty and ray coverage</h{h}>{ens_fig}{fig_cov}</section>\n\
<section><h{h}>Fit to the picks</h{h}>{fig_tt}{fig_res}</section>\n\
<section><h{h}>Convergence</h{h}>{training_fig}{refine_fig}{steps_table}\
<h{h}>Settings that follow the survey</h{h}><p>Values the settings left open were derived from the line and the picks; a value given in the settings or on the command line is kept (\"given\").</p>{derived}</section>\n\
<section><h{h}>Cautions</h{h}><ul class=\"caution\">{cautions}</ul>\
<p class=\"small\">Files beside this report: velocity.csv (x, z, velocity, covered){files}, coverage.csv, fit.csv, iso-depth.csv, report.json (the numbers of this page), settings.toml (repeats the run), the figures as PNG and SVG.</p></section>\n",
        tool = escape(&r.tool),
        picks = escape(&r.picks),
        caution = escape(r.caution),
        warn = list("Warnings", &r.warnings),
        notes = list("Notes", &r.notes),
        every_m = if every == 1 { String::new() } else { format!("{}th", every) },
        fig_v = embedded(
            figure("velocity"),
            "velocity section",
            &format!(
                "<b>Velocity section.</b> P-wave velocity (colour, m/s) under the ground surface (black line), with contours; triangles are receivers, red dots shots. Hatched ground is reached by no ray of the final model: the values there are the starting model or the regulariser, not measurements. The white dashed line is the depth at which the velocity first reaches {v_iso} where rays reach it.{band_text} The vertical scale is exaggerated as the title says."
            ),
        ),
        fig_cov = embedded(
            figure("coverage"),
            "ray coverage",
            "<b>Ray coverage.</b> Rays traced through the final model from each receiver back to its shot, over the derivative weight sum (the ray length attributed to each node; Toomey &amp; Foulger 1989): a guide to where the section is constrained, not a measure of its error. Grey ground is reached by no ray.",
        ),
        fig_tt = embedded(
            figure("traveltimes"),
            "travel times",
            "<b>Observed and predicted first arrivals.</b> Dots are the picks, lines the fast-marching times through the final model, one colour per shot (triangles mark the shots). Below: the residuals (observed − predicted) with ±σ as dark lines; most should lie between them, with no trend along a shot.",
        ),
        fig_res = embedded(
            figure("residuals"),
            "residual histogram",
            "<b>Residuals against the expected noise.</b> Residuals divided by each pick's σ, against the standard normal curve they follow if the misfit is picking noise of the stated σ. Much wider: σ is too small or the model misses something; much narrower: σ is too large (the picks are over-fitted if χ² is well below 1).",
        ),
        files = if r.ensemble.is_some() { ", velocity_std.csv (the spread), velocity_mean.csv (the members' mean), members/ (each member's model and its seed and χ²)" } else { "" },
    )
}

/// The table of grid tomography's steps: every weight tried, the χ² of the model it
/// proposed, and what LSQR did.
fn grid_steps(r: &InvertReport, g: &crate::inversion::GridDetail) -> String {
    let Some(iterations) = r.stages.iter().find_map(|s| match &s.history {
        crate::inversion::History::Linearised { iterations, .. } => Some(iterations),
        _ => None,
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
        _ => None,
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
