//! Property tests over the four input readers — picks, velocity model, ground surface
//! and settings ("nothing crashes, nothing is lost"):
//!
//! - whatever the text or the bytes, a reader returns (a panic fails the property);
//! - every refusal names the file as `FILE:LINE: ` when it is about a line (the form of
//!   `error::InputError`), with a line that exists in the text, or as `FILE: ` for the
//!   few refusals about the file as a whole, and says what to do;
//! - what a reader accepts is sane (a model's grid holds nx·nz nodes, positive or air,
//!   no hole under the ground; picks have finite positions and non-negative times);
//! - a valid file, written in any of the forms the readers accept (column order, case,
//!   quotes, spaces, comments, blank lines, LF / CRLF / CR line ends, BOM, node order),
//!   comes back with every value, and a bad value on one line is refused at that line.
//!
//! Inputs: arbitrary bytes (as lossy UTF-8 text, and as raw bytes through a file for the
//! readers' file functions), CSV-like noise under a valid header, and edits of valid
//! files (lines truncated, deleted, repeated or swapped; fields deleted, repeated or
//! swapped; values such as 1e308, 1e400, -0, NaN, inf, quotes, CR, BOM, tabs, very long
//! lines and fields, non-UTF-8 bytes).
//!
//! Cases per property: `CASES` (or `PROPTEST_CASES` when set). With
//! `READER_FUZZ_SECONDS=S` each property runs again and again with fresh random seeds
//! until S seconds have passed (`experiments/reader_fuzz.sh`). Each property prints the
//! number of inputs it tried (`-- --nocapture` shows it).

use std::fmt::Debug;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::{Duration, Instant};

use proptest::prelude::*;
use proptest::sample::{select, Index};
use proptest::string::string_regex;
use proptest::test_runner::{Config, TestCaseError, TestRunner};

use slowfield::error::InputError;
use slowfield::limits::MAX_GRID_NODES;
use slowfield::model::VelocityGrid;
use slowfield::settings::RunSettings;
use slowfield::survey::{parse_picks_text, parse_surface, Surface, Survey};

/// Cases per property in the ordinary test run (the whole file takes a few seconds).
const CASES: u32 = 300;

/// Runs `test` on inputs drawn from `strategy`: `CASES` of them, or `PROPTEST_CASES`;
/// repeated with fresh seeds for `READER_FUZZ_SECONDS` when that is set. A failure
/// panics with the smallest failing input proptest found.
fn assert_property<S>(name: &str, strategy: S, test: impl Fn(S::Value) -> Result<(), TestCaseError>)
where
    S: Strategy,
    S::Value: Debug,
{
    let mut config = if std::env::var_os("PROPTEST_CASES").is_some() {
        Config::default()
    } else {
        Config::with_cases(CASES)
    };
    config.failure_persistence = None;
    let budget = std::env::var("READER_FUZZ_SECONDS")
        .ok()
        .and_then(|s| s.parse::<f64>().ok())
        .map(Duration::from_secs_f64);
    let start = Instant::now();
    let tried = AtomicU64::new(0);
    let mut runs = 0;
    loop {
        let mut runner = TestRunner::new(config.clone());
        let result = runner.run(&strategy, |v| {
            tried.fetch_add(1, Ordering::Relaxed);
            test(v)
        });
        runs += 1;
        if let Err(e) = result {
            panic!("{name}: {e}");
        }
        if budget.is_none_or(|b| start.elapsed() >= b) {
            break;
        }
    }
    println!(
        "reader property {name}: {} inputs tried ({runs} runs of {} cases) in {:.1} s",
        tried.load(Ordering::Relaxed),
        config.cases,
        start.elapsed().as_secs_f64()
    );
}

// ---------------------------------------------------------------------------------
// What every refusal and every accepted file must satisfy

/// The last line of a text: line ends are LF, CRLF or a lone CR.
fn last_line(text: &str) -> u64 {
    let b = text.as_bytes();
    1 + (0..b.len())
        .filter(|&k| b[k] == b'\n' || (b[k] == b'\r' && b.get(k + 1) != Some(&b'\n')))
        .count() as u64
}

/// Refusals about the file as a whole (no line): the start of each message.
const FILE_LEVEL: [&str; 10] = [
    "the file is empty",
    "the file holds only comments",
    "the file has a header but no",
    "all nodes share one",
    "the model's grid (",
    "the file has ",
    "this is a binary file",
    "cannot read the",
    // settings: TOML errors without a position
    "missing field",
    "invalid type",
];

/// A refusal names `path`, the line when it has one (within `1..=last`) as
/// `PATH:LINE: `, its column as `column 'NAME': `, and says what to do.
fn refusal_is_located(path: &Path, last: u64, e: &InputError) -> Result<(), TestCaseError> {
    let shown = e.to_string();
    prop_assert_eq!(&e.file, path, "{}", shown);
    match e.line {
        Some(l) => {
            prop_assert!(
                (1..=last).contains(&l),
                "line {} outside the text's 1..={}: {}",
                l,
                last,
                shown
            );
            let prefix = format!("{}:{l}: ", path.display());
            prop_assert!(shown.starts_with(&prefix), "not `{}`: {}", prefix, shown);
        }
        None => {
            let prefix = format!("{}: ", path.display());
            prop_assert!(shown.starts_with(&prefix), "not `{}`: {}", prefix, shown);
            prop_assert!(
                FILE_LEVEL.iter().any(|m| e.message.starts_with(m)),
                "a refusal without a line that is not about the whole file: {}",
                shown
            );
        }
    }
    if let Some(c) = &e.column {
        prop_assert!(shown.contains(&format!(": column '{c}': ")), "{}", shown);
    }
    prop_assert!(
        e.hint.as_deref().is_some_and(|h| !h.trim().is_empty()),
        "a refusal that does not say what to do: {}",
        shown
    );
    prop_assert!(!e.message.trim().is_empty(), "{}", shown);
    Ok(())
}

fn refusals_are_located(path: &Path, text: &str, errs: &[InputError]) -> Result<(), TestCaseError> {
    prop_assert!(!errs.is_empty(), "a refusal with no error");
    let last = last_line(text);
    for e in errs {
        refusal_is_located(path, last, e)?;
    }
    Ok(())
}

/// An accepted model is a whole grid: nx·nz nodes, finite positive spacing, every
/// velocity positive and finite or air (NaN), air only above the ground, no more
/// nodes with velocity than the text has lines, within the grid limit.
fn model_is_sane(m: &VelocityGrid, text: &str) -> Result<(), TestCaseError> {
    let s = &m.spec;
    prop_assert!(s.nx >= 2 && s.nz >= 2, "{:?}", s);
    prop_assert_eq!(m.v.len(), s.nx * s.nz);
    prop_assert!(s.nx * s.nz <= MAX_GRID_NODES);
    prop_assert!(s.dx.is_finite() && s.dx > 0.0 && s.dz.is_finite() && s.dz > 0.0);
    prop_assert!(s.x0.is_finite() && s.z0.is_finite());
    let given = m.v.iter().filter(|v| !v.is_nan()).count() as u64;
    prop_assert!(
        given < last_line(text),
        "{} nodes from {} lines",
        given,
        last_line(text)
    );
    for &v in &m.v {
        prop_assert!(v.is_nan() || (v.is_finite() && v > 0.0), "velocity {}", v);
    }
    for i in 0..s.nx {
        let column: Vec<bool> = (0..s.nz).map(|j| m.v[s.idx(i, j)].is_nan()).collect();
        let first_air = column.iter().position(|&a| a).unwrap_or(s.nz);
        prop_assert!(
            column[first_air..].iter().all(|&a| a),
            "a hole under the ground in column {}",
            i
        );
        prop_assert!(!column[0], "column {} has no node at all", i);
    }
    Ok(())
}

/// Accepted picks: finite positions, finite non-negative times, positive
/// uncertainties, lines increasing within the text; shots partition the picks and
/// share one source each; the surface is sorted with distinct vertices.
fn survey_is_sane(s: &Survey, text: &str) -> Result<(), TestCaseError> {
    prop_assert!(!s.picks.is_empty());
    let last = last_line(text);
    let mut prev = 0;
    for p in &s.picks {
        for v in [p.source.x, p.source.z, p.receiver.x, p.receiver.z] {
            prop_assert!(v.is_finite());
        }
        prop_assert!(p.time.is_finite() && p.time >= 0.0, "time {}", p.time);
        if let Some(sg) = p.sigma {
            prop_assert!(sg.is_finite() && sg > 0.0);
        }
        prop_assert!(!p.shot.is_empty());
        prop_assert!(
            p.line > prev && p.line <= last,
            "line {} after {}",
            p.line,
            prev
        );
        prev = p.line;
    }
    let mut seen = vec![0; s.picks.len()];
    for shot in &s.shots {
        for &k in &shot.picks {
            seen[k] += 1;
            prop_assert_eq!(&s.picks[k].shot, &shot.id);
            prop_assert!(s.picks[k].source.dist(&shot.source) <= 0.01);
        }
    }
    prop_assert!(
        seen.iter().all(|&n| n == 1),
        "picks not in exactly one shot"
    );
    surface_is_sane(&s.surface)
}

fn surface_is_sane(s: &Surface) -> Result<(), TestCaseError> {
    prop_assert!(!s.nodes.is_empty());
    for w in s.nodes.windows(2) {
        prop_assert!(w[1].x - w[0].x >= 0.01, "{:?}", w);
    }
    for p in &s.nodes {
        prop_assert!(p.x.is_finite() && p.z.is_finite());
        // the profile answers anywhere without panicking
        prop_assert!(s.elevation(p.x).is_finite());
    }
    Ok(())
}

// The four readers, from text, each with its property of the result.

fn model_path() -> &'static Path {
    Path::new("site 1/model.csv")
}
fn picks_path() -> &'static Path {
    Path::new("site 1/picks.csv")
}
fn surface_path() -> &'static Path {
    Path::new("site 1/surface.csv")
}
fn settings_path() -> &'static Path {
    Path::new("site 1/settings.toml")
}

fn model_holds(text: &str) -> Result<bool, TestCaseError> {
    match VelocityGrid::parse(model_path(), text) {
        Ok(m) => model_is_sane(&m, text).map(|_| true),
        Err(e) => refusals_are_located(model_path(), text, &e.0).map(|_| false),
    }
}

fn picks_hold(text: &str) -> Result<bool, TestCaseError> {
    match parse_picks_text(picks_path(), text) {
        Ok(s) => survey_is_sane(&s, text).map(|_| true),
        Err(e) => refusals_are_located(picks_path(), text, &e.0).map(|_| false),
    }
}

fn surface_holds(text: &str) -> Result<bool, TestCaseError> {
    match parse_surface(surface_path(), text) {
        Ok(s) => surface_is_sane(&s).map(|_| true),
        Err(e) => refusals_are_located(surface_path(), text, &e.0).map(|_| false),
    }
}

fn settings_hold(text: &str) -> Result<bool, TestCaseError> {
    match RunSettings::parse(settings_path(), text) {
        Ok(s) => {
            // what the run writes back reads back the same
            let written = s.to_toml();
            let back = RunSettings::parse(settings_path(), &written)
                .map_err(|e| TestCaseError::fail(format!("written settings refused: {e}")))?;
            prop_assert_eq!(back.to_toml(), written);
            let _ = s.validate();
            Ok(true)
        }
        Err(e) => refusals_are_located(settings_path(), text, &[e]).map(|_| false),
    }
}

// ---------------------------------------------------------------------------------
// Edits of a valid file

/// Values that readers meet in the wild or that break naive parsers.
const TOKENS: &[&str] = &[
    "1e308",
    "-1e308",
    "1.7976931348623157e308",
    "1e400",
    "-1e400",
    "1e-400",
    "5e-324",
    "-0",
    "-0.0",
    "0",
    "NaN",
    "nan",
    "inf",
    "-inf",
    "infinity",
    "",
    " ",
    "\t",
    "\"",
    "\"\"",
    "\"1,2\"",
    "\"5\"",
    "'5'",
    "#",
    "0x1A",
    "1_000",
    "1,5",
    "١٢",
    "1e",
    "e5",
    ".",
    "-",
    "+",
    "1.2.3",
    "\t7\t",
    "99999999999999999999999999999999",
    "18446744073709551616",
    "-9223372036854775809",
    "9223372036854775807",
    "true",
    "[",
    "[[",
    "]",
    "{",
    "=",
    "\\",
    "\u{0}",
    "\u{feff}",
    "é",
    "\u{2028}",
    "💥",
    "x",
    "z",
    "velocity_mps",
    "time_s",
    "sigma_ms",
    "\"pinn\"",
    "\"sine\"",
];

fn value() -> impl Strategy<Value = String> {
    prop_oneof![
        4 => select(TOKENS).prop_map(str::to_string),
        2 => any::<f64>().prop_map(|v| v.to_string()),
        1 => any::<i64>().prop_map(|v| v.to_string()),
        1 => (1usize..20_000).prop_map(|n| "7".repeat(n)),
        1 => "[ -~]{0,12}",
        1 => any::<String>(),
    ]
}

/// Short pieces inserted anywhere.
fn piece() -> impl Strategy<Value = String> {
    prop_oneof![
        4 => select(&["\"", "\r", "\n", "\r\n", "\t", "\u{feff}", ",", "#", "\0", "é", " ", "=", "[", "'", "\n\n", "\\"][..])
            .prop_map(str::to_string),
        1 => value(),
    ]
}

#[derive(Debug, Clone)]
enum Edit {
    /// The text cut at a byte (moved back to a character boundary).
    Truncate(Index),
    DeleteLine(Index),
    RepeatLine(Index),
    SwapLines(Index, Index),
    DeleteField(Index, Index),
    RepeatField(Index, Index),
    SwapFields(Index, Index, Index),
    SetField(Index, Index, String),
    Insert(Index, String),
    /// One line's fields repeated into a line of this many copies.
    LongLine(Index, usize),
    /// Every LF replaced by CRLF or by a lone CR.
    LineEnds(bool),
    Bom,
}

fn edit() -> impl Strategy<Value = Edit> {
    let i = any::<Index>;
    prop_oneof![
        1 => i().prop_map(Edit::Truncate),
        2 => i().prop_map(Edit::DeleteLine),
        2 => i().prop_map(Edit::RepeatLine),
        2 => (i(), i()).prop_map(|(a, b)| Edit::SwapLines(a, b)),
        2 => (i(), i()).prop_map(|(a, b)| Edit::DeleteField(a, b)),
        2 => (i(), i()).prop_map(|(a, b)| Edit::RepeatField(a, b)),
        2 => (i(), i(), i()).prop_map(|(a, b, c)| Edit::SwapFields(a, b, c)),
        6 => (i(), i(), value()).prop_map(|(a, b, v)| Edit::SetField(a, b, v)),
        4 => (i(), piece()).prop_map(|(a, p)| Edit::Insert(a, p)),
        1 => (i(), 2usize..5_000).prop_map(|(a, n)| Edit::LongLine(a, n)),
        1 => any::<bool>().prop_map(Edit::LineEnds),
        1 => Just(Edit::Bom),
    ]
}

/// Applies `edits` to `text`, whose fields are separated by `sep`.
fn apply(text: &str, edits: &[Edit], sep: char) -> String {
    let mut t = text.to_string();
    for e in edits {
        let mut lines: Vec<String> = t.split('\n').map(str::to_string).collect();
        let n = lines.len();
        let join = |lines: Vec<String>| lines.join("\n");
        let fields = |l: &str| l.split(sep).map(str::to_string).collect::<Vec<_>>();
        let joinf = |f: Vec<String>| f.join(&sep.to_string());
        t = match e {
            Edit::Truncate(k) => {
                let mut cut = k.index(t.len() + 1);
                while !t.is_char_boundary(cut) {
                    cut -= 1;
                }
                t[..cut].to_string()
            }
            Edit::DeleteLine(k) => {
                lines.remove(k.index(n));
                join(lines)
            }
            Edit::RepeatLine(k) => {
                let k = k.index(n);
                lines.insert(k, lines[k].clone());
                join(lines)
            }
            Edit::SwapLines(a, b) => {
                lines.swap(a.index(n), b.index(n));
                join(lines)
            }
            Edit::DeleteField(l, f) => {
                let l = l.index(n);
                let mut fs = fields(&lines[l]);
                fs.remove(f.index(fs.len()));
                lines[l] = joinf(fs);
                join(lines)
            }
            Edit::RepeatField(l, f) => {
                let l = l.index(n);
                let mut fs = fields(&lines[l]);
                let f = f.index(fs.len());
                fs.insert(f, fs[f].clone());
                lines[l] = joinf(fs);
                join(lines)
            }
            Edit::SwapFields(l, a, b) => {
                let l = l.index(n);
                let mut fs = fields(&lines[l]);
                let m = fs.len();
                fs.swap(a.index(m), b.index(m));
                lines[l] = joinf(fs);
                join(lines)
            }
            Edit::SetField(l, f, v) => {
                let l = l.index(n);
                let mut fs = fields(&lines[l]);
                let f = f.index(fs.len());
                fs[f] = v.clone();
                lines[l] = joinf(fs);
                join(lines)
            }
            Edit::Insert(k, p) => {
                let mut at = k.index(t.len() + 1);
                while !t.is_char_boundary(at) {
                    at -= 1;
                }
                t.insert_str(at, p);
                t
            }
            Edit::LongLine(l, copies) => {
                let l = l.index(n);
                // at most about 300 kB, however often the edit is repeated
                let copies = (*copies).min(300_000 / (lines[l].len() + 1)).max(1);
                lines[l] = vec![lines[l].clone(); copies].join(&sep.to_string());
                join(lines)
            }
            Edit::LineEnds(crlf) => t.replace('\n', if *crlf { "\r\n" } else { "\r" }),
            Edit::Bom => format!("\u{feff}{t}"),
        };
    }
    t
}

/// Bytes that are not UTF-8 text, or not text: a stray continuation byte, a lead
/// byte without its continuation, NUL, a UTF-16 mark, a second BOM.
const BAD_BYTES: &[&[u8]] = &[
    &[0xff],
    &[0xc3],
    &[0xe2, 0x82],
    &[0x80],
    &[0],
    &[0xfe, 0xff],
    &[0xef, 0xbb, 0xbf],
];

/// Byte-level edits for the file readers: bytes inserted anywhere (invalid UTF-8,
/// NUL), or the text cut inside a character.
fn byte_edits() -> impl Strategy<Value = Vec<(Index, Vec<u8>)>> {
    let bytes = prop_oneof![
        select(BAD_BYTES).prop_map(<[u8]>::to_vec),
        proptest::collection::vec(any::<u8>(), 1..8),
    ];
    proptest::collection::vec((any::<Index>(), bytes), 0..3)
}

fn apply_bytes(text: &str, edits: &[(Index, Vec<u8>)]) -> Vec<u8> {
    let mut b = text.as_bytes().to_vec();
    for (k, ins) in edits {
        let at = k.index(b.len() + 1);
        b.splice(at..at, ins.iter().copied());
    }
    b
}

// ---------------------------------------------------------------------------------
// Valid files, written in the forms the readers accept

/// How a CSV file is written: the line end, fields padded with spaces or quoted, a
/// comment or blank line before some lines, a BOM, a line end after the last line.
#[derive(Debug, Clone)]
struct Form {
    eol: &'static str,
    pad: bool,
    quote: bool,
    extra: Vec<u8>,
    bom: bool,
    trailing_eol: bool,
    upper: Vec<bool>,
}

fn form() -> impl Strategy<Value = Form> {
    (
        select(&["\n", "\r\n", "\r"][..]),
        0u8..3,
        proptest::collection::vec(0u8..8, 64),
        any::<bool>(),
        any::<bool>(),
        proptest::collection::vec(any::<bool>(), 9),
    )
        .prop_map(|(eol, style, extra, bom, trailing_eol, upper)| Form {
            eol,
            pad: style == 1,
            quote: style == 2,
            extra,
            bom,
            trailing_eol,
            upper,
        })
}

/// The plain form: what the model reader's fast path reads.
fn plain_form() -> Form {
    Form {
        eol: "\n",
        pad: false,
        quote: false,
        extra: vec![],
        bom: false,
        trailing_eol: true,
        upper: vec![],
    }
}

/// Writes `header` and `rows` in `form`; returns the text and each row's line.
fn write_csv(header: &[&str], rows: &[Vec<String>], form: &Form) -> (String, Vec<u64>) {
    let field = |s: &str| {
        if form.quote {
            format!("\"{s}\"")
        } else if form.pad {
            format!(" {s}\t")
        } else {
            s.to_string()
        }
    };
    let mut text = String::new();
    if form.bom {
        text.push('\u{feff}');
    }
    let mut line = 1;
    let mut lines = Vec::new();
    let head: Vec<String> = header
        .iter()
        .enumerate()
        .map(|(k, h)| {
            if form.upper.get(k).copied().unwrap_or(false) {
                field(&h.to_uppercase())
            } else {
                field(h)
            }
        })
        .collect();
    let mut out: Vec<String> = vec![head.join(",")];
    for (k, r) in rows.iter().enumerate() {
        // 0: a comment line before the row, 1: a blank line, else nothing
        match form.extra.get(k).copied().unwrap_or(7) {
            0 => out.push("# a comment, with \"quotes\"".into()),
            1 => out.push(String::new()),
            _ => {}
        }
        out.push(r.iter().map(|f| field(f)).collect::<Vec<_>>().join(","));
    }
    for (k, l) in out.iter().enumerate() {
        if k > 0 {
            text.push_str(form.eol);
            line += 1;
        }
        if !(l.is_empty() || l.starts_with('#')) && k > 0 {
            lines.push(line);
        }
        text.push_str(l);
    }
    if form.trailing_eol {
        text.push_str(form.eol);
    }
    (text, lines)
}

/// A regular grid model: `top[i]` is the highest row with velocity in column `i`
/// (air above), velocities row by row from the bottom.
#[derive(Debug, Clone)]
struct Model {
    x0: f64,
    z0: f64,
    dx: f64,
    dz: f64,
    nx: usize,
    nz: usize,
    top: Vec<usize>,
    v: Vec<f64>,
}

fn model() -> impl Strategy<Value = Model> {
    (
        2usize..7,
        2usize..7,
        select(&[0.1, 0.25, 0.5, 1.0, 2.5, 10.0][..]),
        select(&[0.1, 0.25, 0.5, 1.0, 2.0][..]),
        -40i32..40,
        -40i32..40,
    )
        .prop_flat_map(|(nx, nz, dx, dz, i0, j0)| {
            (
                proptest::collection::vec(0..nz, nx),
                0..nx,
                proptest::collection::vec(10_000u32..500_000, nx * nz),
            )
                .prop_map(move |(mut top, full, v)| {
                    top[full] = nz - 1;
                    Model {
                        x0: i0 as f64 * dx,
                        z0: j0 as f64 * dz,
                        dx,
                        dz,
                        nx,
                        nz,
                        top,
                        v: v.iter().map(|&c| c as f64 / 100.0).collect(),
                    }
                })
        })
}

impl Model {
    fn x(&self, i: usize) -> f64 {
        self.x0 + i as f64 * self.dx
    }
    fn z(&self, j: usize) -> f64 {
        self.z0 + j as f64 * self.dz
    }
    /// The nodes below the ground, `(i, j)`.
    fn nodes(&self) -> Vec<(usize, usize)> {
        let mut n = Vec::new();
        for j in 0..self.nz {
            for i in 0..self.nx {
                if j <= self.top[i] {
                    n.push((i, j));
                }
            }
        }
        n
    }
}

/// Model text with the columns in `order` (a permutation of x, z, velocity_mps) and
/// the nodes in the order given.
fn model_text(m: &Model, nodes: &[(usize, usize)], order: &[usize], form: &Form) -> String {
    let names = ["x", "z", "velocity_mps"];
    let header: Vec<&str> = order.iter().map(|&c| names[c]).collect();
    let rows: Vec<Vec<String>> = nodes
        .iter()
        .map(|&(i, j)| {
            let vals = [m.x(i), m.z(j), m.v[j * m.nx + i]];
            order.iter().map(|&c| vals[c].to_string()).collect()
        })
        .collect();
    write_csv(&header, &rows, form).0
}

fn good_model_text() -> String {
    let mut s = String::from("x,z,velocity_mps\n");
    for (z, v) in [(-2.0, 900.0), (-1.5, 700.0), (-1.0, 500.0)] {
        for x in [0.0, 0.5, 1.0, 1.5] {
            s.push_str(&format!("{x},{z},{v}\n"));
        }
    }
    s
}

/// One pick row: shot, source, receiver, time (ms), uncertainty (ms).
#[derive(Debug, Clone)]
struct PickRow {
    shot: String,
    source: (f64, f64),
    receiver: (f64, f64),
    t_ms: f64,
    sigma_ms: Option<f64>,
}

fn pick_rows() -> impl Strategy<Value = Vec<PickRow>> {
    let shot = (
        "[A-Za-z0-9_.]{1,6}",
        -20i32..80,
        -30i32..30,
        proptest::collection::vec((0i32..60, -30i32..30, 200u32..3000, 0u8..4), 1..8),
    );
    proptest::collection::vec(shot, 1..5).prop_map(|shots| {
        let mut rows = Vec::new();
        for (k, (id, sx, sz, recs)) in shots.into_iter().enumerate() {
            // shot ids distinct; receivers of a shot distinct
            let id = format!("{id}{k}");
            let source = (sx as f64 * 0.5, sz as f64 * 0.1);
            let mut seen = Vec::new();
            for (rx, rz, v, sig) in recs {
                if seen.contains(&rx) {
                    continue;
                }
                seen.push(rx);
                let receiver = (rx as f64 * 1.5, rz as f64 * 0.1);
                let offset = (receiver.0 - source.0).hypot(receiver.1 - source.1);
                rows.push(PickRow {
                    shot: id.clone(),
                    source,
                    receiver,
                    t_ms: (offset / v as f64 * 1e6).round() / 1e3,
                    sigma_ms: (sig > 0).then_some(sig as f64 * 0.25),
                });
            }
        }
        rows
    })
}

/// Picks text: columns in `order` (a permutation of the columns present), times in
/// ms or s, the uncertainty column when `sigma`.
fn picks_text(
    rows: &[PickRow],
    order: &[usize],
    seconds: bool,
    sigma: bool,
    form: &Form,
) -> (String, Vec<u64>) {
    let names = [
        "shot",
        "source_x",
        "source_z",
        "receiver_x",
        "receiver_z",
        if seconds { "time_s" } else { "time_ms" },
        if seconds { "sigma_s" } else { "sigma_ms" },
    ];
    let ncol = if sigma { 7 } else { 6 };
    let order: Vec<usize> = order.iter().copied().filter(|&c| c < ncol).collect();
    let header: Vec<&str> = order.iter().map(|&c| names[c]).collect();
    let scale = if seconds { 1e-3 } else { 1.0 };
    let body: Vec<Vec<String>> = rows
        .iter()
        .map(|r| {
            let vals = [
                r.shot.clone(),
                r.source.0.to_string(),
                r.source.1.to_string(),
                r.receiver.0.to_string(),
                r.receiver.1.to_string(),
                (r.t_ms * scale).to_string(),
                r.sigma_ms
                    .map_or(String::new(), |s| (s * scale).to_string()),
            ];
            order.iter().map(|&c| vals[c].clone()).collect()
        })
        .collect();
    write_csv(&header, &body, form)
}

fn good_picks_text() -> String {
    "shot,source_x,source_z,receiver_x,receiver_z,time_ms,sigma_ms\n\
     A,0,0,0,0,0,0.5\n\
     A,0,0,2,0.1,4.1,\n\
     A,0,0,4,0.2,8.0,0.75\n\
     B,6,0.3,4,0.2,4.2,\n\
     B,6,0.3,2,0.1,8.3,1\n"
        .to_string()
}

fn good_surface_text() -> String {
    "x,z\n0,0\n2.5,0.4\n5,1.25\n7.5,0.5\n".to_string()
}

/// A short settings file and the whole one a run writes.
fn settings_texts() -> Vec<String> {
    vec![
        "method = \"pinn\"\nsigma_ms = 0.8\ncell_m = 0.5\nv_max = 4000.0\n# comment\n[pinn]\nsteps = 200\nactivation = \"sine\"\nseed = 7\n\n[refine]\niterations = 2\nregulariser = \"total_variation\"\n".to_string(),
        RunSettings::default().to_toml(),
    ]
}

/// A file written through a scratch folder, for the readers' file functions.
struct Scratch {
    dir: tempfile::TempDir,
}

impl Scratch {
    fn new() -> Self {
        Scratch {
            dir: tempfile::tempdir().unwrap(),
        }
    }
    fn write(&self, name: &str, bytes: &[u8]) -> PathBuf {
        let p = self.dir.path().join(name);
        std::fs::write(&p, bytes).unwrap();
        p
    }
}

/// The last line of bytes read as a file (invalid UTF-8 counted as lossy text).
fn bytes_text(bytes: &[u8]) -> String {
    String::from_utf8_lossy(bytes).into_owned()
}

// ---------------------------------------------------------------------------------
// Properties: anything at all

#[test]
fn arbitrary_text_never_panics_and_every_refusal_is_located() {
    let text = prop_oneof![
        proptest::collection::vec(any::<u8>(), 0..600).prop_map(|b| bytes_text(&b)),
        any::<String>(),
    ];
    assert_property("arbitrary text", text, |t| {
        model_holds(&t)?;
        picks_hold(&t)?;
        surface_holds(&t)?;
        settings_hold(&t).map(|_| ())
    });
}

#[test]
fn csv_noise_under_a_valid_header() {
    let headers = select(
        &[
            "x,z,velocity_mps",
            "velocity_mps,x,z",
            "x,z",
            "shot,source_x,source_z,receiver_x,receiver_z,time_ms",
            "shot,source_x,source_z,receiver_x,receiver_z,time_s,sigma_ms",
        ][..],
    );
    let body = string_regex("[0-9,.eE+\\-\n\r\" #\tA-Ca-c\u{feff}é]{0,400}").unwrap();
    assert_property("csv noise", (headers, body), |(h, b)| {
        let t = format!("{h}\n{b}");
        model_holds(&t)?;
        picks_hold(&t)?;
        surface_holds(&t).map(|_| ())
    });
}

#[test]
fn arbitrary_bytes_through_files() {
    let scratch = Scratch::new();
    let bytes = proptest::collection::vec(any::<u8>(), 0..400);
    assert_property("arbitrary bytes, files", bytes, |b| {
        let t = bytes_text(&b);
        let p = scratch.write("model.csv", &b);
        match VelocityGrid::read(&p) {
            Ok(m) => model_is_sane(&m, &t)?,
            Err(e) => refusals_are_located(&p, &t, &e.0)?,
        }
        let p = scratch.write("picks.csv", &b);
        match slowfield::survey::read_picks(&p) {
            Ok(s) => survey_is_sane(&s, &t)?,
            Err(e) => refusals_are_located(&p, &t, &e.0)?,
        }
        let p = scratch.write("surface.csv", &b);
        match slowfield::survey::read_surface(&p) {
            Ok(s) => surface_is_sane(&s)?,
            Err(e) => refusals_are_located(&p, &t, &e.0)?,
        }
        let p = scratch.write("settings.toml", &b);
        if let Err(e) = RunSettings::read(&p) {
            refusals_are_located(&p, &t, &[e])?;
        }
        Ok(())
    });
}

// ---------------------------------------------------------------------------------
// Properties: edits of valid files

fn edits() -> impl Strategy<Value = Vec<Edit>> {
    proptest::collection::vec(edit(), 1..5)
}

#[test]
fn edited_model_files() {
    let seen = Outcomes::default();
    assert_property("edited model", edits(), |e| {
        seen.note(model_holds(&apply(&good_model_text(), &e, ',')))
    });
    seen.assert_both_verdicts("edited model");
}

#[test]
fn edited_picks_files() {
    let seen = Outcomes::default();
    assert_property("edited picks", edits(), |e| {
        seen.note(picks_hold(&apply(&good_picks_text(), &e, ',')))
    });
    seen.assert_both_verdicts("edited picks");
}

#[test]
fn edited_surface_files() {
    let seen = Outcomes::default();
    assert_property("edited surface", edits(), |e| {
        seen.note(surface_holds(&apply(&good_surface_text(), &e, ',')))
    });
    seen.assert_both_verdicts("edited surface");
}

#[test]
fn edited_settings_files() {
    let texts = settings_texts();
    let seen = Outcomes::default();
    assert_property("edited settings", (0..texts.len(), edits()), |(k, e)| {
        // fields of a TOML line: key and value
        seen.note(settings_hold(&apply(&texts[k], &e, '=')))
    });
    seen.assert_both_verdicts("edited settings");
}

#[test]
fn edited_files_with_bad_bytes_through_files() {
    let scratch = Scratch::new();
    let seen = Outcomes::default();
    let texts = [
        ("model.csv", good_model_text()),
        ("picks.csv", good_picks_text()),
        ("surface.csv", good_surface_text()),
        ("settings.toml", settings_texts().remove(0)),
    ];
    assert_property(
        "edited files with bad bytes",
        (0..4usize, edits(), byte_edits()),
        |(k, e, b)| {
            let (name, text) = &texts[k];
            let bytes = apply_bytes(&apply(text, &e, if k == 3 { '=' } else { ',' }), &b);
            let t = bytes_text(&bytes);
            let p = scratch.write(name, &bytes);
            seen.note(match k {
                0 => match VelocityGrid::read(&p) {
                    Ok(m) => model_is_sane(&m, &t).map(|_| true),
                    Err(e) => refusals_are_located(&p, &t, &e.0).map(|_| false),
                },
                1 => match slowfield::survey::read_picks(&p) {
                    Ok(s) => survey_is_sane(&s, &t).map(|_| true),
                    Err(e) => refusals_are_located(&p, &t, &e.0).map(|_| false),
                },
                2 => match slowfield::survey::read_surface(&p) {
                    Ok(s) => surface_is_sane(&s).map(|_| true),
                    Err(e) => refusals_are_located(&p, &t, &e.0).map(|_| false),
                },
                _ => match RunSettings::read(&p) {
                    Ok(_) => Ok(true),
                    Err(e) => refusals_are_located(&p, &t, &[e]).map(|_| false),
                },
            })
        },
    );
    seen.assert_both_verdicts("edited files with bad bytes");
}

/// How many edited inputs a reader accepted and refused: a property over edits that
/// only ever saw one of the two would check half of what it claims.
#[derive(Default)]
struct Outcomes {
    accepted: AtomicU64,
    refused: AtomicU64,
}

impl Outcomes {
    fn note(&self, r: Result<bool, TestCaseError>) -> Result<(), TestCaseError> {
        let accepted = r?;
        let n = if accepted {
            &self.accepted
        } else {
            &self.refused
        };
        n.fetch_add(1, Ordering::Relaxed);
        Ok(())
    }

    fn assert_both_verdicts(&self, name: &str) {
        let (a, r) = (
            self.accepted.load(Ordering::Relaxed),
            self.refused.load(Ordering::Relaxed),
        );
        eprintln!("{name}: {a} accepted, {r} refused");
        assert!(a > 0 && r > 0, "{name}: {a} accepted, {r} refused");
    }
}

// ---------------------------------------------------------------------------------
// Properties: nothing is lost, and a bad value is refused at its line

#[test]
fn valid_models_come_back_whole_in_any_form() {
    let s = (
        model(),
        Just(vec![0usize, 1, 2]).prop_shuffle(),
        prop_oneof![Just(plain_form()), form()],
        any::<u64>(),
    );
    assert_property("valid models", s, |(m, order, form, seed)| {
        let mut nodes = m.nodes();
        shuffle(&mut nodes, seed);
        let text = model_text(&m, &nodes, &order, &form);
        let g = VelocityGrid::parse(model_path(), &text)
            .map_err(|e| TestCaseError::fail(format!("refused a valid model: {e}\n{text}")))?;
        let s = g.spec;
        prop_assert_eq!((s.nx, s.nz), (m.nx, m.nz));
        prop_assert_eq!((s.x0, s.z0), (m.x0, m.z0));
        prop_assert!((s.dx - m.dx).abs() <= 1e-9 * m.dx && (s.dz - m.dz).abs() <= 1e-9 * m.dz);
        for j in 0..m.nz {
            for i in 0..m.nx {
                let got = g.v[s.idx(i, j)];
                if j <= m.top[i] {
                    prop_assert_eq!(got, m.v[j * m.nx + i], "node {} {}", i, j);
                } else {
                    prop_assert!(got.is_nan(), "air at {} {} holds {}", i, j, got);
                }
            }
        }
        Ok(())
    });
}

/// A deterministic shuffle (proptest's own shrinks the list; here only the order).
fn shuffle<T>(v: &mut [T], mut seed: u64) {
    for k in (1..v.len()).rev() {
        seed = seed
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        v.swap(k, (seed >> 33) as usize % (k + 1));
    }
}

/// Nodes of a lattice, each left out, given once or given twice, in any order: the
/// reader's verdict is held against a plain count on a dense table of the lattice.
#[test]
fn model_layout_verdicts_match_a_dense_table() {
    let s = (
        model(),
        proptest::collection::vec(
            prop_oneof![2 => Just(0u8), 12 => Just(1u8), 1 => Just(2u8)],
            36,
        ),
        any::<u64>(),
        any::<bool>(),
    );
    assert_property("model layouts", s, |(m, copies, seed, plain)| {
        let mut nodes = Vec::new();
        for j in 0..m.nz {
            for i in 0..m.nx {
                for _ in 0..copies[(j * m.nx + i) % copies.len()] {
                    nodes.push((i, j));
                }
            }
        }
        shuffle(&mut nodes, seed);
        let form = if plain {
            plain_form()
        } else {
            Form {
                eol: "\r\n",
                ..plain_form()
            }
        };
        let text = model_text(&m, &nodes, &[0, 1, 2], &form);
        let got = VelocityGrid::parse(model_path(), &text);
        let line = |k: usize| k as u64 + 2; // the header is line 1, no blank lines
                                            // the expected verdict
        let used = |f: &dyn Fn(&(usize, usize)) -> usize| {
            let mut u: Vec<usize> = nodes.iter().map(f).collect();
            u.sort_unstable();
            u.dedup();
            u
        };
        let (ui, uj) = (used(&|n| n.0), used(&|n| n.1));
        let regular = |u: &[usize]| u.windows(2).all(|w| w[1] - w[0] == u[1] - u[0]);
        if nodes.is_empty() {
            let e = got.expect_err("no nodes");
            prop_assert!(e.0[0].message.contains("header but no nodes"), "{}", e);
            return Ok(());
        }
        // x is looked at before z: one value only, or values off a regular spacing
        for u in [&ui, &uj] {
            if u.len() < 2 {
                let e = got.expect_err("one column or row");
                prop_assert!(e.0[0].message.contains("all nodes share one"), "{}", e);
                return Ok(());
            }
            if !regular(u) {
                let e = got.expect_err("irregular");
                prop_assert!(
                    e.0[0].message.contains("breaks the regular spacing"),
                    "{}",
                    e
                );
                return Ok(());
            }
        }
        // compressed lattice: columns and rows actually used
        let (si, sj) = (ui[1] - ui[0], uj[1] - uj[0]);
        let (nx, nz) = (ui.len(), uj.len());
        let cell = |n: &(usize, usize)| ((n.0 - ui[0]) / si, (n.1 - uj[0]) / sj);
        let mut first: Vec<Option<usize>> = vec![None; nx * nz];
        for (k, n) in nodes.iter().enumerate() {
            let (i, j) = cell(n);
            if let Some(f) = first[j * nx + i] {
                let e = got.expect_err("a node twice");
                let e = &e.0[0];
                prop_assert_eq!(e.line, Some(line(k)), "{}", e);
                prop_assert!(
                    e.message
                        .contains(&format!("given twice (also on line {})", line(f))),
                    "{}",
                    e
                );
                return Ok(());
            }
            first[j * nx + i] = Some(k);
        }
        for i in 0..nx {
            let mut above = None;
            for j in (0..nz).rev() {
                match (first[j * nx + i], above) {
                    (Some(k), _) => above = Some(k),
                    (None, Some(k)) => {
                        let e = got.expect_err("a hole");
                        let e = &e.0[0];
                        prop_assert_eq!(e.line, Some(line(k)), "{}", e);
                        let (x, z) = (m.x(ui[0] + i * si), m.z(uj[0] + j * sj));
                        prop_assert!(
                            e.message.contains("is missing below this one")
                                && e.message
                                    .contains(&format!("x={} z={}", coord(x), coord(z))),
                            "{} (expected x={} z={})",
                            e,
                            coord(x),
                            coord(z)
                        );
                        return Ok(());
                    }
                    (None, None) => {}
                }
            }
        }
        let g = got.map_err(|e| TestCaseError::fail(format!("refused a whole layout: {e}")))?;
        prop_assert_eq!((g.spec.nx, g.spec.nz), (nx, nz));
        for (n, k) in first.iter().enumerate() {
            match k {
                Some(k) => {
                    let (i, j) = nodes[*k];
                    prop_assert_eq!(g.v[n], m.v[j * m.nx + i]);
                }
                None => prop_assert!(g.v[n].is_nan()),
            }
        }
        Ok(())
    });
}

/// Coordinates as the model reader prints them: up to 4 decimals, no trailing zeros.
fn coord(v: f64) -> String {
    let s = format!("{v:.4}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    if s == "-0" {
        "0".into()
    } else {
        s.into()
    }
}

#[test]
fn valid_picks_come_back_whole_in_any_form() {
    let s = (
        pick_rows(),
        Just((0..7).collect::<Vec<usize>>()).prop_shuffle(),
        any::<bool>(),
        any::<bool>(),
        form(),
    );
    assert_property("valid picks", s, |(rows, order, seconds, sigma, form)| {
        let (text, lines) = picks_text(&rows, &order, seconds, sigma, &form);
        let sv = parse_picks_text(picks_path(), &text)
            .map_err(|e| TestCaseError::fail(format!("refused valid picks: {e}\n{text:?}")))?;
        prop_assert_eq!(sv.picks.len(), rows.len());
        let scale = if seconds { 1.0 } else { 1e-3 };
        for ((p, r), &l) in sv.picks.iter().zip(&rows).zip(&lines) {
            prop_assert_eq!(&p.shot, &r.shot);
            prop_assert_eq!((p.source.x, p.source.z), r.source);
            prop_assert_eq!((p.receiver.x, p.receiver.z), r.receiver);
            // the time as written, in the file's unit, times the unit
            let written: f64 = if seconds {
                (r.t_ms * 1e-3).to_string()
            } else {
                r.t_ms.to_string()
            }
            .parse()
            .unwrap();
            prop_assert_eq!(p.time, written * scale);
            match (p.sigma, r.sigma_ms, sigma) {
                (Some(s), Some(w), true) => {
                    let w: f64 = if seconds {
                        (w * 1e-3).to_string()
                    } else {
                        w.to_string()
                    }
                    .parse()
                    .unwrap();
                    prop_assert_eq!(s, w * scale);
                }
                (None, None, true) | (None, _, false) => {}
                other => prop_assert!(false, "uncertainty {:?}", other),
            }
            prop_assert_eq!(p.line, l, "{:?}", text);
        }
        prop_assert!(sv.warnings.is_empty(), "{:?}", sv.warnings);
        survey_is_sane(&sv, &text)
    });
}

#[test]
fn a_bad_value_is_refused_at_its_line() {
    let bad = select(&["abc", "1e400", "NaN", "-inf", "1,2", "\"\"", "١٢", "5e"][..]);
    let s = (pick_rows(), form(), any::<Index>(), 1usize..5, bad);
    assert_property("bad value at its line", s, |(rows, form, row, col, bad)| {
        // picks: a position or the time of row k
        let order: Vec<usize> = (0..6).collect();
        let (_, lines) = picks_text(&rows, &order, false, false, &form);
        let k = row.index(rows.len());
        // build the row's fields with the bad value and write again
        let header = [
            "shot",
            "source_x",
            "source_z",
            "receiver_x",
            "receiver_z",
            "time_ms",
        ];
        let mut body: Vec<Vec<String>> = rows
            .iter()
            .map(|r| {
                vec![
                    r.shot.clone(),
                    r.source.0.to_string(),
                    r.source.1.to_string(),
                    r.receiver.0.to_string(),
                    r.receiver.1.to_string(),
                    r.t_ms.to_string(),
                ]
            })
            .collect();
        body[k][col] = bad.to_string();
        let (text, lines2) = write_csv(&header, &body, &form);
        prop_assert_eq!(&lines, &lines2);
        let errs = parse_picks_text(picks_path(), &text)
            .expect_err("a bad value was accepted")
            .0;
        refusals_are_located(picks_path(), &text, &errs)?;
        prop_assert!(
            errs.iter().any(|e| e.line == Some(lines[k])),
            "line {} not named: {:?}\n{:?}",
            lines[k],
            errs.iter().map(|e| e.to_string()).collect::<Vec<_>>(),
            text
        );
        Ok(())
    });
}

#[test]
fn valid_surfaces_come_back_whole() {
    let s = (
        proptest::collection::btree_map(-100i32..100, -500i32..500, 1..10),
        any::<bool>(),
        any::<u64>(),
        form(),
    );
    assert_property("valid surfaces", s, |(pts, zx, seed, form)| {
        let mut rows: Vec<(f64, f64)> = pts
            .iter()
            .map(|(&x, &z)| (x as f64 * 0.5, z as f64 * 0.01))
            .collect();
        let sorted = rows.clone();
        shuffle(&mut rows, seed);
        let header: &[&str] = if zx { &["z", "x"] } else { &["x", "z"] };
        let body: Vec<Vec<String>> = rows
            .iter()
            .map(|&(x, z)| {
                if zx {
                    vec![z.to_string(), x.to_string()]
                } else {
                    vec![x.to_string(), z.to_string()]
                }
            })
            .collect();
        let (text, _) = write_csv(header, &body, &form);
        let s = parse_surface(surface_path(), &text)
            .map_err(|e| TestCaseError::fail(format!("refused a valid surface: {e}\n{text:?}")))?;
        let got: Vec<(f64, f64)> = s.nodes.iter().map(|p| (p.x, p.z)).collect();
        prop_assert_eq!(got, sorted);
        Ok(())
    });
}

// ---------------------------------------------------------------------------------
// Inputs found or feared, kept as plain tests

/// The model reader's fast path cut its text in pieces at byte positions: in a text
/// with multi-byte characters the cut fell inside one and the slice panicked.
#[test]
fn model_text_with_multibyte_characters_is_refused_without_a_panic() {
    for pad in 0..12 {
        let mut t = String::from("x,z,velocity_mps\n");
        for k in 0..40 {
            t.push_str(&format!("{k},{},{}é\n", "é".repeat(pad), "ü".repeat(k % 3)));
        }
        let e = VelocityGrid::parse(model_path(), &t).expect_err("not a model");
        assert!(e.to_string().starts_with("site 1/model.csv:2: "), "{e}");
    }
}

/// Two x values within the reader's tolerance of one column (here 3e-6 and 3.9e-6 on a
/// 1.5e-6 spacing) are one column: the node is placed by its column, not by rounding
/// its coordinate (which gave column 3 of 3 and indexed past the grid).
#[test]
fn a_coordinate_within_tolerance_of_a_column_stays_in_it() {
    let t = "x,z,velocity_mps\n0,0,500\n1.5e-6,0,510\n3e-6,0,520\n0,1,530\n1.5e-6,1,540\n3.9e-6,1,550\n";
    let g = VelocityGrid::parse(model_path(), t).unwrap();
    assert_eq!((g.spec.nx, g.spec.nz), (3, 2));
    assert_eq!(g.v, vec![500.0, 510.0, 520.0, 530.0, 540.0, 550.0]);
}

/// A settings file nested thousands of levels deep is refused, not a stack overflow.
#[test]
fn deeply_nested_settings_are_refused() {
    for open in ["[", "{a="] {
        let t = format!("sigma_ms = {}", open.repeat(100_000));
        let e = RunSettings::parse(settings_path(), &t).unwrap_err();
        assert!(e.to_string().starts_with("site 1/settings.toml:1: "), "{e}");
    }
}

/// Files written with lone CR line ends (old Mac) are refused at the right line.
#[test]
fn lone_cr_line_ends_count_as_lines() {
    let t = good_picks_text().replace('\n', "\r").replace("8.3", "8.3x");
    let e = parse_picks_text(picks_path(), &t).unwrap_err();
    assert!(
        e.to_string()
            .starts_with("site 1/picks.csv:6: column 'time_ms': "),
        "{e}"
    );
}
