//! The ensemble stage of a run folder: how many members at once, whether they fit in
//! memory, and the members kept in the work folder as they finish (and read back when
//! an interrupted run is resumed).

use std::path::Path;
use std::time::Instant;

use anyhow::Context;

use super::invert::MEMBERS;
use crate::inversion::{ensemble, Inversion, Problem};
use crate::output::write_atomic;
use crate::settings::RunSettings;

/// The ensemble a run's settings ask for, members run at once as the cores allow.
pub(super) fn plan(settings: &RunSettings) -> Option<ensemble::Plan> {
    let e = &settings.ensemble;
    (e.members > 0).then(|| ensemble::Plan {
        members: e.members,
        start: e.start,
        parallel: if e.parallel > 0 {
            e.parallel
        } else {
            std::thread::available_parallelism().map_or(1, |n| n.get())
        }
        .min(e.members),
    })
}

/// Memory a member run may take at its peak besides what the process holds already
/// (the demo with two PINN members at once peaks at 0.65–0.72 GB for the whole process;
/// 600 MB a member, and more on larger grids).
fn runner_bytes(problem: &Problem) -> u64 {
    (600u64 << 20).max(problem.grid.len() as u64 * 4096)
}

/// Refuses an ensemble whose members cannot all be held in memory (each member's
/// model is kept until the mean and the depth band are taken), naming how many would.
pub(super) fn check_memory(problem: &Problem, plan: &ensemble::Plan) -> anyhow::Result<()> {
    let Some(available) = available_memory() else {
        return Ok(());
    };
    let per_member = (problem.grid.len() as u64).saturating_mul(8) + 4096;
    let runners = (plan.parallel as u64).saturating_mul(runner_bytes(problem));
    let need = (plan.members as u64)
        .saturating_mul(per_member)
        .saturating_add(runners);
    if need > available {
        let fit = available.saturating_sub(runners) / per_member;
        anyhow::bail!(
            "--ensemble {}: {} members of {} nodes each, with {} running at once, need about {:.1} GB, and {:.1} GB of memory is available: at most {} members fit; ask for fewer members (a few tens give a usable spread)",
            plan.members,
            plan.members,
            problem.grid.len(),
            plan.parallel,
            need as f64 / 1e9,
            available as f64 / 1e9,
            fit
        );
    }
    Ok(())
}

/// Available memory by the kernel's estimate (`MemAvailable`), bytes; `None` where
/// it cannot be read (not Linux).
fn available_memory() -> Option<u64> {
    let text = std::fs::read_to_string("/proc/meminfo").ok()?;
    let line = text.lines().find(|l| l.starts_with("MemAvailable:"))?;
    let kb: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kb * 1024)
}

/// The identity of an ensemble's members: the main model, the settings and the
/// picks. A member file of another identity is not reused.
fn members_fingerprint(problem: &Problem, inv: &Inversion) -> u64 {
    let mut f = crate::state_bytes::Fnv::new();
    f.eat_f64s(&inv.model.v);
    f.eat(inv.settings.to_toml().as_bytes());
    let times: Vec<f64> = problem.survey.picks.iter().map(|p| p.time).collect();
    f.eat_f64s(&times);
    f.eat_f64s(&problem.sigma_s);
    f.0
}

/// A member as kept in the work folder: its model (CSV) and this line beside it.
#[derive(serde::Serialize, serde::Deserialize)]
struct MemberNote {
    index: usize,
    seed: u64,
    chi2: f64,
    seconds: f64,
    fingerprint: String,
}

/// The members an interrupted run finished (same identity), read back; member files
/// of another identity are removed.
fn finished_members(work: &Path, problem: &Problem, fp: u64) -> Vec<ensemble::Member> {
    let dir = work.join(MEMBERS);
    let mut out = Vec::new();
    let Ok(entries) = std::fs::read_dir(&dir) else {
        return out;
    };
    for e in entries.flatten() {
        let path = e.path();
        if path.extension().is_none_or(|x| x != "json") {
            continue;
        }
        let csv = path.with_extension("csv");
        let member = std::fs::read_to_string(&path)
            .ok()
            .and_then(|t| serde_json::from_str::<MemberNote>(&t).ok())
            .filter(|n| n.fingerprint == format!("{fp:016x}"))
            .and_then(|n| {
                let m = crate::model::VelocityGrid::read(&csv).ok()?;
                (m.spec == problem.grid).then_some(ensemble::Member {
                    index: n.index,
                    seed: n.seed,
                    model: m,
                    chi2: n.chi2,
                    seconds: 0.0,
                })
            });
        match member {
            Some(m) => out.push(m),
            None => {
                let _ = std::fs::remove_file(&path);
                let _ = std::fs::remove_file(&csv);
            }
        }
    }
    out
}

/// The ensemble after the main run: members already finished by an interrupted run
/// are read back, the others run (each kept in the work folder as it ends), and the
/// result takes the members' mean as its model.
pub(super) fn run(
    problem: &Problem,
    inv: Inversion,
    plan: &ensemble::Plan,
    work: &Path,
    progress: bool,
) -> anyhow::Result<Inversion> {
    let t0 = Instant::now();
    let fp = members_fingerprint(problem, &inv);
    let done: Vec<ensemble::Member> = finished_members(work, problem, fp)
        .into_iter()
        .filter(|m| m.index <= plan.members)
        .collect();
    let dir = work.join(MEMBERS);
    std::fs::create_dir_all(&dir).with_context(|| format!("cannot create {}", dir.display()))?;
    let bar = progress.then(|| {
        let b = indicatif::ProgressBar::new(plan.members as u64);
        b.set_style(
            indicatif::ProgressStyle::with_template(
                "{elapsed_precise} [{bar:30}] {pos}/{len} ensemble members {msg}",
            )
            .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar())
            .progress_chars("=> "),
        );
        b.set_position(done.len() as u64);
        b
    });
    if !done.is_empty() {
        eprintln!(
            "note: {} ensemble members finished by an earlier attempt are reused",
            done.len()
        );
    }
    let mut write_error: Option<String> = None;
    let mut keep = |m: &ensemble::Member| {
        let csv = work.join(crate::report::member_file(m.index));
        let note = MemberNote {
            index: m.index,
            seed: m.seed,
            chi2: m.chi2,
            seconds: m.seconds,
            fingerprint: format!("{fp:016x}"),
        };
        let r = write_atomic(&csv, m.model.to_csv().as_bytes()).and_then(|_| {
            write_atomic(
                &csv.with_extension("json"),
                serde_json::to_string(&note).unwrap_or_default().as_bytes(),
            )
        });
        if let Err(e) = r {
            write_error.get_or_insert(format!("cannot keep {}: {e}", csv.display()));
        }
        if let Some(b) = &bar {
            b.inc(1);
            b.set_message(format!(
                "(member {}: χ² {:.2}, {:.0} s)",
                m.index, m.chi2, m.seconds
            ));
        }
    };
    let members = ensemble::run(problem, &inv, plan, done, &mut keep);
    if let Some(b) = &bar {
        b.finish_and_clear();
    }
    if let Some(e) = write_error {
        eprintln!("warning: {e}");
    }
    let members = members?;
    Ok(ensemble::adopt(
        problem,
        inv,
        *plan,
        members,
        t0.elapsed().as_secs_f64(),
    )?)
}
