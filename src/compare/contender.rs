//! The methods `compare` can run, by name, and the settings each runs with.

use crate::settings::{GridRegulariser, Method, RefineSettings, RunSettings};

/// A method of the comparison. The PINN alone and the PINN refined against fast
/// marching are two contenders: the refinement is a hybrid (a network velocity
/// improved by linearised steps on a grid), and the network alone must stay visible
/// beside it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Contender {
    /// The PINN's velocity network as trained, no refinement.
    Pinn,
    /// The PINN followed by its refinement against fast marching (`invert`'s default).
    PinnRefined,
    /// Grid tomography with one regulariser.
    Grid(GridRegulariser),
}

impl Contender {
    /// What `compare` runs when no list is given.
    pub const DEFAULT: [Contender; 3] = [
        Contender::Pinn,
        Contender::PinnRefined,
        Contender::Grid(GridRegulariser::Smoothness),
    ];

    /// Every contender, in the order of the tables.
    pub fn all() -> Vec<Contender> {
        let mut v = vec![Contender::Pinn, Contender::PinnRefined];
        v.extend(GridRegulariser::ALL.iter().map(|&r| Contender::Grid(r)));
        v
    }

    /// Its name: in `--methods`, as the folder of its run and in the table.
    pub fn name(self) -> String {
        match self {
            Contender::Pinn => "pinn".into(),
            Contender::PinnRefined => "pinn-refined".into(),
            Contender::Grid(r) => format!("grid-{}", r.name().replace('_', "-")),
        }
    }

    /// The contender named `s` (`grid` alone is grid tomography with smoothness, the
    /// method's default); the error lists the names known.
    pub fn parse(s: &str) -> Result<Contender, String> {
        let s = s.trim();
        if s == "grid" {
            return Ok(Contender::Grid(GridRegulariser::Smoothness));
        }
        Contender::all()
            .into_iter()
            .find(|c| c.name() == s)
            .ok_or_else(|| {
                format!(
                    "unknown method '{s}': the methods are {} (and grid, short for grid-smoothness)",
                    Contender::all()
                        .iter()
                        .map(|c| c.name())
                        .collect::<Vec<_>>()
                        .join(", ")
                )
            })
    }

    /// The settings it runs with: `base` with the method, the refinement and the
    /// regulariser set. The refinement of `pinn-refined` keeps `base`'s iterations,
    /// or the default number when `base` turned it off.
    pub fn settings(self, base: &RunSettings) -> RunSettings {
        let mut s = base.clone();
        match self {
            Contender::Pinn => {
                s.method = Method::Pinn;
                s.refine.iterations = 0;
            }
            Contender::PinnRefined => {
                s.method = Method::Pinn;
                if s.refine.iterations == 0 {
                    s.refine.iterations = RefineSettings::default().iterations;
                }
            }
            Contender::Grid(r) => {
                s.method = Method::Grid;
                s.grid.regulariser = r;
            }
        }
        s
    }
}

/// A comma-separated list of contenders, each once.
pub fn parse_list(list: &str) -> Result<Vec<Contender>, String> {
    let mut out: Vec<Contender> = Vec::new();
    for item in list.split(',').filter(|s| !s.trim().is_empty()) {
        let c = Contender::parse(item)?;
        if out.contains(&c) {
            return Err(format!(
                "the method {} is named twice in the list '{list}'",
                c.name()
            ));
        }
        out.push(c);
    }
    if out.is_empty() {
        return Err(format!("no method in the list '{list}'"));
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_round_trip_and_unknown_names_list_the_known() {
        for c in Contender::all() {
            assert_eq!(Contender::parse(&c.name()), Ok(c));
        }
        assert_eq!(
            Contender::parse("grid"),
            Ok(Contender::Grid(GridRegulariser::Smoothness))
        );
        let e = Contender::parse("grid-l1").unwrap_err();
        assert!(
            e.contains("grid-wavelet-d4") && e.contains("pinn-refined"),
            "{e}"
        );
        assert!(parse_list("pinn,grid,grid-smoothness").is_err());
        assert_eq!(parse_list("pinn, grid-total-variation").unwrap().len(), 2);
    }

    #[test]
    fn the_pinn_alone_has_no_refinement_and_the_refined_one_has() {
        let mut base = RunSettings::default();
        base.refine.iterations = 0;
        assert_eq!(Contender::Pinn.settings(&base).refine.iterations, 0);
        assert!(Contender::PinnRefined.settings(&base).refine.iterations > 0);
        let g = Contender::Grid(GridRegulariser::WaveletD4).settings(&base);
        assert_eq!(
            (g.method, g.grid.regulariser),
            (Method::Grid, GridRegulariser::WaveletD4)
        );
    }
}
