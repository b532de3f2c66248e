//! First-arrival travel times by fast marching, and rays through them.
//!
//! The solver works on the regular node grid of [`GridSpec`] with one slowness per node
//! (`s = 1/v`, s/m, index `j·nx + i`). Air nodes above the ground are given as
//! `f64::INFINITY` (or `NaN`; both mean air): they carry no energy, are never accepted
//! and never serve as upwind neighbours, so no time ever travels through the air.
//!
//! # Method
//!
//! * Fast marching (Sethian 1996, PNAS 93, 1591–1595; Sethian 1999, *Level Set Methods
//!   and Fast Marching Methods*, ch. 8) with first- or second-order one-sided upwind
//!   differences ([`Order`]); second order is the default.
//! * Factored eikonal equation `T = T0·τ`, `T0 = s_src·|x − x_src|`, which removes the
//!   point-source singularity (Fomel, Luo & Zhao 2009, J. Comput. Phys. 228, 6440–6455;
//!   Luo & Qian 2012, J. Comput. Phys. 231; Treister & Haber 2016, SIAM J. Sci. Comput.
//!   38). The unknown is `τ`; along each axis `∂T/∂x ≈ τ·∂T0/∂x + T0·D±τ` with `∂T0/∂x`
//!   exact and `D±` the one-sided difference, and `(∂T/∂x)² + (∂T/∂z)² = s²` gives a
//!   quadratic in `τ` at each node.
//! * The source may sit anywhere: off the nodes, on a sloping surface, underground. The
//!   nodes of the cell(s) around it get the straight-ray time `∫ s dl` (Simpson's rule on
//!   the bilinear slowness), exact to third order in the cell size.
//! * Times at arbitrary points interpolate `τ` (smooth even next to the source), not
//!   `T`, bilinearly where the four corners of the cell are ground and by a weighted
//!   least-squares plane through the nearby ground nodes where the cell touches air,
//!   then multiply by the exact `T0`. Both are exact for linear `τ`, so the second-order
//!   accuracy of the solver is kept at receivers on the surface too.
//!
//! # Air tolerance
//!
//! The solver only sees nodes. A source or receiver is *in the air* when no ground node
//! lies within one cell diagonal `sqrt(dx² + dz²)` of it: points on the surface, even
//! on a peak between two nodes, are accepted; points more than about a cell above the
//! ground are refused with [`EikonalError::InAir`].
//!
//! # Rays and sensitivities
//!
//! [`trace_ray`] descends the gradient of `T` from a receiver to the source (see
//! [`RayOptions`]). Each ray carries *per-node* weights: every short segment's length
//! is shared among the four corners of its cell by the bilinear weights of its midpoint
//! (air corners get nothing; the rest are renormalised). So `Σ w_k·s_k` is the ray
//! integral of the bilinear slowness, and `w_k ≈ ∂T/∂s_k` is the Fréchet derivative of
//! the time with respect to the node slowness `s_k` (Fermat's principle: the path does
//! not change to first order). Per-cell lengths are also available for coverage maps.
//!
//! # Parallel shots
//!
//! [`solve_many`] and [`solve_many_rays`] run the shots in parallel with rayon; each
//! worker owns one field (time, τ, state, heap: `O(nx·nz)` memory per thread) and reuses
//! it from shot to shot.

mod fmm;
mod interp;
mod ray;

pub use fmm::TimeField;
pub use ray::{cell_coverage, node_coverage, trace_ray, Ray, RayOptions};

use rayon::prelude::*;

use crate::model::GridSpec;
pub use crate::survey::Point;

/// Order of the one-sided upwind differences.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Order {
    /// First order: `(τ − τ₁)/h`.
    First,
    /// Second order where two upwind nodes are known: `(3τ − 4τ₁ + τ₂)/(2h)`
    /// (Sethian 1999, §8.3); first order elsewhere.
    #[default]
    Second,
}

/// Settings of the fast-marching solver.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct FmmOptions {
    /// Stencil order (default: second).
    pub order: Order,
}

/// What a point is, for error messages.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Role {
    /// A shot position.
    Source,
    /// A receiver (geophone) position.
    Receiver,
}

impl std::fmt::Display for Role {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            Role::Source => "source",
            Role::Receiver => "receiver",
        })
    }
}

/// Everything that can stop a travel-time computation.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum EikonalError {
    /// The grid has too few nodes or a bad spacing.
    #[error("the model grid is unusable ({nx}×{nz} nodes, spacing {dx} m × {dz} m): it needs at least 2×2 nodes and positive finite spacings")]
    BadGrid {
        /// columns
        nx: usize,
        /// rows
        nz: usize,
        /// spacing along x, m
        dx: f64,
        /// spacing along z, m
        dz: f64,
    },
    /// The slowness array does not match the grid.
    #[error("the slowness array holds {got} values but the {nx}×{nz} grid has {expected} nodes: give one slowness per node, index j·nx + i")]
    SlownessLength {
        /// values given
        got: usize,
        /// nodes in the grid
        expected: usize,
        /// columns
        nx: usize,
        /// rows
        nz: usize,
    },
    /// A ground node has a slowness that is zero, negative or `-inf`.
    #[error("node (i={i}, j={j}) at x={x} m, z={z} m has slowness {value} s/m: ground slowness must be positive and finite (mark air nodes with +inf or NaN)")]
    BadSlowness {
        /// column
        i: usize,
        /// row
        j: usize,
        /// x of the node, m
        x: f64,
        /// z of the node, m
        z: f64,
        /// offending value
        value: f64,
    },
    /// The grid holds no ground node at all.
    #[error("every node of the model is air: there is no ground for a wave to travel in")]
    AllAir,
    /// A point outside the grid rectangle.
    #[error("the {role} at x={x} m, z={z} m lies outside the model grid (x {x_min}..{x_max} m, z {z_min}..{z_max} m): extend the model to cover every source and receiver")]
    OutsideGrid {
        /// source or receiver
        role: Role,
        /// x, m
        x: f64,
        /// z, m
        z: f64,
        /// grid extent
        x_min: f64,
        /// grid extent
        x_max: f64,
        /// grid extent
        z_min: f64,
        /// grid extent
        z_max: f64,
    },
    /// A point with no ground node within one cell diagonal.
    #[error("the {role} at x={x} m, z={z} m is in the air: no ground node of the model lies within one cell ({diag:.3} m) of it; check its elevation against the model's surface")]
    InAir {
        /// source or receiver
        role: Role,
        /// x, m
        x: f64,
        /// z, m
        z: f64,
        /// the tolerance, m
        diag: f64,
    },
    /// A non-finite coordinate.
    #[error("the {role} position ({x}, {z}) is not a finite number")]
    BadPoint {
        /// source or receiver
        role: Role,
        /// x
        x: f64,
        /// z
        z: f64,
    },
    /// Ground that the wave from this source cannot reach (cut off by air).
    #[error("no travel time reaches x={x} m, z={z} m from the source at x={sx} m, z={sz} m: the ground there is cut off from the source by air")]
    Unreachable {
        /// x, m
        x: f64,
        /// z, m
        z: f64,
        /// source x, m
        sx: f64,
        /// source z, m
        sz: f64,
    },
    /// Receiver lists do not match the sources.
    #[error("{sources} sources but {lists} receiver lists: give one list of receivers per source")]
    ShotCount {
        /// number of sources
        sources: usize,
        /// number of receiver lists
        lists: usize,
    },
    /// A ray that did not reach its source.
    #[error("the ray from the receiver at x={x} m, z={z} m did not reach the source within {steps} steps: {why}")]
    RayFailed {
        /// receiver x
        x: f64,
        /// receiver z
        z: f64,
        /// steps taken
        steps: usize,
        /// reason
        why: String,
    },
    /// Bad ray settings.
    #[error("ray step {step} (in cells) must be positive and at most 1")]
    BadRayStep {
        /// the step given
        step: f64,
    },
    /// An error inside one shot of a batch.
    #[error("shot {shot}: {error}")]
    InShot {
        /// index of the shot in the batch
        shot: usize,
        /// what went wrong
        error: Box<EikonalError>,
    },
}

/// Checks the grid and the slowness array (length, values).
pub fn validate(spec: &GridSpec, slowness: &[f64]) -> Result<(), EikonalError> {
    let ok_h = |h: f64| h.is_finite() && h > 0.0;
    if spec.nx < 2
        || spec.nz < 2
        || !ok_h(spec.dx)
        || !ok_h(spec.dz)
        || !spec.x0.is_finite()
        || !spec.z0.is_finite()
        // the solver numbers its records (the grid plus a ring of 2) with u32
        || (spec.nx.checked_add(4))
            .zip(spec.nz.checked_add(4))
            .and_then(|(a, b)| a.checked_mul(b))
            .is_none_or(|n| n >= u32::MAX as usize)
    {
        return Err(EikonalError::BadGrid {
            nx: spec.nx,
            nz: spec.nz,
            dx: spec.dx,
            dz: spec.dz,
        });
    }
    if slowness.len() != spec.len() {
        return Err(EikonalError::SlownessLength {
            got: slowness.len(),
            expected: spec.len(),
            nx: spec.nx,
            nz: spec.nz,
        });
    }
    let mut ground = 0usize;
    for (k, &s) in slowness.iter().enumerate() {
        if is_air_value(s) {
            continue;
        }
        if !(s.is_finite() && s > 0.0) {
            let (i, j) = (k % spec.nx, k / spec.nx);
            return Err(EikonalError::BadSlowness {
                i,
                j,
                x: spec.x(i),
                z: spec.z(j),
                value: s,
            });
        }
        ground += 1;
    }
    if ground == 0 {
        return Err(EikonalError::AllAir);
    }
    Ok(())
}

/// True for the air markers `+inf` and `NaN`.
#[inline]
pub fn is_air_value(s: f64) -> bool {
    s.is_nan() || s == f64::INFINITY
}

/// Checks that a source or receiver is inside the grid and not in the air (see the
/// module notes for the tolerance). `slowness` must have passed [`validate`].
pub fn check_point(
    spec: &GridSpec,
    slowness: &[f64],
    p: Point,
    role: Role,
) -> Result<(), EikonalError> {
    if !(p.x.is_finite() && p.z.is_finite()) {
        return Err(EikonalError::BadPoint {
            role,
            x: p.x,
            z: p.z,
        });
    }
    if !spec.contains(p.x, p.z) {
        return Err(EikonalError::OutsideGrid {
            role,
            x: p.x,
            z: p.z,
            x_min: spec.x0,
            x_max: spec.x_max(),
            z_min: spec.z0,
            z_max: spec.z_max(),
        });
    }
    if !interp::has_node_near(spec, p.x, p.z, |k| slowness[k] < f64::INFINITY) {
        return Err(EikonalError::InAir {
            role,
            x: p.x,
            z: p.z,
            diag: spec.dx.hypot(spec.dz),
        });
    }
    Ok(())
}

/// Solves for the first-arrival times of one source over the whole grid.
pub fn solve(
    spec: &GridSpec,
    slowness: &[f64],
    source: Point,
    opts: &FmmOptions,
) -> Result<TimeField, EikonalError> {
    validate(spec, slowness)?;
    check_point(spec, slowness, source, Role::Source)?;
    let mut ws = fmm::Workspace::new(spec);
    let mut field = TimeField::empty(*spec);
    ws.solve(&mut field, slowness, source, opts);
    Ok(field)
}

fn check_batch(
    spec: &GridSpec,
    slowness: &[f64],
    sources: &[Point],
    receivers: &[Vec<Point>],
) -> Result<(), EikonalError> {
    validate(spec, slowness)?;
    if sources.len() != receivers.len() {
        return Err(EikonalError::ShotCount {
            sources: sources.len(),
            lists: receivers.len(),
        });
    }
    for (shot, (s, recs)) in sources.iter().zip(receivers).enumerate() {
        let wrap = |e| EikonalError::InShot {
            shot,
            error: Box::new(e),
        };
        check_point(spec, slowness, *s, Role::Source).map_err(wrap)?;
        for r in recs {
            check_point(spec, slowness, *r, Role::Receiver).map_err(wrap)?;
        }
    }
    Ok(())
}

/// Solves every shot in parallel and calls `per_receiver` with the shot's field for each
/// of its receivers: the one loop behind [`solve_many`] and [`solve_many_rays`], open to
/// callers that want something else of each field (rays that may fail, coverage, ...).
///
/// `receivers[k]` are the receivers of `sources[k]`; the result has the same shape.
/// Every input is checked before any work starts. Each rayon thread builds one
/// workspace and one field (`O(nx·nz)` memory) and reuses them from shot to shot.
pub fn map_shots<T: Send>(
    spec: &GridSpec,
    slowness: &[f64],
    sources: &[Point],
    receivers: &[Vec<Point>],
    opts: &FmmOptions,
    per_receiver: impl Fn(&TimeField, Point) -> T + Sync,
) -> Result<Vec<Vec<T>>, EikonalError> {
    check_batch(spec, slowness, sources, receivers)?;
    // one piece of work per thread, so each builds its workspace once
    let per_thread = sources
        .len()
        .div_ceil(rayon::current_num_threads().max(1))
        .max(1);
    Ok(sources
        .par_iter()
        .zip(receivers.par_iter())
        .with_min_len(per_thread)
        .map_init(
            || (fmm::Workspace::new(spec), TimeField::empty(*spec)),
            |(ws, field), (src, recs)| {
                ws.solve(field, slowness, *src, opts);
                recs.iter().map(|r| per_receiver(field, *r)).collect()
            },
        )
        .collect())
}

/// Collects per-receiver results, naming the shot of the first failure.
fn per_shot_results<T>(
    all: Vec<Vec<Result<T, EikonalError>>>,
) -> Result<Vec<Vec<T>>, EikonalError> {
    all.into_iter()
        .enumerate()
        .map(|(shot, recs)| {
            recs.into_iter()
                .collect::<Result<Vec<T>, _>>()
                .map_err(|e| EikonalError::InShot {
                    shot,
                    error: Box::new(e),
                })
        })
        .collect()
}

/// Travel times of many shots, in parallel (see [`map_shots`]), s.
pub fn solve_many(
    spec: &GridSpec,
    slowness: &[f64],
    sources: &[Point],
    receivers: &[Vec<Point>],
    opts: &FmmOptions,
) -> Result<Vec<Vec<f64>>, EikonalError> {
    per_shot_results(map_shots(
        spec,
        slowness,
        sources,
        receivers,
        opts,
        |f, r| f.time_at(r),
    )?)
}

/// One receiver's result from [`solve_many_rays`].
#[derive(Debug, Clone, PartialEq)]
pub struct RayTime {
    /// Travel time interpolated from the fast-marching field, s.
    pub time: f64,
    /// The ray from the receiver back to the source.
    pub ray: Ray,
}

/// Travel times and rays of many shots, in parallel (see [`map_shots`]).
///
/// This is what grid tomography needs: `time` is the forward prediction and
/// `ray.weights` the row of the sensitivity matrix `∂T/∂s_k`.
pub fn solve_many_rays(
    spec: &GridSpec,
    slowness: &[f64],
    sources: &[Point],
    receivers: &[Vec<Point>],
    opts: &FmmOptions,
    ray_opts: &RayOptions,
) -> Result<Vec<Vec<RayTime>>, EikonalError> {
    ray_opts.check()?;
    per_shot_results(map_shots(
        spec,
        slowness,
        sources,
        receivers,
        opts,
        |f, r| {
            Ok(RayTime {
                time: f.time_at(r)?,
                ray: trace_ray(f, r, ray_opts)?,
            })
        },
    )?)
}

/// The two points closest together, as `(a, b, distance / max(dx, dz))`: when the
/// distance is below about one cell the grid cannot tell the two apart, and the caller
/// should refine the grid or merge the stations. `None` for fewer than two points.
pub fn closest_pair_in_cells(spec: &GridSpec, points: &[Point]) -> Option<(usize, usize, f64)> {
    if points.len() < 2 {
        return None;
    }
    let mut order: Vec<usize> = (0..points.len()).collect();
    order.sort_by(|&a, &b| points[a].x.total_cmp(&points[b].x));
    let mut best = (0, 0, f64::INFINITY);
    for (n, &a) in order.iter().enumerate() {
        for &b in &order[n + 1..] {
            if points[b].x - points[a].x >= best.2 {
                break;
            }
            let d = points[a].dist(&points[b]);
            if d < best.2 {
                best = (a.min(b), a.max(b), d);
            }
        }
    }
    Some((best.0, best.1, best.2 / spec.dx.max(spec.dz)))
}
