//! Reading picks and surface files: every problem found is named by file, line and
//! column with what to do, and all of them are reported together.

use std::collections::HashMap;
use std::path::Path;

use super::{fmt_ms, fmt_sig, stations_surface, Pick, Point, Surface, Survey};
use super::{SAME_POSITION_M, SLOWEST_APPARENT_MPS, TIME_ALLOWANCE_S};
use crate::error::{read_text, InputError, InputErrors};

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
    parse_picks_text(path, &text)
}

/// Parses picks CSV text as [`read_picks`] reads a file; `path` only names the source
/// in errors.
pub fn parse_picks_text(path: &Path, text: &str) -> Result<Survey, InputErrors> {
    let picks = parse_picks(path, text)?;
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
    // A lone CR (old Mac line end) becomes LF: the csv reader ends a comment only at
    // LF, so a comment in a CR-only file would swallow every line after it. One byte
    // for one, so byte offsets and line numbers are those of the text as given.
    let lone_cr = |b: &[u8], k: usize| b[k] == b'\r' && b.get(k + 1) != Some(&b'\n');
    let unified;
    let text = if (0..text.len()).any(|k| lone_cr(text.as_bytes(), k)) {
        let b = text.as_bytes();
        let lf: Vec<u8> = (0..b.len())
            .map(|k| if lone_cr(b, k) { b'\n' } else { b[k] })
            .collect();
        unified = String::from_utf8(lf).expect("CR and LF are single bytes");
        unified.as_str()
    } else {
        text
    };
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
            // skipped by the csv reader: empty lines and lines that start with '#'
            let t = text[starts[l - 1]..end].trim_end_matches(['\r', '\n']);
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
                .hint("save the file as plain comma-separated text")
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
    parse_surface(path, &text)
}

/// Parses surface CSV text (`x,z`) as [`read_surface`] reads a file; `path` only names
/// the source in errors.
pub fn parse_surface(path: &Path, text: &str) -> Result<Surface, InputErrors> {
    if text.trim().is_empty() {
        return Err(InputError::file(path, "the file is empty")
            .hint("a surface file has the header 'x,z' and one line per vertex")
            .into());
    }
    let recs = records(path, text)?;
    let Some(((hline, header), rows)) = recs.split_first() else {
        return Err(InputError::file(path, "the file holds only comments")
            .hint("add the header line 'x,z' and one line per vertex")
            .into());
    };
    let map = header_map(path, *hline, header, &["x", "z"])?;
    if map.len() != 2 {
        return Err(
            InputError::at(path, *hline, "the header must name both x and z")
                .hint("write the header line 'x,z'")
                .into(),
        );
    }
    let mut pts = Vec::new();
    let mut errors = Vec::new();
    for (line, f) in rows {
        if f.len() != 2 {
            errors.push(
                InputError::at(
                    path,
                    *line,
                    format!("this line has {} fields, expected 2", f.len()),
                )
                .hint("each line holds one vertex: x and z, separated by a comma"),
            );
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
        return Err(
            InputError::file(path, "the file has a header but no vertices")
                .hint("add one line per vertex below the header")
                .into(),
        );
    }
    Ok(Surface::through(&pts))
}
