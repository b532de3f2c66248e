//! Survey data: first-arrival picks, shots, receivers and the ground surface.
//!
//! Files use metres and milliseconds (or seconds where the column says `_s`); everything
//! in memory is SI. See `README.md` for the picks file contract.

use std::collections::HashMap;
use std::path::Path;

mod read;

pub(crate) use read::{header_map, number, records};
pub use read::{
    parse_picks_text, parse_surface, read_picks, read_picks_with_surface, read_surface,
};

use crate::error::{InputError, InputErrors};

/// A position on the profile: `x` along the line, `z` elevation (positive up), metres.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Point {
    /// Distance along the profile, m.
    pub x: f64,
    /// Elevation, m (positive up).
    pub z: f64,
}

impl Point {
    /// Makes a point.
    pub const fn new(x: f64, z: f64) -> Self {
        Point { x, z }
    }
    /// Straight-line distance to another point, m.
    pub fn dist(&self, o: &Point) -> f64 {
        (self.x - o.x).hypot(self.z - o.z)
    }
}

/// One first-arrival pick.
#[derive(Debug, Clone, PartialEq)]
pub struct Pick {
    /// Shot identifier as written in the file.
    pub shot: String,
    /// Source position.
    pub source: Point,
    /// Receiver position.
    pub receiver: Point,
    /// Picked first-arrival time, s.
    pub time: f64,
    /// Standard uncertainty of the pick, s, when the file gives one.
    pub sigma: Option<f64>,
    /// 1-based line of the file the pick came from (0 for picks made in memory).
    pub line: u64,
}

/// The columns that give a pick's geometry, first in every picks-like table the tool
/// writes.
pub const GEOMETRY_COLUMNS: [&str; 5] =
    ["shot", "source_x", "source_z", "receiver_x", "receiver_z"];

impl Pick {
    /// The fields of [`GEOMETRY_COLUMNS`] for this pick, as written.
    pub fn geometry_fields(&self) -> Vec<String> {
        vec![
            self.shot.clone(),
            self.source.x.to_string(),
            self.source.z.to_string(),
            self.receiver.x.to_string(),
            self.receiver.z.to_string(),
        ]
    }

    /// Source–receiver distance, m.
    pub fn offset(&self) -> f64 {
        self.source.dist(&self.receiver)
    }
    /// Signed horizontal offset, receiver x minus source x, m.
    pub fn signed_offset(&self) -> f64 {
        self.receiver.x - self.source.x
    }
    /// The pick's uncertainty, or `default` where the file gave none, s.
    pub fn sigma_or(&self, default: f64) -> f64 {
        self.sigma.unwrap_or(default)
    }
}

/// The ground surface as a piecewise-linear profile, constant beyond its ends.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Surface {
    /// Vertices sorted by x, at least one.
    pub nodes: Vec<Point>,
}

impl Surface {
    /// A flat surface at elevation `z`.
    pub fn flat(z: f64) -> Self {
        Surface {
            nodes: vec![Point::new(0.0, z)],
        }
    }

    /// Surface through the given vertices (sorted here); vertices closer than 1 cm in x
    /// keep the highest, since a station below another is a borehole geophone.
    pub fn through(points: &[Point]) -> Self {
        let mut pts: Vec<Point> = points.to_vec();
        pts.sort_by(|a, b| a.x.total_cmp(&b.x));
        let mut nodes: Vec<Point> = Vec::with_capacity(pts.len());
        for p in pts {
            match nodes.last_mut() {
                Some(last) if (p.x - last.x).abs() < 0.01 => {
                    if p.z > last.z {
                        last.z = p.z;
                    }
                }
                _ => nodes.push(p),
            }
        }
        Surface { nodes }
    }

    /// Elevation of the highest node of the profile, m.
    pub fn highest(&self) -> f64 {
        self.nodes
            .iter()
            .map(|p| p.z)
            .fold(f64::NEG_INFINITY, f64::max)
    }

    /// Elevation of the ground at `x`, m.
    pub fn elevation(&self, x: f64) -> f64 {
        let n = &self.nodes;
        if x <= n[0].x {
            return n[0].z;
        }
        if x >= n[n.len() - 1].x {
            return n[n.len() - 1].z;
        }
        let k = n.partition_point(|p| p.x <= x);
        let (a, b) = (n[k - 1], n[k]);
        let w = (x - a.x) / (b.x - a.x);
        a.z + w * (b.z - a.z)
    }

    /// Slope `d(elevation)/dx` at `x` (0 beyond the ends; the right segment's at a
    /// vertex).
    pub fn slope(&self, x: f64) -> f64 {
        let n = &self.nodes;
        if n.len() < 2 || x < n[0].x || x > n[n.len() - 1].x {
            return 0.0;
        }
        let k = n.partition_point(|p| p.x <= x).clamp(1, n.len() - 1);
        let (a, b) = (n[k - 1], n[k]);
        (b.z - a.z) / (b.x - a.x)
    }

    /// Depth of `p` below the ground, m (negative above it).
    pub fn depth(&self, p: Point) -> f64 {
        self.elevation(p.x) - p.z
    }
}

/// A shot: one source position and the picks recorded from it.
#[derive(Debug, Clone, PartialEq)]
pub struct Shot {
    /// Identifier as in the file.
    pub id: String,
    /// Source position.
    pub source: Point,
    /// Indices into [`Survey::picks`], in file order.
    pub picks: Vec<usize>,
}

/// A line of picks with its geometry.
#[derive(Debug, Clone, PartialEq)]
pub struct Survey {
    /// Every pick, in file order.
    pub picks: Vec<Pick>,
    /// Shots in order of first appearance.
    pub shots: Vec<Shot>,
    /// Ground surface.
    pub surface: Surface,
    /// Problems that do not stop the survey from being used (duplicates, ...).
    pub warnings: Vec<String>,
}

/// Two positions closer than this are the same station, m.
pub const SAME_POSITION_M: f64 = 0.01;

/// Slowest apparent velocity any ground can produce for a first arrival, m/s.
///
/// Dry loose soils and peat go down to about 100–200 m/s (handbook ranges, e.g.
/// Telford, Geldart & Sheriff 1990, table 4.1, recalled from memory); 50 m/s leaves a
/// wide margin and still catches a time typed in the wrong unit.
pub const SLOWEST_APPARENT_MPS: f64 = 50.0;

/// Allowance on the slowest-ground test for trigger delay and picking error, s.
pub const TIME_ALLOWANCE_S: f64 = 0.005;

impl Survey {
    /// Builds a survey from picks made in memory (used by the demo and the tests);
    /// the surface runs through the stations.
    pub fn from_picks(picks: Vec<Pick>) -> Result<Survey, InputErrors> {
        let surface = stations_surface(&picks);
        Survey::assemble(Path::new("<memory>"), picks, surface)
    }

    /// The same survey without the picks for which `drop` holds (shots left without
    /// picks disappear), the ground surface and the warnings kept; the number dropped.
    pub fn without(&self, drop: impl Fn(&Pick) -> bool) -> (Survey, usize) {
        let kept: Vec<Pick> = self.picks.iter().filter(|p| !drop(p)).cloned().collect();
        let n = self.picks.len() - kept.len();
        let mut shots: Vec<Shot> = Vec::new();
        for (k, p) in kept.iter().enumerate() {
            match shots.iter_mut().find(|s| s.id == p.shot) {
                Some(s) => s.picks.push(k),
                None => shots.push(Shot {
                    id: p.shot.clone(),
                    source: p.source,
                    picks: vec![k],
                }),
            }
        }
        let survey = Survey {
            picks: kept,
            shots,
            surface: self.surface.clone(),
            warnings: self.warnings.clone(),
        };
        (survey, n)
    }

    fn assemble(path: &Path, picks: Vec<Pick>, surface: Surface) -> Result<Survey, InputErrors> {
        let mut errors = Vec::new();
        let mut warnings = Vec::new();
        let mut shots: Vec<Shot> = Vec::new();
        let mut index: HashMap<&str, usize> = HashMap::new();
        for (k, p) in picks.iter().enumerate() {
            match index.get(p.shot.as_str()) {
                Some(&s) => {
                    let shot = &mut shots[s];
                    if shot.source.dist(&p.source) > SAME_POSITION_M {
                        let first = &picks[shot.picks[0]];
                        errors.push(
                            InputError::at(
                                path,
                                p.line,
                                format!(
                                    "shot '{}' has its source at x={} z={} here but at x={} z={} on line {}",
                                    p.shot, p.source.x, p.source.z, first.source.x, first.source.z, first.line
                                ),
                            )
                            .column("source_x")
                            .hint("give each source position its own shot id, or correct the position"),
                        );
                    }
                    shot.picks.push(k);
                }
                None => {
                    index.insert(p.shot.as_str(), shots.len());
                    shots.push(Shot {
                        id: p.shot.clone(),
                        source: p.source,
                        picks: vec![k],
                    });
                }
            }
        }
        // Duplicates: same shot, same receiver position.
        for shot in &shots {
            let mut recs: Vec<usize> = shot.picks.clone();
            recs.sort_by(|&a, &b| {
                picks[a]
                    .receiver
                    .x
                    .total_cmp(&picks[b].receiver.x)
                    .then(picks[a].receiver.z.total_cmp(&picks[b].receiver.z))
            });
            for w in recs.windows(2) {
                let (a, b) = (&picks[w[0]], &picks[w[1]]);
                if a.receiver.dist(&b.receiver) <= SAME_POSITION_M {
                    let (a, b) = if a.line <= b.line { (a, b) } else { (b, a) };
                    warnings.push(format!(
                        "{}: lines {} and {}: duplicate pick, shot '{}' to the receiver at x={} ({} ms and {} ms); both are kept — delete one if it is a copy",
                        path.display(),
                        a.line,
                        b.line,
                        a.shot,
                        a.receiver.x,
                        fmt_ms(a.time),
                        fmt_ms(b.time)
                    ));
                }
            }
        }
        if errors.is_empty() {
            Ok(Survey {
                picks,
                shots,
                surface,
                warnings,
            })
        } else {
            Err(InputErrors(errors))
        }
    }

    /// Each shot's source and the receivers of its picks, in pick order: the shape the
    /// fast-marching batch solvers take.
    pub fn shot_geometry(&self) -> (Vec<Point>, Vec<Vec<Point>>) {
        let sources = self.shots.iter().map(|s| s.source).collect();
        let receivers = self
            .shots
            .iter()
            .map(|s| s.picks.iter().map(|&k| self.picks[k].receiver).collect())
            .collect();
        (sources, receivers)
    }

    /// Distinct receiver positions, sorted by x.
    pub fn receivers(&self) -> Vec<Point> {
        let pts: Vec<Point> = self.picks.iter().map(|p| p.receiver).collect();
        distinct_points(&pts)
    }

    /// Smallest distance along the line between two distinct receivers, m (`None` with
    /// fewer than two).
    pub fn min_receiver_spacing(&self) -> Option<f64> {
        self.receivers()
            .windows(2)
            .map(|w| w[1].x - w[0].x)
            .filter(|d| *d > SAME_POSITION_M)
            .reduce(f64::min)
    }

    /// Every distinct station (sources and receivers), sorted by x.
    pub fn stations(&self) -> Vec<Point> {
        let mut pts: Vec<Point> = self.picks.iter().map(|p| p.receiver).collect();
        pts.extend(self.shots.iter().map(|s| s.source));
        distinct_points(&pts)
    }

    /// Smallest and largest x of any station, m.
    pub fn x_range(&self) -> (f64, f64) {
        let st = self.stations();
        (st[0].x, st[st.len() - 1].x)
    }
}

fn distinct_points(pts: &[Point]) -> Vec<Point> {
    let mut v = pts.to_vec();
    v.sort_by(|a, b| a.x.total_cmp(&b.x).then(a.z.total_cmp(&b.z)));
    let mut out: Vec<Point> = Vec::with_capacity(v.len());
    for p in v {
        if !out
            .iter()
            .rev()
            .take(8)
            .any(|q| q.dist(&p) <= SAME_POSITION_M)
        {
            out.push(p);
        }
    }
    out
}

/// Ground surface through every source and receiver (the highest station at each x).
pub fn stations_surface(picks: &[Pick]) -> Surface {
    let mut pts: Vec<Point> = picks.iter().map(|p| p.receiver).collect();
    pts.extend(picks.iter().map(|p| p.source));
    Surface::through(&pts)
}

/// A number with three significant digits, in plain or scientific notation.
fn fmt_sig(v: f64) -> String {
    if v != 0.0 && (v.abs() < 0.01 || v.abs() >= 1e6) {
        format!("{v:.2e}")
    } else {
        format!("{v:.3}")
    }
}

pub(crate) fn fmt_ms(t: f64) -> String {
    format!("{:.2}", t * 1e3)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn surface_interpolates_and_extends_flat() {
        let s = Surface::through(&[Point::new(10.0, 2.0), Point::new(0.0, 0.0)]);
        assert_eq!(s.elevation(5.0), 1.0);
        assert_eq!(s.elevation(-3.0), 0.0);
        assert_eq!(s.elevation(30.0), 2.0);
    }

    #[test]
    fn borehole_receiver_does_not_lower_the_surface() {
        let s = Surface::through(&[Point::new(5.0, -10.0), Point::new(5.0, 0.5)]);
        assert_eq!(s.nodes.len(), 1);
        assert_eq!(s.elevation(5.0), 0.5);
    }
}
