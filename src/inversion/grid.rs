//! Grid tomography as a method of the inversion layer: the cells over the inversion
//! grid, the shared starting model and bounds, fast marching with rays as the forward
//! solver, and the model on the inversion grid.

use std::time::Instant;

use serde::Serialize;

use super::pinn::Relay;
use super::{derive, Event, Fitted, History, InversionError, MethodDetail, Observer, Problem};
use super::{Resume, Stage};
use crate::model::VelocityGrid;
use crate::regularise::GridRegulariser;
use crate::settings::RunSettings;
use crate::state_bytes::Fnv;
use crate::tomography::{self, Bounds, Cells, StepLog};
use crate::verify::{FmmMisfit, ForwardTimings};

/// What only grid tomography has.
#[derive(Debug, Clone, Serialize)]
pub struct GridDetail {
    /// The regulariser.
    pub regulariser: GridRegulariser,
    /// Cell size, m.
    pub cell_m: f64,
    /// Cells (unknowns under the ground).
    pub cells: usize,
    /// Cells no ray reached at any accepted model: they keep the starting model
    /// (`None`: the starting model itself was kept).
    pub unconstrained: Option<usize>,
    /// Whether the weight was chosen by the run (the discrepancy principle) or given.
    pub weight_chosen: bool,
    /// Every linear solve: the weight tried, LSQR's iterations and stop.
    pub steps: Vec<StepLog>,
    /// Seconds of fast marching, of ray tracing and of the linear solves (LSQR and
    /// building its system).
    pub seconds_fmm: f64,
    /// Seconds of ray tracing (estimated from the threads' time).
    pub seconds_rays: f64,
    /// Seconds of the linear solves.
    pub seconds_lsqr: f64,
    /// The forward solves' timings as measured.
    pub forward: ForwardTimings,
}

/// FNV-1a hash of the picks, their σ and the inversion grid: ties a saved state to
/// the data it was computed from.
fn data_fingerprint(problem: &Problem) -> u64 {
    let mut f = Fnv::new();
    for (p, s) in problem.survey.picks.iter().zip(&problem.sigma_s) {
        f.eat_f64s(&[
            p.source.x,
            p.source.z,
            p.receiver.x,
            p.receiver.z,
            p.time,
            *s,
        ]);
    }
    let g = &problem.grid;
    f.eat_f64s(&[g.x0, g.z0, g.dx, g.dz]);
    f.0
}

/// Refuses a cell the settings give that no grid tomography can use: larger than the
/// spread, or below a tenth of the judge's cell.
pub(super) fn check_cell(problem: &Problem, given: &RunSettings) -> Result<(), InversionError> {
    let Some(cell) = given.grid.cell_m else {
        return Ok(());
    };
    let line = problem.scales.line_m;
    if cell > line {
        return Err(InversionError::Setting(format!(
            "grid.cell_m = {cell} m is larger than the spread ({line:.1} m): one cell could not tell anything along the line; give a cell of about half the receiver spacing ({:.2} m), or leave grid.cell_m out",
            0.5 * problem.scales.receiver_spacing_m
        )));
    }
    if cell < 0.1 * problem.judge_cell_m {
        return Err(InversionError::Setting(format!(
            "grid.cell_m = {cell} m is below a tenth of the judge's cell ({} m): cells that small cannot be checked by the judge and only multiply the unknowns; give at least {} m, or a smaller cell_m for the solver grid as well",
            problem.judge_cell_m,
            0.1 * problem.judge_cell_m
        )));
    }
    Ok(())
}

pub(super) fn run(
    problem: &Problem,
    settings: &RunSettings,
    resume: Resume,
    observer: &mut dyn Observer,
) -> Result<Fitted, InversionError> {
    let gs = &settings.grid;
    let cell = gs.cell_m.unwrap_or(problem.cell_m);
    let stride = derive::grid_stride(cell, problem.cell_m);
    let cells = Cells::new(&problem.grid, &problem.survey.surface, stride)
        .map_err(InversionError::Setting)?;
    let surface = &problem.survey.surface;
    let (v_min, v_max) = (settings.pinn.v_min, settings.pinn.v_max);
    let start: Vec<f64> = cells
        .positions
        .iter()
        .map(|p| 1.0 / problem.start_velocity(v_max, surface.elevation(p[0]) - p[1]))
        .collect();
    let inputs = tomography::Inputs {
        cells: &cells,
        bounds: Bounds::new(v_min, v_max),
        start,
        scale_length_m: 0.5 * problem.depth_m,
        settings: gs,
    };
    let t0 = Instant::now();
    observer.on(Event::Stage {
        name: "grid tomography",
        length: gs.iterations,
    });
    let mut forward = FmmMisfit::new(&problem.survey, problem.grid, problem.sigma_s.clone());
    let outcome = tomography::invert(
        &inputs,
        &mut forward,
        data_fingerprint(problem),
        resume.outer.as_ref(),
        &mut Relay(observer),
    )
    .map_err(InversionError::Method)?;
    let mut notes = Vec::new();
    for (it, n) in &outcome.outer.notes {
        notes.push(format!("Gauss–Newton step from iteration {it}: {n}"));
    }
    if let (Some(st), None) = (&resume.outer, outcome.outer.resumed_from) {
        notes.push(format!(
            "the saved state (iteration {}) belongs to other picks, cells or [grid] settings, or lies beyond the iterations asked for; the inversion was redone from the start",
            st.iteration()
        ));
    }
    match outcome.unconstrained {
        Some(0) => {}
        Some(n) => notes.push(format!(
            "{n} of {} cells were reached by no ray and keep the starting model (unconstrained; hatched in the figures)",
            cells.len()
        )),
        None => notes.push(
            "no Gauss–Newton step lowered the fast-marching χ² (or the starting model met the target already): the section is the starting model".into(),
        ),
    }
    let timings = forward.timings();
    let seconds_lsqr = outcome.steps.iter().map(|s| s.seconds).sum();
    let model = VelocityGrid {
        spec: problem.grid,
        v: outcome.velocity,
    };
    let regulariser = gs.regulariser;
    Ok(Fitted {
        label: format!("grid tomography ({})", regulariser.name().replace('_', " ")),
        model,
        own_fit: None,
        stages: vec![Stage {
            name: "Gauss–Newton against fast marching".into(),
            seconds: t0.elapsed().as_secs_f64(),
            history: History::Linearised {
                iterations: outcome.outer.history.clone(),
                kept: outcome.outer.kept,
                stop: outcome.outer.stop,
                resumed_from: outcome.outer.resumed_from,
            },
        }],
        detail: MethodDetail::Grid(GridDetail {
            regulariser,
            cell_m: cells.size().1,
            cells: cells.len(),
            unconstrained: outcome.unconstrained,
            weight_chosen: gs.reg_weight.is_none(),
            steps: outcome.steps,
            seconds_fmm: timings.fmm_wall_s(),
            seconds_rays: timings.rays_wall_s(),
            seconds_lsqr,
            forward: timings,
        }),
        notes,
        networks: None,
    })
}
