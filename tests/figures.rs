//! Figures are written as PNG and SVG, complete, for a model with topography and air.

use slowfield::figures::{
    loss_curves, traveltime_curves, velocity_section, SectionDecor, ShotCurve,
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
