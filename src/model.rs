//! Velocity models on a regular 2-D grid of nodes.
//!
//! `x` runs along the profile, `z` is elevation (positive up). Node `(i, j)` sits at
//! `x = x0 + i·dx`, `z = z0 + j·dz`, stored at index `j·nx + i` (row by row from the
//! bottom). Nodes above the ground surface are *air*: they hold `NaN` velocity and carry
//! no energy in any solver.

/// Geometry of a regular node grid. Plain data, shared by every solver.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct GridSpec {
    /// x of the first column, m.
    pub x0: f64,
    /// z (elevation) of the bottom row, m.
    pub z0: f64,
    /// Node spacing along x, m.
    pub dx: f64,
    /// Node spacing along z, m.
    pub dz: f64,
    /// Number of columns.
    pub nx: usize,
    /// Number of rows.
    pub nz: usize,
}

impl GridSpec {
    /// Number of nodes.
    pub fn len(&self) -> usize {
        self.nx * self.nz
    }
    /// True when the grid holds no node.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
    /// Linear index of node `(i, j)`.
    #[inline]
    pub fn idx(&self, i: usize, j: usize) -> usize {
        j * self.nx + i
    }
    /// x of column `i`.
    #[inline]
    pub fn x(&self, i: usize) -> f64 {
        self.x0 + i as f64 * self.dx
    }
    /// z of row `j`.
    #[inline]
    pub fn z(&self, j: usize) -> f64 {
        self.z0 + j as f64 * self.dz
    }
    /// x of the last column.
    pub fn x_max(&self) -> f64 {
        self.x(self.nx.saturating_sub(1))
    }
    /// z of the top row.
    pub fn z_max(&self) -> f64 {
        self.z(self.nz.saturating_sub(1))
    }
    /// True when `(x, z)` lies inside the grid's rectangle (edges included, with a
    /// tolerance of a millionth of a cell).
    pub fn contains(&self, x: f64, z: f64) -> bool {
        let ex = 1e-6 * self.dx;
        let ez = 1e-6 * self.dz;
        x >= self.x0 - ex && x <= self.x_max() + ex && z >= self.z0 - ez && z <= self.z_max() + ez
    }
}

use std::path::Path;

use crate::error::{read_text, InputError, InputErrors};
use crate::survey::{header_map, number, records, Surface};
use rayon::prelude::*;

/// One node line of a model file: `(line, x, z, velocity)`.
type NodeLine = (u64, f64, f64, f64);

/// A velocity model: node velocities in m/s on a [`GridSpec`], `NaN` at air nodes.
#[derive(Debug, Clone, PartialEq)]
pub struct VelocityGrid {
    /// Node geometry.
    pub spec: GridSpec,
    /// Velocity at each node, m/s; `NaN` marks air.
    pub v: Vec<f64>,
}

/// The analytic ground models used by the tests and the demo.
#[derive(Debug, Clone, PartialEq)]
pub enum Analytic {
    /// One velocity everywhere.
    Constant {
        /// m/s
        v: f64,
    },
    /// `v = v0 + g·(z − z_ref)` (elevation z), the classic linear-gradient ground.
    Gradient {
        /// velocity at `z_ref`, m/s
        v0: f64,
        /// gradient dv/dz, 1/s (negative: faster downwards)
        g: f64,
        /// reference elevation, m
        z_ref: f64,
    },
    /// Flat layers: `tops[k]` is the elevation of the top of layer `k + 1`, the first
    /// layer runs from the surface down to `tops[0]`.
    Layered {
        /// velocity of each layer from the top, m/s
        v: Vec<f64>,
        /// elevation of each interface, from the top down, m
        tops: Vec<f64>,
    },
}

impl Analytic {
    /// Velocity at elevation `z`, m/s.
    pub fn velocity(&self, z: f64) -> f64 {
        match self {
            Analytic::Constant { v } => *v,
            Analytic::Gradient { v0, g, z_ref } => v0 + g * (z - z_ref),
            Analytic::Layered { v, tops } => {
                let k = tops.iter().take_while(|&&t| z < t).count();
                v[k.min(v.len() - 1)]
            }
        }
    }
}

impl VelocityGrid {
    /// Samples a velocity function onto `spec`; nodes above `surface` become air.
    pub fn from_fn(
        spec: GridSpec,
        surface: Option<&Surface>,
        f: impl Fn(f64, f64) -> f64,
    ) -> VelocityGrid {
        let mut v = vec![f64::NAN; spec.len()];
        for j in 0..spec.nz {
            for i in 0..spec.nx {
                let (x, z) = (spec.x(i), spec.z(j));
                let air = surface.is_some_and(|s| z > s.elevation(x) + 1e-9);
                if !air {
                    v[spec.idx(i, j)] = f(x, z);
                }
            }
        }
        VelocityGrid { spec, v }
    }

    /// Samples an analytic model onto `spec`.
    pub fn analytic(spec: GridSpec, surface: Option<&Surface>, m: &Analytic) -> VelocityGrid {
        VelocityGrid::from_fn(spec, surface, |_, z| m.velocity(z))
    }

    /// True when node `k` is air.
    #[inline]
    pub fn is_air(&self, k: usize) -> bool {
        self.v[k].is_nan()
    }

    /// Node slownesses in s/m, `f64::INFINITY` at air nodes (the solvers' air marker).
    pub fn slowness(&self) -> Vec<f64> {
        self.v
            .iter()
            .map(|&v| if v.is_nan() { f64::INFINITY } else { 1.0 / v })
            .collect()
    }

    /// Builds a model from node slownesses (non-finite entries become air).
    pub fn from_slowness(spec: GridSpec, s: &[f64]) -> VelocityGrid {
        let v = s
            .iter()
            .map(|&s| {
                if s.is_finite() && s > 0.0 {
                    1.0 / s
                } else {
                    f64::NAN
                }
            })
            .collect();
        VelocityGrid { spec, v }
    }

    /// Bilinear velocity at `(x, z)` from the non-air corners of its cell (weights
    /// renormalised); `None` outside the grid or where all four corners are air.
    pub fn sample(&self, x: f64, z: f64) -> Option<f64> {
        let s = &self.spec;
        if !s.contains(x, z) {
            return None;
        }
        let fx = ((x - s.x0) / s.dx).clamp(0.0, (s.nx - 1) as f64);
        let fz = ((z - s.z0) / s.dz).clamp(0.0, (s.nz - 1) as f64);
        let i = (fx.floor() as usize).min(s.nx.saturating_sub(2));
        let j = (fz.floor() as usize).min(s.nz.saturating_sub(2));
        let (wx, wz) = (fx - i as f64, fz - j as f64);
        let mut acc = 0.0;
        let mut wsum = 0.0;
        for (di, dj, w) in [
            (0, 0, (1.0 - wx) * (1.0 - wz)),
            (1, 0, wx * (1.0 - wz)),
            (0, 1, (1.0 - wx) * wz),
            (1, 1, wx * wz),
        ] {
            let (ii, jj) = ((i + di).min(s.nx - 1), (j + dj).min(s.nz - 1));
            let v = self.v[s.idx(ii, jj)];
            if !v.is_nan() && w > 0.0 {
                acc += w * v;
                wsum += w;
            }
        }
        if wsum > 1e-12 {
            Some(acc / wsum)
        } else {
            // on a node or edge whose weighted corners are air: take any non-air corner
            let k = s.idx(
                (fx.round() as usize).min(s.nx - 1),
                (fz.round() as usize).min(s.nz - 1),
            );
            (!self.v[k].is_nan()).then_some(self.v[k])
        }
    }

    /// Resamples this model onto another grid (bilinear; air where this model has none).
    pub fn resample(&self, spec: GridSpec, surface: Option<&Surface>) -> VelocityGrid {
        VelocityGrid::from_fn(spec, surface, |x, z| self.sample(x, z).unwrap_or(f64::NAN))
    }

    /// The model as `x,z,velocity_mps` CSV text, air nodes left out.
    pub fn to_csv(&self) -> String {
        let s = &self.spec;
        let mut out = String::with_capacity(s.len() * 24);
        out.push_str("x,z,velocity_mps\n");
        for j in 0..s.nz {
            for i in 0..s.nx {
                let v = self.v[s.idx(i, j)];
                if !v.is_nan() {
                    out.push_str(&format!(
                        "{},{},{:.2}\n",
                        fmt_coord(s.x(i)),
                        fmt_coord(s.z(j)),
                        v
                    ));
                }
            }
        }
        out
    }

    /// Reads a model file (`x,z,velocity_mps`, one line per node, air nodes left out).
    pub fn read(path: &Path) -> Result<VelocityGrid, InputErrors> {
        let text = read_text(path, "velocity model")?;
        Self::parse(path, &text)
    }

    /// Parses model CSV text; `path` only names the source in errors.
    pub fn parse(path: &Path, text: &str) -> Result<VelocityGrid, InputErrors> {
        let nodes = match plain_nodes(path, text) {
            Some(nodes) => nodes,
            None => Self::csv_nodes(path, text)?,
        };
        Self::from_nodes(path, &nodes)
    }

    /// The node lines of a model file read by the general CSV reader, `(line, x, z, v)`
    /// in file order, with every problem found.
    fn csv_nodes(path: &Path, text: &str) -> Result<Vec<NodeLine>, InputErrors> {
        if text.trim().is_empty() {
            return Err(InputError::file(path, "the file is empty")
                .hint("a model file has the header 'x,z,velocity_mps' and one line per node")
                .into());
        }
        let recs = records(path, text)?;
        let Some(((hline, header), rows)) = recs.split_first() else {
            return Err(InputError::file(path, "the file holds only comments").into());
        };
        let map = header_map(path, *hline, header, &["x", "z", "velocity_mps"])?;
        for req in ["x", "z", "velocity_mps"] {
            if !map.contains_key(req) {
                return Err(InputError::at(
                    path,
                    *hline,
                    format!("the required column '{req}' is missing"),
                )
                .hint("the header must be x,z,velocity_mps")
                .into());
            }
        }
        if rows.is_empty() {
            return Err(InputError::file(path, "the file has a header but no nodes").into());
        }
        let mut errors = Vec::new();
        let mut nodes: Vec<NodeLine> = Vec::with_capacity(rows.len());
        for (line, f) in rows {
            if f.len() != header.len() {
                errors.push(InputError::at(
                    path,
                    *line,
                    format!(
                        "this line has {} fields but the header has {}",
                        f.len(),
                        header.len()
                    ),
                ));
                continue;
            }
            let r = (|| -> Result<(f64, f64, f64), InputError> {
                let x = number(path, *line, "x", &f[map["x"]])?;
                let z = number(path, *line, "z", &f[map["z"]])?;
                let v = number(path, *line, "velocity_mps", &f[map["velocity_mps"]])?;
                if v <= 0.0 {
                    return Err(InputError::at(path, *line, format!("velocity {v} is not positive"))
                        .column("velocity_mps")
                        .hint("every node below the ground needs a positive velocity; leave air nodes out of the file"));
                }
                Ok((x, z, v))
            })();
            match r {
                Ok((x, z, v)) => nodes.push((*line, x, z, v)),
                Err(e) => errors.push(e),
            }
        }
        if !errors.is_empty() {
            return Err(InputErrors(errors));
        }
        Ok(nodes)
    }

    /// The grid from the node lines: regular axes, no node twice, no hole under the
    /// ground.
    fn from_nodes(path: &Path, nodes: &[NodeLine]) -> Result<VelocityGrid, InputErrors> {
        let (ax, az) = rayon::join(
            || axis(path, nodes, |n| n.1, "x"),
            || axis(path, nodes, |n| n.2, "z"),
        );
        let ((x0, dx, nx), (z0, dz, nz)) = (ax?, az?);
        let spec = GridSpec {
            x0,
            z0,
            dx,
            dz,
            nx,
            nz,
        };
        let mut v = vec![f64::NAN; spec.len()];
        let mut line_of = vec![0u64; spec.len()];
        for &(line, x, z, vel) in nodes {
            let i = ((x - x0) / dx).round() as usize;
            let j = ((z - z0) / dz).round() as usize;
            let k = spec.idx(i, j);
            if !v[k].is_nan() {
                return Err(InputError::at(
                    path,
                    line,
                    format!(
                        "the node x={x} z={z} is given twice (also on line {})",
                        line_of[k]
                    ),
                )
                .hint("keep one line per node")
                .into());
            }
            v[k] = vel;
            line_of[k] = line;
        }
        // Air may only sit above the ground: no hole under a node that has velocity.
        for i in 0..nx {
            let mut seen_ground_above = None;
            for j in (0..nz).rev() {
                let k = spec.idx(i, j);
                if !v[k].is_nan() {
                    seen_ground_above = Some(line_of[k]);
                } else if let Some(l) = seen_ground_above {
                    return Err(InputError::at(
                        path,
                        l,
                        format!(
                            "the node x={} z={} is missing below this one",
                            fmt_coord(spec.x(i)),
                            fmt_coord(spec.z(j))
                        ),
                    )
                    .hint("only nodes above the ground may be left out; give every node below the surface")
                    .into());
                }
            }
        }
        Ok(VelocityGrid { spec, v })
    }

    /// The ground surface implied by the model: the top non-air node of each column.
    pub fn surface(&self) -> Surface {
        let s = &self.spec;
        let pts: Vec<crate::survey::Point> = (0..s.nx)
            .filter_map(|i| {
                (0..s.nz)
                    .rev()
                    .find(|&j| !self.v[s.idx(i, j)].is_nan())
                    .map(|j| crate::survey::Point::new(s.x(i), s.z(j)))
            })
            .collect();
        Surface::through(&pts)
    }

    /// Smallest and largest velocity below the ground, m/s.
    pub fn range(&self) -> (f64, f64) {
        self.v
            .iter()
            .filter(|v| !v.is_nan())
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
                (a.min(v), b.max(v))
            })
    }
}

/// The node lines of a model file in the plain form files written by programs have —
/// the header, then three numeric fields per line, `\n` line ends, no quotes, spaces,
/// comments or blank lines (except at the end) — read without the general CSV reader
/// (whose per-field strings cost about as much as the rest of a `forward` run on a
/// large model). `None` for any other text and for any line that is not a valid
/// node: the caller then reads the file with the general reader, which gives such
/// files the same nodes and line numbers, and words every error.
fn plain_nodes(path: &Path, text: &str) -> Option<Vec<NodeLine>> {
    if text.starts_with('\u{feff}') || text.contains(['"', '#', '\r']) {
        return None;
    }
    let (head, body) = text.trim_end_matches('\n').split_once('\n')?;
    let header: Vec<String> = head.split(',').map(str::to_string).collect();
    if header.len() != 3 {
        return None;
    }
    let map = header_map(path, 1, &header, &["x", "z", "velocity_mps"]).ok()?;
    let cols = (*map.get("x")?, *map.get("z")?, *map.get("velocity_mps")?);
    // The node lines in pieces cut at line ends, read in parallel; each piece's
    // lines are numbered from 0 and shifted once all are read.
    let n = rayon::current_num_threads().clamp(1, 16);
    let mut pieces = Vec::with_capacity(n);
    let mut rest = body;
    for k in (1..n).rev() {
        let cut = rest.len() - rest.len() / (k + 1);
        match rest[cut..].find('\n') {
            Some(e) if cut > 0 => {
                pieces.push(&rest[..cut + e]);
                rest = &rest[cut + e + 1..];
            }
            _ => break,
        }
    }
    pieces.push(rest);
    let read: Vec<Option<(Vec<NodeLine>, u64)>> =
        pieces.par_iter().map(|p| plain_piece(p, cols)).collect();
    let mut nodes = Vec::with_capacity(text.len() / 16);
    // the header is line 1
    let mut first = 2;
    for r in read {
        let (piece, lines) = r?;
        nodes.extend(piece.into_iter().map(|(l, x, z, v)| (first + l, x, z, v)));
        first += lines;
    }
    Some(nodes)
}

/// The node lines of one piece of a plain model file ([`plain_nodes`]), lines
/// numbered from 0, and the number of lines; `None` at the first line that is not a
/// plain valid node.
fn plain_piece(text: &str, (ix, iz, iv): (usize, usize, usize)) -> Option<(Vec<NodeLine>, u64)> {
    let mut nodes = Vec::with_capacity(text.len() / 16);
    let mut lines = 0;
    for l in text.split('\n') {
        if l.is_empty() {
            return None;
        }
        let mut f = [0.0f64; 3];
        let mut fields = l.split(',');
        for v in &mut f {
            *v = fields
                .next()?
                .parse()
                .ok()
                .filter(|v: &f64| v.is_finite())?;
        }
        if fields.next().is_some() || f[iv] <= 0.0 {
            return None;
        }
        nodes.push((lines, f[ix], f[iz], f[iv]));
        lines += 1;
    }
    Some((nodes, lines))
}

/// Coordinates print with up to 4 decimals and no trailing zeros.
fn fmt_coord(v: f64) -> String {
    let s = format!("{v:.4}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    if s == "-0" {
        "0".into()
    } else {
        s.into()
    }
}

/// Infers a regular axis (origin, spacing, count) from the distinct values of one
/// coordinate, naming the value that breaks the pattern.
fn axis(
    path: &Path,
    nodes: &[NodeLine],
    get: impl Fn(&NodeLine) -> f64 + Sync,
    name: &str,
) -> Result<(f64, f64, usize), InputError> {
    let mut vals: Vec<(f64, u64)> = nodes.iter().map(|n| (get(n), n.0)).collect();
    // equal values in file order (the lines increase), as a stable sort would leave them
    vals.sort_unstable_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
    let span = vals[vals.len() - 1].0 - vals[0].0;
    let tol = 1e-6 * span.max(1.0);
    let mut distinct: Vec<(f64, u64)> = Vec::new();
    for (v, l) in vals {
        match distinct.last() {
            Some(&(d, _)) if (v - d).abs() <= tol => {}
            _ => distinct.push((v, l)),
        }
    }
    if distinct.len() < 2 {
        return Err(InputError::file(
            path,
            format!("all nodes share one {name} value ({}): a model needs at least two columns and two rows", distinct[0].0),
        ));
    }
    let d = distinct
        .windows(2)
        .map(|w| w[1].0 - w[0].0)
        .fold(f64::INFINITY, f64::min);
    let x0 = distinct[0].0;
    for (k, &(v, line)) in distinct.iter().enumerate() {
        let expect = x0 + k as f64 * d;
        if (v - expect).abs() > 1e-4 * d {
            return Err(InputError::at(
                path,
                line,
                format!(
                    "{name}={v} breaks the regular spacing of {} m inferred from the file (expected {name}={})",
                    fmt_coord(d),
                    fmt_coord(expect)
                ),
            )
            .column(name)
            .hint("a model is a regular grid: every node on the same spacing with no column or row skipped"));
        }
    }
    Ok((x0, d, distinct.len()))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn spec() -> GridSpec {
        GridSpec {
            x0: 0.0,
            z0: -10.0,
            dx: 1.0,
            dz: 0.5,
            nx: 11,
            nz: 21,
        }
    }

    #[test]
    fn csv_round_trip_keeps_air_and_values() {
        let surf = Surface::through(&[
            crate::survey::Point::new(0.0, -1.0),
            crate::survey::Point::new(10.0, 0.0),
        ]);
        let m = VelocityGrid::analytic(
            spec(),
            Some(&surf),
            &Analytic::Gradient {
                v0: 400.0,
                g: -30.0,
                z_ref: 0.0,
            },
        );
        let back = VelocityGrid::parse(Path::new("m.csv"), &m.to_csv()).unwrap();
        assert_eq!(back.spec.nx, 11);
        assert_eq!(back.spec.nz, 21);
        for (a, b) in m.v.iter().zip(&back.v) {
            assert!(a.is_nan() == b.is_nan());
            if !a.is_nan() {
                assert!((a - b).abs() < 0.006);
            }
        }
    }

    #[test]
    fn plain_reader_gives_the_csv_readers_nodes_and_lines() {
        let p = Path::new("m.csv");
        // long enough to be read in several pieces
        let long = VelocityGrid::from_fn(spec(), None, |x, z| 300.0 + 7.0 * x - 20.0 * z).to_csv();
        for text in [
            long.as_str(),
            "x,z,velocity_mps\n0,0,500\n1,0,510\n0,1,520\n1,1,530\n",
            "z,velocity_mps,x\n0,5e2,0\n0,+510,1\n1,520.25,0\n1,530,1",
            "X,Z,Velocity_MPS\n0,-0.5,500\n1,-0.5,510\n0,0,520\n1,0,530\n\n\n",
        ] {
            let fast = plain_nodes(p, text).expect("plain text");
            assert_eq!(fast, VelocityGrid::csv_nodes(p, text).unwrap(), "{text:?}");
        }
        // anything else is left to the CSV reader, its line numbers and its messages
        for text in [
            "",
            "x,z,velocity_mps\n",
            "\nx,z,velocity_mps\n0,0,500\n",
            "x,z,velocity_mps\n\n0,0,500\n",
            "# c\nx,z,velocity_mps\n0,0,500\n",
            "x,z,velocity_mps\r\n0,0,500\r\n",
            "x,z,velocity_mps\r0,0,500\r",
            "x, z, velocity_mps\n0,0,500\n",
            "x,z,velocity_mps\n0, 0,500\n",
            "x,z,velocity_mps\n\"0\",0,500\n",
            "\u{feff}x,z,velocity_mps\n0,0,500\n",
            "x,z,velocity_mps,extra\n0,0,500,1\n",
            "x,z\n0,0\n",
            "x,x,velocity_mps\n0,0,500\n",
            "x,z,velocity_mps\n0,0,500,1\n",
            "x,z,velocity_mps\n0,0\n",
            "x,z,velocity_mps\n0,0,-500\n",
            "x,z,velocity_mps\n0,0,0\n",
            "x,z,velocity_mps\n0,0,nan\n",
            "x,z,velocity_mps\n0,0,inf\n",
            "x,z,velocity_mps\n,,\n0,0,500\n",
            &long.replacen("\n", "\n\n", 200),
            &format!("{long}\n\n0,0,100\n"),
        ] {
            assert!(plain_nodes(p, text).is_none(), "{text:?}");
        }
    }

    #[test]
    fn bilinear_sampling_is_exact_for_linear_fields() {
        let m = VelocityGrid::from_fn(spec(), None, |x, z| 300.0 + 7.0 * x - 20.0 * z);
        let v = m.sample(3.3, -4.2).unwrap();
        assert!((v - (300.0 + 7.0 * 3.3 + 20.0 * 4.2)).abs() < 1e-9);
        assert!(m.sample(20.0, 0.0).is_none());
    }
}
