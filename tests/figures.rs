//! Figures are written as PNG and SVG, complete, for a model with topography and air.

use slowfield::figures::{
    loss_curves, ray_coverage, residual_histogram, traveltime_curves, velocity_section,
    CoverageFigure, SectionDecor, SectionScale, ShotCurve,
};
use slowfield::model::{GridSpec, VelocityGrid};
use slowfield::survey::{Point, Surface};

fn png_size(bytes: &[u8]) -> (u32, u32) {
    assert_eq!(&bytes[..8], b"\x89PNG\r\n\x1a\n", "a PNG signature");
    let w = u32::from_be_bytes(bytes[16..20].try_into().unwrap());
    let h = u32::from_be_bytes(bytes[20..24].try_into().unwrap());
    (w, h)
}

#[test]
fn section_curves_and_losses_are_written() {
    let dir = tempfile::tempdir().unwrap();
    let surf = Surface::through(&[
        Point::new(0.0, 0.0),
        Point::new(50.0, 3.0),
        Point::new(100.0, 1.0),
    ]);
    let spec = GridSpec {
        x0: 0.0,
        z0: -25.0,
        dx: 0.5,
        dz: 0.5,
        nx: 201,
        nz: 57,
    };
    let m = VelocityGrid::from_fn(spec, Some(&surf), |x, z| {
        let d = surf.elevation(x) - z;
        let lens = if (x - 40.0).powi(2) / 36.0 + (d - 4.0).powi(2) / 4.0 < 1.0 {
            -150.0
        } else {
            0.0
        };
        400.0 + 60.0 * d + lens
    });
    let rec: Vec<Point> = (0..50)
        .map(|k| Point::new(k as f64 * 2.0, surf.elevation(k as f64 * 2.0)))
        .collect();
    let src = vec![rec[0], rec[25], rec[49]];
    let decor = SectionDecor {
        title: "test section".into(),
        surface: Some(&surf),
        receivers: &rec,
        sources: &src,
        footnote: Some("a footnote".into()),
        ..Default::default()
    };
    let stem = dir.path().join("velocity");
    velocity_section(&stem, &m, &decor).unwrap();
    let png = std::fs::read(dir.path().join("velocity.png")).unwrap();
    let (w, h) = png_size(&png);
    assert_eq!(w, 1400);
    assert!(h > 300 && h < 1200, "{h}");
    let svg = std::fs::read_to_string(dir.path().join("velocity.svg")).unwrap();
    assert!(svg.starts_with("<svg") && svg.trim_end().ends_with("</svg>"));
    assert!(svg.contains("test section"));

    let curves: Vec<ShotCurve> = src
        .iter()
        .enumerate()
        .map(|(k, s)| ShotCurve {
            shot: format!("S{k}"),
            source_x: s.x,
            points: rec
                .iter()
                .map(|r| (r.x, (r.x - s.x).abs() / 0.6 + 0.3, (r.x - s.x).abs() / 0.6))
                .collect(),
        })
        .collect();
    traveltime_curves(&dir.path().join("times"), "times", &curves, 0.5).unwrap();
    png_size(&std::fs::read(dir.path().join("times.png")).unwrap());
    let series = vec![(
        "data".to_string(),
        (1..100).map(|k| (k as f64, 10.0 / k as f64)).collect(),
    )];
    loss_curves(
        &dir.path().join("loss"),
        "loss",
        ("training step", "loss term"),
        &series,
    )
    .unwrap();
    png_size(&std::fs::read(dir.path().join("loss.png")).unwrap());
    // nothing temporary left behind
    for e in std::fs::read_dir(dir.path()).unwrap() {
        let n = e.unwrap().file_name().to_string_lossy().into_owned();
        assert!(!n.starts_with('.'), "left a temporary file {n}");
    }
    if let Ok(keep) = std::env::var("SLOWFIELD_KEEP_FIGURES") {
        for n in ["velocity.png", "times.png", "loss.png"] {
            std::fs::copy(dir.path().join(n), std::path::Path::new(&keep).join(n)).unwrap();
        }
    }
}

/// A decoded 8-bit RGB or RGBA PNG, read with the small inflater below: the crate has no
/// image decoder among its dependencies, and a pixel check needs the pixels.
struct Pixels {
    w: usize,
    h: usize,
    bpp: usize,
    data: Vec<u8>,
}

impl Pixels {
    fn at(&self, x: usize, y: usize) -> [u8; 3] {
        let k = (y * self.w + x) * self.bpp;
        [self.data[k], self.data[k + 1], self.data[k + 2]]
    }

    /// The per-channel median over the `(2r+1)²` pixels around `(x, y)`: the cell's
    /// fill, whatever thin ray lines cross it.
    fn median(&self, (x, y): (usize, usize), r: usize) -> [u8; 3] {
        let mut ch: [Vec<u8>; 3] = Default::default();
        for yy in y - r..=y + r {
            for xx in x - r..=x + r {
                let p = self.at(xx, yy);
                for c in 0..3 {
                    ch[c].push(p[c]);
                }
            }
        }
        ch.map(|mut v| {
            v.sort_unstable();
            v[v.len() / 2]
        })
    }
}

fn decode_png(bytes: &[u8]) -> Pixels {
    let (w, h) = png_size(bytes);
    let (w, h) = (w as usize, h as usize);
    assert_eq!(bytes[24], 8, "8 bits per channel");
    let bpp = match bytes[25] {
        2 => 3,
        6 => 4,
        t => panic!("colour type {t}"),
    };
    assert_eq!(bytes[28], 0, "not interlaced");
    let mut idat = Vec::new();
    let mut pos = 8;
    while pos + 8 <= bytes.len() {
        let len = u32::from_be_bytes(bytes[pos..pos + 4].try_into().unwrap()) as usize;
        if &bytes[pos + 4..pos + 8] == b"IDAT" {
            idat.extend_from_slice(&bytes[pos + 8..pos + 8 + len]);
        }
        pos += 12 + len;
    }
    let raw = inflate(&idat[2..]);
    let stride = w * bpp;
    assert_eq!(raw.len(), h * (stride + 1), "inflated size");
    let mut data = vec![0u8; h * stride];
    for y in 0..h {
        let filter = raw[y * (stride + 1)];
        let line = &raw[y * (stride + 1) + 1..(y + 1) * (stride + 1)];
        for i in 0..stride {
            let a = if i >= bpp {
                data[y * stride + i - bpp]
            } else {
                0
            };
            let b = if y > 0 { data[(y - 1) * stride + i] } else { 0 };
            let c = if y > 0 && i >= bpp {
                data[(y - 1) * stride + i - bpp]
            } else {
                0
            };
            let pred = match filter {
                0 => 0,
                1 => a,
                2 => b,
                3 => ((a as u16 + b as u16) / 2) as u8,
                4 => {
                    let p = a as i16 + b as i16 - c as i16;
                    let (pa, pb, pc) = (
                        (p - a as i16).abs(),
                        (p - b as i16).abs(),
                        (p - c as i16).abs(),
                    );
                    if pa <= pb && pa <= pc {
                        a
                    } else if pb <= pc {
                        b
                    } else {
                        c
                    }
                }
                f => panic!("filter {f}"),
            };
            data[y * stride + i] = line[i].wrapping_add(pred);
        }
    }
    Pixels { w, h, bpp, data }
}

/// Least-significant-bit-first reader of a deflate stream.
struct Bits<'a> {
    d: &'a [u8],
    pos: usize,
    buf: u64,
    n: u32,
}

impl Bits<'_> {
    fn take(&mut self, n: u32) -> usize {
        while self.n < n {
            self.buf |= (self.d[self.pos] as u64) << self.n;
            self.pos += 1;
            self.n += 8;
        }
        let v = self.buf & ((1u64 << n) - 1);
        self.buf >>= n;
        self.n -= n;
        v as usize
    }
}

/// Canonical Huffman code: how many codes of each length, and the symbols in code order.
struct Huffman {
    count: [usize; 16],
    symbol: Vec<usize>,
}

impl Huffman {
    fn new(lengths: &[usize]) -> Huffman {
        let mut count = [0; 16];
        for &l in lengths {
            count[l] += 1;
        }
        count[0] = 0;
        let mut offs = [0; 16];
        for l in 1..16 {
            offs[l] = offs[l - 1] + count[l - 1];
        }
        let mut symbol = vec![0; lengths.len()];
        for (s, &l) in lengths.iter().enumerate() {
            if l != 0 {
                symbol[offs[l]] = s;
                offs[l] += 1;
            }
        }
        Huffman { count, symbol }
    }

    fn decode(&self, b: &mut Bits) -> usize {
        let (mut code, mut first, mut index) = (0, 0, 0);
        for len in 1..16 {
            code |= b.take(1);
            let count = self.count[len];
            if code < first + count {
                return self.symbol[index + code - first];
            }
            index += count;
            first = (first + count) << 1;
            code <<= 1;
        }
        panic!("invalid Huffman code")
    }
}

/// Inflates a raw deflate stream (RFC 1951).
fn inflate(d: &[u8]) -> Vec<u8> {
    const LBASE: [usize; 29] = [
        3, 4, 5, 6, 7, 8, 9, 10, 11, 13, 15, 17, 19, 23, 27, 31, 35, 43, 51, 59, 67, 83, 99, 115,
        131, 163, 195, 227, 258,
    ];
    const LEXT: [u32; 29] = [
        0, 0, 0, 0, 0, 0, 0, 0, 1, 1, 1, 1, 2, 2, 2, 2, 3, 3, 3, 3, 4, 4, 4, 4, 5, 5, 5, 5, 0,
    ];
    const DBASE: [usize; 30] = [
        1, 2, 3, 4, 5, 7, 9, 13, 17, 25, 33, 49, 65, 97, 129, 193, 257, 385, 513, 769, 1025, 1537,
        2049, 3073, 4097, 6145, 8193, 12289, 16385, 24577,
    ];
    const DEXT: [u32; 30] = [
        0, 0, 0, 0, 1, 1, 2, 2, 3, 3, 4, 4, 5, 5, 6, 6, 7, 7, 8, 8, 9, 9, 10, 10, 11, 11, 12, 12,
        13, 13,
    ];
    const ORDER: [usize; 19] = [
        16, 17, 18, 0, 8, 7, 9, 6, 10, 5, 11, 4, 12, 3, 13, 2, 14, 1, 15,
    ];
    let mut b = Bits {
        d,
        pos: 0,
        buf: 0,
        n: 0,
    };
    let mut out: Vec<u8> = Vec::new();
    loop {
        let last = b.take(1) == 1;
        let (lit, dist) = match b.take(2) {
            0 => {
                // stored: the partial byte is dropped (fewer than 8 bits are ever buffered)
                b.buf = 0;
                b.n = 0;
                let len = d[b.pos] as usize | (d[b.pos + 1] as usize) << 8;
                out.extend_from_slice(&d[b.pos + 4..b.pos + 4 + len]);
                b.pos += 4 + len;
                if last {
                    return out;
                }
                continue;
            }
            1 => {
                let mut l = [8; 288];
                l[144..256].fill(9);
                l[256..280].fill(7);
                (Huffman::new(&l), Huffman::new(&[5; 30]))
            }
            2 => {
                let nlen = b.take(5) + 257;
                let ndist = b.take(5) + 1;
                let ncode = b.take(4) + 4;
                let mut cl = [0; 19];
                for &o in &ORDER[..ncode] {
                    cl[o] = b.take(3);
                }
                let clh = Huffman::new(&cl);
                let mut l: Vec<usize> = Vec::with_capacity(nlen + ndist);
                while l.len() < nlen + ndist {
                    match clh.decode(&mut b) {
                        s @ 0..=15 => l.push(s),
                        16 => {
                            let prev = *l.last().expect("a length to repeat");
                            let r = 3 + b.take(2);
                            l.extend(std::iter::repeat_n(prev, r));
                        }
                        17 => {
                            let r = 3 + b.take(3);
                            l.extend(std::iter::repeat_n(0, r));
                        }
                        _ => {
                            let r = 11 + b.take(7);
                            l.extend(std::iter::repeat_n(0, r));
                        }
                    }
                }
                (Huffman::new(&l[..nlen]), Huffman::new(&l[nlen..]))
            }
            t => panic!("block type {t}"),
        };
        loop {
            let s = lit.decode(&mut b);
            match s {
                0..=255 => out.push(s as u8),
                256 => break,
                _ => {
                    let len = LBASE[s - 257] + b.take(LEXT[s - 257]);
                    let ds = dist.decode(&mut b);
                    let back = DBASE[ds] + b.take(DEXT[ds]);
                    let start = out.len() - back;
                    for k in 0..len {
                        out.push(out[start + k]);
                    }
                }
            }
        }
        if last {
            return out;
        }
    }
}

/// Row of the x axis and column of the y axis, found as the longest runs of black
/// pixels left of the colour bar, and from them the plot rectangle (left, top, right,
/// bottom) in pixels.
fn plot_rect(p: &Pixels, panel_w: usize) -> (usize, usize, usize, usize) {
    let black = |x: usize, y: usize| p.at(x, y) == [0, 0, 0];
    let run = |cells: &mut dyn Iterator<Item = bool>| -> (usize, usize) {
        // (start, length) of the longest run
        let (mut best, mut cur) = ((0, 0), (0, 0));
        for (k, on) in cells.enumerate() {
            if on {
                if cur.1 == 0 {
                    cur.0 = k;
                }
                cur.1 += 1;
                if cur.1 > best.1 {
                    best = cur;
                }
            } else {
                cur.1 = 0;
            }
        }
        best
    };
    let (bottom, (left0, wlen)) = (0..p.h)
        .map(|y| (y, run(&mut (0..panel_w).map(|x| black(x, y)))))
        .max_by_key(|r| r.1 .1)
        .unwrap();
    let (left, (top, _)) = (0..panel_w)
        .map(|x| (x, run(&mut (0..p.h).map(|y| black(x, y)))))
        .max_by_key(|r| r.1 .1)
        .unwrap();
    assert!(
        (left as i64 - left0 as i64).abs() <= 2,
        "axes meet: {left} {left0}"
    );
    (left, top, left0 + wlen - 1, bottom)
}

#[test]
fn ray_coverage_greys_unreached_ground_and_darkens_with_coverage() {
    let dir = tempfile::tempdir().unwrap();
    // 41 × 21 nodes over 100 m × 20 m; the ground slopes from −6 m to −1 m, air above
    let spec = GridSpec {
        x0: 0.0,
        z0: -20.0,
        dx: 2.5,
        dz: 1.0,
        nx: 41,
        nz: 21,
    };
    let surf = Surface::through(&[Point::new(0.0, -6.0), Point::new(100.0, -1.0)]);
    let air = |k: usize| spec.z(k / spec.nx) > surf.elevation(spec.x(k % spec.nx));
    let rec: Vec<Point> = (0..20)
        .map(|k| {
            let x = 2.5 + 5.0 * k as f64;
            Point::new(x, surf.elevation(x))
        })
        .collect();
    let src: Vec<Point> = [5.0, 50.0, 95.0]
        .iter()
        .map(|&x| Point::new(x, surf.elevation(x)))
        .collect();
    // rays: arcs from each shot to each receiver, bottoming at 12 % of the offset below
    // the ground (at most 10.8 m), so the deep ground stays unreached
    let rays: Vec<Vec<(f64, f64)>> = src
        .iter()
        .flat_map(|s| rec.iter().map(move |r| (*s, *r)))
        .filter(|(s, r)| (s.x - r.x).abs() > 1.0)
        .map(|(s, r)| {
            let depth = 0.12 * (r.x - s.x).abs();
            (0..=40)
                .map(|k| {
                    let t = k as f64 / 40.0;
                    let x = s.x + t * (r.x - s.x);
                    (x, surf.elevation(x) - 4.0 * depth * t * (1.0 - t))
                })
                .collect()
        })
        .collect();
    // derivative weight sum: each 5 cm of ray shared among its cell's ground corners
    let mut dws: Vec<f64> = (0..spec.len())
        .map(|k| if air(k) { f64::NAN } else { 0.0 })
        .collect();
    for ray in &rays {
        for w in ray.windows(2) {
            let len = ((w[1].0 - w[0].0).powi(2) + (w[1].1 - w[0].1).powi(2)).sqrt();
            let n = (len / 0.05).ceil().max(1.0) as usize;
            for k in 0..n {
                let t = (k as f64 + 0.5) / n as f64;
                let (x, z) = (
                    w[0].0 + t * (w[1].0 - w[0].0),
                    w[0].1 + t * (w[1].1 - w[0].1),
                );
                let (cw, m) = spec.corner_weights(x, z, |k| !air(k));
                for &(node, wt) in &cw[..m] {
                    dws[node] += wt * len / n as f64;
                }
            }
        }
    }
    let fig = CoverageFigure {
        title: "test coverage".into(),
        spec,
        dws: &dws,
        rays: &rays,
        surface: Some(&surf),
        receivers: &rec,
        sources: &src,
        footnote: Some("a footnote".into()),
    };
    let stem = dir.path().join("coverage");
    ray_coverage(&stem, &fig).unwrap();
    let bytes = std::fs::read(dir.path().join("coverage.png")).unwrap();
    let p = decode_png(&bytes);
    assert_eq!(p.w, 1400);
    assert!(p.h > 300 && p.h < 1200, "{}", p.h);
    let svg = std::fs::read_to_string(dir.path().join("coverage.svg")).unwrap();
    assert!(svg.starts_with("<svg") && svg.trim_end().ends_with("</svg>"));
    for text in [
        "test coverage",
        "derivative weight sum (m, log scale)",
        "lines: rays",
        "grey: no ray",
        "a footnote",
    ] {
        assert!(svg.contains(text), "the SVG says {text:?}");
    }

    // data → pixels through the plot rectangle; the plotted elevations run from the
    // grid's bottom to 0.5 m above its top (the highest ground is below the top)
    let (left, top, right, bottom) = plot_rect(&p, 1250);
    let (zlo, zhi) = (spec.z0, spec.z_max() + 0.5);
    let px = |x: f64, z: f64| {
        let u = left as f64 + (x - spec.x0) / spec.width() * (right - left) as f64;
        let v = bottom as f64 - (z - zlo) / (zhi - zlo) * (bottom - top) as f64;
        (u.round() as usize, v.round() as usize)
    };
    let node_px = |k: usize| px(spec.x(k % spec.nx), spec.z(k / spec.nx));
    // deep ground no ray reached: the flat grey
    let deep = spec.idx(20, 1);
    assert_eq!(dws[deep], 0.0);
    assert_eq!(
        p.median(node_px(deep), 4),
        [225, 225, 225],
        "unreached ground is grey"
    );
    // air is not drawn
    assert_eq!(p.median(px(12.5, -1.5), 4), [255, 255, 255], "air is blank");
    // among nodes whose cell lies wholly in the ground and inside the plot, the most
    // covered is drawn darker than the least (but reached) one
    let inner: Vec<usize> = (0..spec.len())
        .filter(|&k| {
            let (i, j) = (k % spec.nx, k / spec.nx);
            i > 0
                && i + 1 < spec.nx
                && j > 0
                && spec.z(j) + 1.5 < surf.elevation(spec.x(i))
                && dws[k] > 0.0
        })
        .collect();
    let hi = *inner
        .iter()
        .max_by(|a, b| dws[**a].total_cmp(&dws[**b]))
        .unwrap();
    let lo = *inner
        .iter()
        .min_by(|a, b| dws[**a].total_cmp(&dws[**b]))
        .unwrap();
    assert!(dws[hi] > 10.0 * dws[lo], "{} {}", dws[hi], dws[lo]);
    let lum = |c: [u8; 3]| 0.299 * c[0] as f64 + 0.587 * c[1] as f64 + 0.114 * c[2] as f64;
    let (c_hi, c_lo) = (p.median(node_px(hi), 4), p.median(node_px(lo), 4));
    assert!(
        lum(c_hi) + 60.0 < lum(c_lo),
        "more coverage, darker: {c_hi:?} (dws {:.1}) against {c_lo:?} (dws {:.3})",
        dws[hi],
        dws[lo]
    );
    for c in [c_hi, c_lo] {
        assert!(
            c != [225, 225, 225] && c != [255, 255, 255],
            "reached ground is coloured"
        );
    }

    // more rays than are drawn: every k-th, and the legend says so
    let many: Vec<Vec<(f64, f64)>> = rays.iter().cycle().take(7000).cloned().collect();
    let crowded = CoverageFigure {
        rays: &many,
        footnote: None,
        ..fig.clone()
    };
    ray_coverage(&dir.path().join("crowded"), &crowded).unwrap();
    let svg = std::fs::read_to_string(dir.path().join("crowded.svg")).unwrap();
    assert!(svg.contains("lines: every 3rd of 7000 rays"));
    let lines = svg.matches("<polyline").count();
    assert!((2334..2400).contains(&lines), "{lines} lines drawn");
    // a dws of the wrong length is an error, not a panic
    let short = CoverageFigure {
        dws: &dws[1..],
        ..fig.clone()
    };
    assert!(ray_coverage(&dir.path().join("short"), &short).is_err());
    // no ray at all: all ground grey, and still a figure
    let zero: Vec<f64> = dws
        .iter()
        .map(|d| if d.is_nan() { *d } else { 0.0 })
        .collect();
    let empty = CoverageFigure {
        dws: &zero,
        rays: &[],
        ..fig.clone()
    };
    ray_coverage(&dir.path().join("empty"), &empty).unwrap();
    let p = decode_png(&std::fs::read(dir.path().join("empty.png")).unwrap());
    assert_eq!(p.median(node_px(hi), 4), [225, 225, 225]);

    for e in std::fs::read_dir(dir.path()).unwrap() {
        let n = e.unwrap().file_name().to_string_lossy().into_owned();
        assert!(!n.starts_with('.'), "left a temporary file {n}");
    }
    if let Ok(keep) = std::env::var("SLOWFIELD_KEEP_FIGURES") {
        for n in ["coverage.png", "coverage.svg", "crowded.png"] {
            std::fs::copy(dir.path().join(n), std::path::Path::new(&keep).join(n)).unwrap();
        }
    }
}

/// Copies the named figures to `$SLOWFIELD_KEEP_FIGURES` when it is set, to look at.
fn keep(dir: &std::path::Path, names: &[&str]) {
    if let Ok(keep) = std::env::var("SLOWFIELD_KEEP_FIGURES") {
        for n in names {
            std::fs::copy(dir.join(n), std::path::Path::new(&keep).join(n)).unwrap();
        }
    }
}

#[test]
fn residual_histogram_draws_bars_and_the_normal() {
    let dir = tempfile::tempdir().unwrap();
    // 400 picks: a deterministic spread of r/σ over about ±2.5 with a few far out, σ
    // varying per pick
    let sigma: Vec<f64> = (0..400).map(|k| 0.5 + 0.25 * (k % 3) as f64).collect();
    let resid: Vec<f64> = (0..400)
        .map(|k| {
            let u = (k as f64 + 0.5) / 400.0;
            let z = if k % 97 == 0 {
                5.5
            } else {
                2.5 * (2.0 * u - 1.0).powi(3)
            };
            z * sigma[k]
        })
        .collect();
    let stem = dir.path().join("residuals");
    residual_histogram(&stem, "test residuals", &resid, &sigma).unwrap();
    let bytes = std::fs::read(dir.path().join("residuals.png")).unwrap();
    let p = decode_png(&bytes);
    assert_eq!((p.w, p.h), (1100, 600));
    let svg = std::fs::read_to_string(dir.path().join("residuals.svg")).unwrap();
    assert!(svg.starts_with("<svg") && svg.trim_end().ends_with("</svg>"));
    for text in [
        "test residuals",
        "residual / σ (observed − predicted)",
        "picks per bin",
        "400 picks",
        "5 beyond ±4",
        "noise alone: 4.6 %",
    ] {
        assert!(svg.contains(text), "the SVG says {text:?}");
    }
    // the bars: a good share of the plot in the bar colour, and a rectangle per
    // non-empty bin beyond the page, the legend's box and swatch
    let bar = [86, 124, 176];
    let bar_px = (0..p.h)
        .flat_map(|y| (0..p.w).map(move |x| (x, y)))
        .filter(|&(x, y)| p.at(x, y) == bar)
        .count();
    assert!(bar_px > 20_000, "{bar_px} pixels of bars");
    let rects = svg.matches("<rect").count();
    assert!(rects >= 20 + 3, "{rects} rectangles");
    // no picks: still a figure; lengths that differ: an error
    residual_histogram(&dir.path().join("none"), "no picks", &[], &[]).unwrap();
    let p = decode_png(&std::fs::read(dir.path().join("none.png")).unwrap());
    assert_eq!((p.w, p.h), (1100, 600));
    assert!(residual_histogram(&dir.path().join("bad"), "bad", &[1.0], &[]).is_err());
    keep(dir.path(), &["residuals.png", "residuals.svg", "none.png"]);
}

/// A flat 120 m × 20 m section of 61 × 21 nodes, all ground, velocity rising with depth.
fn flat_section() -> (GridSpec, VelocityGrid) {
    let spec = GridSpec {
        x0: 0.0,
        z0: -20.0,
        dx: 2.0,
        dz: 1.0,
        nx: 61,
        nz: 21,
    };
    let m = VelocityGrid::from_fn(spec, None, |_, z| 500.0 - 60.0 * z);
    (spec, m)
}

#[test]
fn unconstrained_ground_is_hatched_and_only_there() {
    let dir = tempfile::tempdir().unwrap();
    let (spec, m) = flat_section();
    // lower half (elevation below −10 m) unconstrained
    let lower: Vec<bool> = (0..spec.len())
        .map(|k| spec.z(k / spec.nx) >= -10.0)
        .collect();
    let all = vec![true; spec.len()];
    for (stem, covered) in [("covered", &all), ("half", &lower)] {
        let decor = SectionDecor {
            title: "hatching".into(),
            covered: Some(covered),
            contours: Some(vec![]),
            ..Default::default()
        };
        velocity_section(&dir.path().join(stem), &m, &decor).unwrap();
    }
    let hatch = |c: [u8; 3]| c[0] == c[1] && c[1] == c[2] && c[0] < 110;
    let read = |n: &str| decode_png(&std::fs::read(dir.path().join(n)).unwrap());
    // elevation → pixel row through the plot rectangle (no surface: the plot spans the
    // grid's rows)
    let (full, half) = (read("covered.png"), read("half.png"));
    let (left, top, right, bottom) = plot_rect(&half, 1250);
    assert_eq!(plot_rect(&full, 1250), (left, top, right, bottom));
    let row = |z: f64| {
        let t = (z - spec.z0) / (spec.z_max() - spec.z0);
        (bottom as f64 - t * (bottom - top) as f64).round() as usize
    };
    let count = |p: &Pixels, rows: std::ops::Range<usize>| {
        rows.flat_map(|y| (left + 3..right - 3).map(move |x| (x, y)))
            .filter(|&(x, y)| hatch(p.at(x, y)))
            .count()
    };
    // covered ground, 3 px clear of the boundary and the axes; the uncovered band
    let upper_rows = top + 3..row(-10.5) - 3;
    let lower_rows = row(-10.5) + 3..bottom - 3;
    assert_eq!(count(&full, top + 3..bottom - 3), 0, "nothing hatched");
    assert_eq!(count(&half, upper_rows), 0, "covered ground is not hatched");
    let n = count(&half, lower_rows.clone());
    let area = (lower_rows.len() * (right - left - 6)) as f64;
    // one pixel in about 13 along a row: lines 9.2 px apart
    assert!(
        n as f64 > 0.05 * area && (n as f64) < 0.12 * area,
        "{n} hatch pixels over {area} px"
    );
    // 45° on the screen: the lines are as far apart along a row as along a column
    let gaps = |hits: Vec<usize>| -> Vec<usize> { hits.windows(2).map(|w| w[1] - w[0]).collect() };
    let y = lower_rows.start + lower_rows.len() / 2;
    let along_row = gaps(
        (left + 3..right - 3)
            .filter(|&x| hatch(half.at(x, y)))
            .collect(),
    );
    let x = (left + right) / 2;
    let along_col = gaps(
        lower_rows
            .clone()
            .filter(|&y| hatch(half.at(x, y)))
            .collect(),
    );
    assert!(along_row.len() > 20 && along_col.len() > 3);
    for g in along_row.iter().chain(&along_col) {
        assert!(
            (12..=14).contains(g),
            "gaps along a row {along_row:?}, a column {along_col:?}"
        );
    }
    let svg = std::fs::read_to_string(dir.path().join("half.svg")).unwrap();
    assert!(svg.contains("hatched: no ray coverage"));
    assert!(
        !svg.contains("contours"),
        "no contour lines, none in the legend"
    );
    keep(dir.path(), &["covered.png", "half.png", "half.svg"]);
}

#[test]
fn spread_section_with_a_depth_band_is_written() {
    let dir = tempfile::tempdir().unwrap();
    let (spec, _) = flat_section();
    let spread = VelocityGrid::from_fn(spec, None, |x, z| 20.0 - 4.0 * z + 0.2 * x);
    // the band around −8 m, ±1.5 m, with a gap from 50 m to 70 m
    let band: Vec<(f64, f64, f64)> = (0..spec.nx)
        .map(|i| spec.x(i))
        .filter(|x| !(50.0..70.0).contains(x))
        .map(|x| (x, -6.5 + 0.02 * x, -9.5 + 0.02 * x))
        .collect();
    let line: Vec<(f64, f64)> = band.iter().map(|b| (b.0, 0.5 * (b.1 + b.2))).collect();
    let covered: Vec<bool> = (0..spec.len())
        .map(|k| spec.z(k / spec.nx) > -15.0)
        .collect();
    let decor = SectionDecor {
        title: "test spread".into(),
        covered: Some(&covered),
        interface: Some((line, "1500 m/s".into())),
        band: Some(band),
        scale: SectionScale::Spread,
        ..Default::default()
    };
    velocity_section(&dir.path().join("spread"), &spread, &decor).unwrap();
    let p = decode_png(&std::fs::read(dir.path().join("spread.png")).unwrap());
    assert_eq!(p.w, 1400);
    assert!(p.h > 300 && p.h < 1200, "{}", p.h);
    let svg = std::fs::read_to_string(dir.path().join("spread.svg")).unwrap();
    assert!(svg.contains("ensemble spread, 1σ (m/s)"));
    assert!(svg.contains("spread contours") && !svg.contains("velocity"));
    assert!(svg.contains("light band"));
    // the band: two pieces either side of the gap
    assert_eq!(svg.matches("<polygon").count(), 2);
    keep(dir.path(), &["spread.png", "spread.svg"]);
}
