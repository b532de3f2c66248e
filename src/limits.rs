//! Sizes the tool refuses before any work, so that no input can exhaust the memory of
//! an ordinary machine (the development machine has 24 GiB and 2 cores) or abort with
//! an allocation failure. Every size that comes from input is checked against one of
//! these, and the message says what was asked, what the limit is and what to change.

/// Nodes of one grid (model file, inversion grid, solver grid): 20 million. A fast-
/// marching workspace costs 32 bytes a node and one runs per worker thread, so this
/// caps a solve at about 0.7 GB a thread (a 2 km × 250 m section at 0.1 m).
pub const MAX_GRID_NODES: usize = 20_000_000;

/// Shots × nodes of one batch solve whose per-shot results are kept (rays, fields):
/// 2 billion node visits.
pub const MAX_SHOT_NODES: u128 = 2_000_000_000;

/// Checks a grid of `nx × nz` nodes (`what` names it, `fix` says what to change).
pub fn grid(nx: usize, nz: usize, what: &str, fix: &str) -> Result<(), String> {
    let n = (nx as u128) * (nz as u128);
    if n > MAX_GRID_NODES as u128 {
        return Err(format!(
            "{what} would have {nx} × {nz} = {n} nodes, more than the limit of {MAX_GRID_NODES}: {fix}"
        ));
    }
    Ok(())
}

/// Checks the nodes of a grid over `width × height` metres at `cell` metres before it
/// is sized (the count of a huge extent or a tiny cell would not even fit a `usize`).
pub fn extent(width: f64, height: f64, cell: f64, what: &str, fix: &str) -> Result<(), String> {
    let n = ((width / cell).round() + 1.0) * ((height / cell).ceil() + 1.0);
    if !(n.is_finite() && n <= MAX_GRID_NODES as f64) {
        return Err(format!(
            "{what} of {width:.1} m × {height:.1} m at a {cell} m cell would have about {n:.3e} nodes, more than the limit of {MAX_GRID_NODES}: {fix}"
        ));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn limits_say_what_was_asked_and_what_to_change() {
        assert!(grid(4000, 5000, "the grid", "use a larger cell").is_ok());
        let e = grid(4001, 5000, "the grid", "use a larger cell").unwrap_err();
        assert!(
            e.contains("20005000") && e.contains("use a larger cell"),
            "{e}"
        );
        assert!(extent(100.0, 30.0, 0.1, "the model", "x").is_ok());
        let e = extent(100.0, 30.0, 1e-4, "the model", "give a larger cell").unwrap_err();
        assert!(e.contains("1e-4") || e.contains("0.0001"), "{e}");
        assert!(extent(f64::INFINITY, 1.0, 1.0, "m", "x").is_err());
    }
}
