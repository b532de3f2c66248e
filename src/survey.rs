//! Survey data: first-arrival picks, shots, receivers and the ground surface.
//!
//! Files use metres and milliseconds (or seconds where the column says `_s`); everything
//! in memory is SI. See `README.md` for the picks file contract.

use std::collections::HashMap;
use std::path::Path;

use crate::error::{read_text, InputError, InputErrors};

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

impl Pick {
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

/// The columns of a picks file.
const PICK_COLUMNS: [&str; 9] = [
    "shot",
    "source_x",
    "source_z",
    "receiver_x",
    "receiver_z",
    "time_ms",
    "time_s",
    "sigma_ms",
    "sigma_s",
];

/// Reads a picks file; the surface runs through the stations.
///
/// Every problem found is returned at once, each with its line and column.
pub fn read_picks(path: &Path) -> Result<Survey, InputErrors> {
    let text = read_text(path, "picks")?;
    let picks = parse_picks(path, &text)?;
    let surface = stations_surface(&picks);
    Survey::assemble(path, picks, surface)
}

/// Reads a picks file and a separate ground-surface file (`x,z`).
pub fn read_picks_with_surface(path: &Path, surface: &Path) -> Result<Survey, InputErrors> {
    let text = read_text(path, "picks")?;
    let picks = parse_picks(path, &text)?;
    let surface = read_surface(surface)?;
    Survey::assemble(path, picks, surface)
}

/// CSV records of a text with `#` comments, each with its 1-based line.
pub(crate) fn records(path: &Path, text: &str) -> Result<Vec<(u64, Vec<String>)>, InputError> {
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .comment(Some(b'#'))
        .trim(csv::Trim::All)
        .from_reader(text.as_bytes());
    // Line numbers from byte offsets: the csv crate's own line count leaves out comment
    // lines and counts CRLF line ends twice. A record's offset may point at comment or
    // blank lines before it; its line is the first one with content.
    let starts: Vec<usize> = std::iter::once(0)
        .chain(text.match_indices('\n').map(|(k, _)| k + 1))
        .collect();
    let line_of = |byte: u64| -> u64 {
        // after a CRLF the reader's offset can sit on the LF of the line before
        let mut b = (byte as usize).min(text.len());
        while text[b..].starts_with(['\r', '\n']) {
            b += 1;
        }
        let mut l = starts.partition_point(|&s| s <= b).max(1);
        while l < starts.len() {
            let end = starts.get(l).copied().unwrap_or(text.len());
            let t = text[starts[l - 1]..end].trim();
            if !(t.is_empty() || t.starts_with('#')) {
                break;
            }
            l += 1;
        }
        l as u64
    };
    let mut out = Vec::new();
    for rec in rdr.records() {
        let rec = rec.map_err(|e| {
            let line = e.position().map(|p| line_of(p.byte())).unwrap_or(0);
            InputError::at(path, line, format!("not readable as CSV: {e}"))
        })?;
        let line = rec.position().map(|p| line_of(p.byte())).unwrap_or(0);
        if rec.iter().all(|f| f.is_empty()) {
            continue;
        }
        out.push((line, rec.iter().map(str::to_string).collect()));
    }
    Ok(out)
}

/// Maps header names to column positions; unknown or repeated names are errors.
pub(crate) fn header_map(
    path: &Path,
    line: u64,
    header: &[String],
    known: &[&str],
) -> Result<HashMap<String, usize>, InputError> {
    let mut map = HashMap::new();
    let mut unknown = Vec::new();
    for (k, name) in header.iter().enumerate() {
        let name = name.trim_start_matches('\u{feff}').to_ascii_lowercase();
        if !known.contains(&name.as_str()) {
            unknown.push(if name.is_empty() {
                format!("(empty name in field {})", k + 1)
            } else {
                format!("'{name}'")
            });
            continue;
        }
        if map.insert(name.clone(), k).is_some() {
            return Err(
                InputError::at(path, line, "this column appears twice in the header")
                    .column(name)
                    .hint("keep one of them"),
            );
        }
    }
    if !unknown.is_empty() {
        return Err(InputError::at(
            path,
            line,
            format!("unknown column {} in the header", unknown.join(", ")),
        )
        .hint(format!(
            "the columns this file may have are: {}; remove or rename the others",
            known.join(", ")
        )));
    }
    Ok(map)
}

/// Parses one numeric field: finite, with a clear message otherwise.
pub(crate) fn number(path: &Path, line: u64, col: &str, field: &str) -> Result<f64, InputError> {
    let v: f64 = field.parse().map_err(|_| {
        InputError::at(path, line, format!("'{field}' is not a number"))
            .column(col)
            .hint("write a plain decimal number such as 12.5")
    })?;
    if !v.is_finite() {
        return Err(
            InputError::at(path, line, format!("'{field}' is not a finite number"))
                .column(col)
                .hint("every value must be an ordinary finite number"),
        );
    }
    Ok(v)
}

fn parse_picks(path: &Path, text: &str) -> Result<Vec<Pick>, InputErrors> {
    if text.trim().is_empty() {
        return Err(InputError::file(path, "the file is empty")
            .hint("a picks file starts with the header line 'shot,source_x,source_z,receiver_x,receiver_z,time_ms' (optional: sigma_ms)")
            .into());
    }
    let recs = records(path, text)?;
    let Some(((hline, header), rows)) = recs.split_first() else {
        return Err(InputError::file(path, "the file holds only comments")
            .hint("add the header line and one line per pick")
            .into());
    };
    let map = header_map(path, *hline, header, &PICK_COLUMNS)?;
    for req in ["shot", "source_x", "source_z", "receiver_x", "receiver_z"] {
        if !map.contains_key(req) {
            return Err(InputError::at(path, *hline, format!("the required column '{req}' is missing"))
                .hint("the header must name shot, source_x, source_z, receiver_x, receiver_z and time_ms (or time_s)")
                .into());
        }
    }
    let (tcol, tscale) = match (map.get("time_ms"), map.get("time_s")) {
        (Some(_), Some(_)) => {
            return Err(
                InputError::at(path, *hline, "both time_ms and time_s are given")
                    .hint("keep one time column")
                    .into(),
            )
        }
        (Some(&c), None) => (c, 1e-3),
        (None, Some(&c)) => (c, 1.0),
        (None, None) => {
            return Err(InputError::at(
                path,
                *hline,
                "the required column 'time_ms' (or 'time_s') is missing",
            )
            .hint("add the picked first-arrival times")
            .into())
        }
    };
    let tname = if tscale == 1.0 { "time_s" } else { "time_ms" };
    let (scol, sscale, sname) = match (map.get("sigma_ms"), map.get("sigma_s")) {
        (Some(_), Some(_)) => {
            return Err(
                InputError::at(path, *hline, "both sigma_ms and sigma_s are given")
                    .hint("keep one uncertainty column")
                    .into(),
            )
        }
        (Some(&c), None) => (Some(c), 1e-3, "sigma_ms"),
        (None, Some(&c)) => (Some(c), 1.0, "sigma_s"),
        (None, None) => (None, 1.0, ""),
    };
    if rows.is_empty() {
        return Err(InputError::file(path, "the file has a header but no picks")
            .hint("add one line per pick below the header")
            .into());
    }
    let ncol = header.len();
    let col = |name: &str| map[name];
    let mut errors = Vec::new();
    let mut picks = Vec::with_capacity(rows.len());
    for (line, f) in rows {
        let line = *line;
        if f.len() != ncol {
            errors.push(
                InputError::at(
                    path,
                    line,
                    format!("this line has {} fields but the header has {ncol}", f.len()),
                )
                .hint("each line needs one value per header column, separated by commas"),
            );
            continue;
        }
        let row = (|| -> Result<Pick, InputError> {
            let shot = f[col("shot")].clone();
            if shot.is_empty() {
                return Err(InputError::at(path, line, "the shot id is empty")
                    .column("shot")
                    .hint("give every pick the id of its shot"));
            }
            let num = |c: &str| number(path, line, c, &f[col(c)]);
            let source = Point::new(num("source_x")?, num("source_z")?);
            let receiver = Point::new(num("receiver_x")?, num("receiver_z")?);
            let time = number(path, line, tname, &f[tcol])? * tscale;
            if time < 0.0 {
                return Err(InputError::at(path, line, format!("negative time {}", f[tcol]))
                    .column(tname)
                    .hint("first-arrival times are measured from the shot instant and cannot be negative; check the time zero"));
            }
            let sigma = match scol {
                Some(c) if !f[c].is_empty() => {
                    let s = number(path, line, sname, &f[c])? * sscale;
                    if s <= 0.0 {
                        return Err(InputError::at(path, line, format!("uncertainty {} is not positive", f[c]))
                            .column(sname)
                            .hint("give a positive standard uncertainty, or leave the field empty for the run's default"));
                    }
                    Some(s)
                }
                _ => None,
            };
            let pick = Pick {
                shot,
                source,
                receiver,
                time,
                sigma,
                line,
            };
            let offset = pick.offset();
            if offset <= SAME_POSITION_M {
                if time > TIME_ALLOWANCE_S {
                    return Err(InputError::at(
                        path,
                        line,
                        format!(
                            "the receiver sits at the source but the time is {} ms",
                            fmt_ms(time)
                        ),
                    )
                    .column(tname)
                    .hint("a zero-offset first break arrives at about 0 ms; check the time zero (trigger delay) or the positions"));
                }
            } else if time > offset / SLOWEST_APPARENT_MPS + TIME_ALLOWANCE_S {
                return Err(InputError::at(
                    path,
                    line,
                    format!(
                        "{} ms at {:.2} m offset means an apparent velocity of {} m/s, slower than any ground ({} m/s)",
                        fmt_ms(time),
                        offset,
                        fmt_sig(offset / time),
                        SLOWEST_APPARENT_MPS
                    ),
                )
                .column(tname)
                .hint("check the time's unit (the column name says ms or s) and the positions"));
            }
            Ok(pick)
        })();
        match row {
            Ok(p) => picks.push(p),
            Err(e) => errors.push(e),
        }
    }
    if errors.is_empty() {
        Ok(picks)
    } else {
        Err(InputErrors(errors))
    }
}

/// Reads a ground-surface file with columns `x,z` (metres).
pub fn read_surface(path: &Path) -> Result<Surface, InputErrors> {
    let text = read_text(path, "surface")?;
    if text.trim().is_empty() {
        return Err(InputError::file(path, "the file is empty")
            .hint("a surface file has the header 'x,z' and one line per vertex")
            .into());
    }
    let recs = records(path, &text)?;
    let Some(((hline, header), rows)) = recs.split_first() else {
        return Err(InputError::file(path, "the file holds only comments").into());
    };
    let map = header_map(path, *hline, header, &["x", "z"])?;
    if map.len() != 2 {
        return Err(InputError::at(path, *hline, "the header must name both x and z").into());
    }
    let mut pts = Vec::new();
    let mut errors = Vec::new();
    for (line, f) in rows {
        if f.len() != 2 {
            errors.push(InputError::at(
                path,
                *line,
                format!("this line has {} fields, expected 2", f.len()),
            ));
            continue;
        }
        match (
            number(path, *line, "x", &f[map["x"]]),
            number(path, *line, "z", &f[map["z"]]),
        ) {
            (Ok(x), Ok(z)) => pts.push(Point::new(x, z)),
            (Err(e), _) | (_, Err(e)) => errors.push(e),
        }
    }
    if !errors.is_empty() {
        return Err(InputErrors(errors));
    }
    if pts.is_empty() {
        return Err(InputError::file(path, "the file has a header but no vertices").into());
    }
    Ok(Surface::through(&pts))
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
