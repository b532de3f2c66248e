//! Reading model files: the plain fast path and the general CSV reader, one set of
//! nodes and line numbers from either, every problem named by line and column.

use std::path::Path;

use rayon::prelude::*;

use super::{fmt_coord, GridSpec, VelocityGrid};
use crate::error::{read_text, InputError, InputErrors};
use crate::limits;
use crate::survey::{header_map, number, records};

/// One node line of a model file: `(line, x, z, velocity)`.
type NodeLine = (u64, f64, f64, f64);

impl VelocityGrid {
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
            return Err(InputError::file(path, "the file holds only comments")
                .hint("add the header line 'x,z,velocity_mps' and one line per node")
                .into());
        };
        let map = header_map(path, *hline, header, &["x", "z", "velocity_mps", "covered"])?;
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
            return Err(InputError::file(path, "the file has a header but no nodes")
                .hint("add one line per node below the header")
                .into());
        }
        let mut errors = Vec::new();
        let mut nodes: Vec<NodeLine> = Vec::with_capacity(rows.len());
        for (line, f) in rows {
            if f.len() != header.len() {
                errors.push(
                    InputError::at(
                        path,
                        *line,
                        format!(
                            "this line has {} fields but the header has {}",
                            f.len(),
                            header.len()
                        ),
                    )
                    .hint("each line needs one value per header column, separated by commas"),
                );
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
    /// ground. The grid's size is checked against [`limits::MAX_GRID_NODES`] and the
    /// nodes' layout (duplicates, holes) before the grid is allocated, so that a few
    /// lines far apart cannot make it allocate a huge, mostly empty grid.
    fn from_nodes(path: &Path, nodes: &[NodeLine]) -> Result<VelocityGrid, InputErrors> {
        if nodes.len() > limits::MAX_GRID_NODES {
            return Err(InputError::file(
                path,
                format!(
                    "the file has {} node lines, more than the limit of {} nodes a grid may have",
                    nodes.len(),
                    limits::MAX_GRID_NODES
                ),
            )
            .hint("give a coarser model (a larger node spacing) or a shorter section")
            .into());
        }
        let (ax, az) = rayon::join(
            || axis(path, nodes, |n| n.1, "x"),
            || axis(path, nodes, |n| n.2, "z"),
        );
        let ((x0, dx, nx, col), (z0, dz, nz, row)) = (ax?, az?);
        let spec = GridSpec {
            x0,
            z0,
            dx,
            dz,
            nx,
            nz,
        };
        limits::grid(
            nx,
            nz,
            &format!(
                "the model's grid (x from {} to {} m every {} m, z from {} to {} m every {} m)",
                fmt_coord(spec.x0),
                fmt_coord(spec.x_max()),
                fmt_coord(dx),
                fmt_coord(spec.z0),
                fmt_coord(spec.z_max()),
                fmt_coord(dz)
            ),
            "give a coarser model (a larger node spacing) or a shorter section",
        )
        .map_err(|m| {
            InputError::file(path, m).hint("a node far from the others (a typing error in x or z) stretches the grid: check the smallest and largest x and z")
        })?;
        // Each column must hold the rows from the bottom up to its top node, each once.
        // Any column that does not is looked at closely without allocating the grid.
        let mut count = vec![0u32; nx];
        let mut lowest = vec![u32::MAX; nx];
        let mut top = vec![0u32; nx];
        for (&i, &j) in col.iter().zip(&row) {
            let i = i as usize;
            count[i] += 1;
            lowest[i] = lowest[i].min(j);
            top[i] = top[i].max(j);
        }
        if (0..nx).any(|i| lowest[i] != 0 || count[i] != top[i] + 1) {
            if let Some(e) = layout_error(path, nodes, &col, &row, spec) {
                return Err(e.into());
            }
        }
        // Every column now holds as many nodes as rows up to its top, from the bottom
        // row: the layout is whole unless a node is given twice (then a row is missing).
        let mut v = vec![f64::NAN; spec.len()];
        for (n, &(_, _, _, vel)) in nodes.iter().enumerate() {
            let k = spec.idx(col[n] as usize, row[n] as usize);
            if !v[k].is_nan() {
                return Err(duplicate(path, nodes, &col, &row, n).into());
            }
            v[k] = vel;
        }
        Ok(VelocityGrid { spec, v })
    }
}

/// The error of a node given twice: node `n` repeats an earlier one.
fn duplicate(path: &Path, nodes: &[NodeLine], col: &[u32], row: &[u32], n: usize) -> InputError {
    let (line, x, z, _) = nodes[n];
    let first = (0..n)
        .find(|&m| col[m] == col[n] && row[m] == row[n])
        .map_or(0, |m| nodes[m].0);
    InputError::at(
        path,
        line,
        format!("the node x={x} z={z} is given twice (also on line {first})"),
    )
    .hint("keep one line per node")
}

/// The first problem of the nodes' layout, found from the nodes alone (memory in
/// proportion to the lines, not to the grid): the first line (in file order) that
/// repeats a node, else the first column (from the left) with a node missing below
/// a given one, named at the line of the node above the hole. `None` when the layout
/// is whole.
fn layout_error(
    path: &Path,
    nodes: &[NodeLine],
    col: &[u32],
    row: &[u32],
    spec: GridSpec,
) -> Option<InputError> {
    // node indices by column, then row, then file order
    let mut order: Vec<u32> = (0..nodes.len() as u32).collect();
    order.sort_unstable_by_key(|&n| (col[n as usize], row[n as usize], n));
    let at = |n: u32| (col[n as usize], row[n as usize]);
    let repeat = order
        .windows(2)
        .filter(|w| at(w[0]) == at(w[1]))
        .map(|w| w[1] as usize)
        .min();
    if let Some(n) = repeat {
        return Some(duplicate(path, nodes, col, row, n));
    }
    // without repeats, each column's rows are distinct: walk them from the top down
    let missing = |n: u32, j: u32| {
        let i = col[n as usize] as usize;
        InputError::at(
            path,
            nodes[n as usize].0,
            format!(
                "the node x={} z={} is missing below this one",
                fmt_coord(spec.x(i)),
                fmt_coord(spec.z(j as usize))
            ),
        )
        .hint("only nodes above the ground may be left out; give every node below the surface")
    };
    for column in order.chunk_by(|&a, &b| col[a as usize] == col[b as usize]) {
        for w in column.windows(2).rev() {
            let (below, above) = (row[w[0] as usize], row[w[1] as usize]);
            if below + 1 != above {
                return Some(missing(w[1], above - 1));
            }
        }
        let bottom = column[0];
        if row[bottom as usize] > 0 {
            return Some(missing(bottom, row[bottom as usize] - 1));
        }
    }
    None
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
    let map = header_map(path, 1, &header, &["x", "z", "velocity_mps", "covered"]).ok()?;
    let cols = (*map.get("x")?, *map.get("z")?, *map.get("velocity_mps")?);
    // The node lines in pieces cut at line ends, read in parallel; each piece's
    // lines are numbered from 0 and shifted once all are read.
    let n = rayon::current_num_threads().clamp(1, 16);
    let mut pieces = Vec::with_capacity(n);
    let mut rest = body;
    for k in (1..n).rev() {
        // a byte position, not necessarily a character boundary: the piece ends at the
        // next line end after it
        let cut = rest.len() - rest.len() / (k + 1);
        match rest.as_bytes()[cut..].iter().position(|&b| b == b'\n') {
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

/// Infers a regular axis (origin, spacing, count) from the distinct values of one
/// coordinate, naming the value that breaks the pattern; with each node's place on
/// the axis (its column or row).
fn axis(
    path: &Path,
    nodes: &[NodeLine],
    get: impl Fn(&NodeLine) -> f64 + Sync,
    name: &str,
) -> Result<(f64, f64, usize, Vec<u32>), InputError> {
    // (value, node index); equal values in file order, as a stable sort would leave them
    let mut vals: Vec<(f64, u32)> = nodes
        .iter()
        .enumerate()
        .map(|(n, node)| (get(node), n as u32))
        .collect();
    vals.sort_unstable_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
    let span = vals[vals.len() - 1].0 - vals[0].0;
    let tol = 1e-6 * span.max(1.0);
    // the distinct values with the node of each one's first appearance
    let mut distinct: Vec<(f64, u32)> = Vec::new();
    let mut place = vec![0u32; nodes.len()];
    for (v, n) in vals {
        match distinct.last() {
            Some(&(d, _)) if (v - d).abs() <= tol => {}
            _ => distinct.push((v, n)),
        }
        place[n as usize] = distinct.len() as u32 - 1;
    }
    if distinct.len() < 2 {
        return Err(InputError::file(
            path,
            format!("all nodes share one {name} value ({}): a model needs at least two columns and two rows", distinct[0].0),
        )
        .hint("give the nodes of a regular grid, at least two columns and two rows of them"));
    }
    let d = distinct
        .windows(2)
        .map(|w| w[1].0 - w[0].0)
        .fold(f64::INFINITY, f64::min);
    let x0 = distinct[0].0;
    for (k, &(v, n)) in distinct.iter().enumerate() {
        let expect = x0 + k as f64 * d;
        if (v - expect).abs() > 1e-4 * d {
            return Err(InputError::at(
                path,
                nodes[n as usize].0,
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
    Ok((x0, d, distinct.len(), place))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::tests::spec;
    use crate::model::Analytic;
    use crate::survey::Surface;

    #[test]
    fn csv_round_trip_keeps_air_and_values() {
        let surf = Surface::through(&[
            crate::survey::Point::new(0.0, -1.0),
            crate::survey::Point::new(10.0, 0.0),
        ]);
        let m = VelocityGrid::analytic(
            spec(),
            Some(&surf),
            // a gradient whose node values are not round at two decimals, so that the
            // file's rounding shows
            &Analytic::Gradient {
                v0: 400.0,
                g: -30.37,
                z_ref: 0.0,
            },
        );
        let back = VelocityGrid::parse(Path::new("m.csv"), &m.to_csv()).unwrap();
        assert_eq!(back.spec.nx, 11);
        assert_eq!(back.spec.nz, 21);
        let mut worst = 0.0f64;
        for (a, b) in m.v.iter().zip(&back.v) {
            assert!(a.is_nan() == b.is_nan());
            if !a.is_nan() {
                worst = worst.max((a - b).abs());
            }
        }
        // velocities are written with two decimals: off by half the last digit at most
        // (measured 0.0050 m/s on 2026-12-03; the bound is the format's)
        assert!(worst <= 0.005 + 1e-9, "round trip off by {worst} m/s");
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
}
