//! The fast-marching core: factored eikonal, first/second-order upwind stencils.

use super::interp;
use super::{EikonalError, FmmOptions, Order, Point};
use crate::model::GridSpec;

const FAR: u8 = 0;
const TRIAL: u8 = 1;
const KNOWN: u8 = 2;
const AIR: u8 = 3;
/// Initialised analytically around the source: waits in the heap, never recomputed.
const FIXED: u8 = 4;
/// A ghost record outside the grid: never queued, never upwind, not air.
const EDGE: u8 = 5;
/// Depth of the ring of [`EDGE`] records around the grid in the [`Workspace`]: the
/// stencil reads up to two nodes away along each axis without testing for the edge.
const PAD: usize = 2;

/// First-arrival times of one source on the grid.
///
/// Holds `T` and the factor `τ = T/T0` at every node (`+inf` at air nodes and at ground
/// the wave cannot reach), and the source with its slowness `s_src` for `T0`.
#[derive(Debug, Clone, PartialEq)]
pub struct TimeField {
    spec: GridSpec,
    source: Point,
    s_src: f64,
    time: Vec<f64>,
    tau: Vec<f64>,
}

impl TimeField {
    /// A field with no values yet, to be filled by [`Workspace::solve`] (which writes
    /// every node once, so nothing is written here).
    pub(crate) fn empty(spec: GridSpec) -> TimeField {
        TimeField {
            spec,
            source: Point::new(spec.x0, spec.z0),
            s_src: 0.0,
            time: Vec::with_capacity(spec.len()),
            tau: Vec::with_capacity(spec.len()),
        }
    }

    /// The grid.
    pub fn spec(&self) -> &GridSpec {
        &self.spec
    }
    /// The source position.
    pub fn source(&self) -> Point {
        self.source
    }
    /// Slowness at the source (bilinear from the ground nodes around it), s/m.
    pub fn source_slowness(&self) -> f64 {
        self.s_src
    }
    /// Node times, s (index `j·nx + i`; `+inf` at air and unreachable nodes).
    pub fn times(&self) -> &[f64] {
        &self.time
    }
    /// Node factors `τ = T/T0` (`1` at a source node).
    pub fn tau(&self) -> &[f64] {
        &self.tau
    }
    /// Takes the node times.
    pub fn into_times(self) -> Vec<f64> {
        self.time
    }

    /// `T0 = s_src·r` and its gradient at `(x, z)`.
    #[inline]
    fn t0(&self, x: f64, z: f64) -> (f64, f64, f64) {
        let (rx, rz) = (x - self.source.x, z - self.source.z);
        let r = (rx * rx + rz * rz).sqrt();
        if r > 0.0 {
            (self.s_src * r, self.s_src * rx / r, self.s_src * rz / r)
        } else {
            (0.0, 0.0, 0.0)
        }
    }

    fn sample_tau(&self, p: Point) -> Result<(f64, f64, f64), EikonalError> {
        interp::sample(&self.spec, p.x, p.z, |k| {
            let t = self.tau[k];
            (t < f64::INFINITY).then_some(t)
        })
        .ok_or(EikonalError::Unreachable {
            x: p.x,
            z: p.z,
            sx: self.source.x,
            sz: self.source.z,
        })
    }

    /// Travel time at any point of the grid, s: `T0(p)·τ(p)` with `τ` interpolated
    /// from the reached nodes around `p` (module notes).
    pub fn time_at(&self, p: Point) -> Result<f64, EikonalError> {
        let (tau, _, _) = self.sample_tau(p)?;
        Ok(self.t0(p.x, p.z).0 * tau)
    }

    /// Gradient `(∂T/∂x, ∂T/∂z)` at any point, s/m: `τ·∇T0 + T0·∇τ`, with `∇T0`
    /// exact and `∇τ` from the same interpolant as [`TimeField::time_at`].
    pub fn gradient_at(&self, p: Point) -> Result<(f64, f64), EikonalError> {
        let (tau, tx, tz) = self.sample_tau(p)?;
        let (t0, gx, gz) = self.t0(p.x, p.z);
        Ok((tau * gx + t0 * tx, tau * gz + t0 * tz))
    }
}

/// Not in the heap (`Workspace::pos`).
const NOT_QUEUED: u32 = u32::MAX;

/// An indexed 4-ary min-heap of `(time, node)`: each node is in it at most once and its
/// key is changed in place (`Node::pos` is its slot), so a node is popped
/// exactly once. Four children of 16 bytes share one cache line, and the tree is half
/// as deep as a binary heap's (Johnson 1975, Inf. Process. Lett. 4, "Priority queues
/// with update and finding minimum spanning trees": d-ary heaps).
#[derive(Debug, Default)]
struct MinHeap {
    v: Vec<(f64, u32)>,
}

impl MinHeap {
    /// Moves `(t, k)` up from slot `n` to its place.
    #[inline(always)]
    fn sift_up(&mut self, nodes: &mut [Node], mut n: usize, t: f64, k: u32) {
        while n > 0 {
            let p = (n - 1) / 4;
            let e = self.v[p];
            if e.0 <= t {
                break;
            }
            self.v[n] = e;
            nodes[e.1 as usize].pos = n as u32;
            n = p;
        }
        self.v[n] = (t, k);
        nodes[k as usize].pos = n as u32;
    }

    /// Moves `(t, k)` down from slot `n` to its place.
    #[inline(always)]
    fn sift_down(&mut self, nodes: &mut [Node], mut n: usize, t: f64, k: u32) {
        let len = self.v.len();
        loop {
            let c0 = 4 * n + 1;
            if c0 >= len {
                break;
            }
            let (mut c, mut m) = (c0, self.v[c0].0);
            if c0 + 3 < len {
                // All four children: pairwise minima, no data-dependent branches.
                let (t1, t2, t3) = (self.v[c0 + 1].0, self.v[c0 + 2].0, self.v[c0 + 3].0);
                let (ca, ma) = if t1 < m { (c0 + 1, t1) } else { (c0, m) };
                let (cb, mb) = if t3 < t2 { (c0 + 3, t3) } else { (c0 + 2, t2) };
                (c, m) = if mb < ma { (cb, mb) } else { (ca, ma) };
            } else {
                for cc in c0 + 1..len {
                    let tc = self.v[cc].0;
                    if tc < m {
                        (c, m) = (cc, tc);
                    }
                }
            }
            if m >= t {
                break;
            }
            let e = self.v[c];
            self.v[n] = e;
            nodes[e.1 as usize].pos = n as u32;
            n = c;
        }
        self.v[n] = (t, k);
        nodes[k as usize].pos = n as u32;
    }

    /// Inserts node `k` with key `t`, or changes its key when it is queued already.
    #[inline(always)]
    fn set(&mut self, nodes: &mut [Node], t: f64, k: u32) {
        let n = nodes[k as usize].pos;
        if n == NOT_QUEUED {
            self.v.push((t, k));
            self.sift_up(nodes, self.v.len() - 1, t, k);
        } else {
            let n = n as usize;
            if t < self.v[n].0 {
                self.sift_up(nodes, n, t, k);
            } else {
                self.sift_down(nodes, n, t, k);
            }
        }
    }

    /// Removes the node with the smallest key.
    #[inline(always)]
    fn pop(&mut self, nodes: &mut [Node]) -> Option<u32> {
        let top = self.v.first()?.1;
        let last = self.v.pop()?;
        nodes[top as usize].pos = NOT_QUEUED;
        if !self.v.is_empty() {
            self.sift_down(nodes, 0, last.0, last.1);
        }
        Some(top)
    }
}

/// One axis of the upwind stencil at a node: `∂T/∂a ≈ A·τ + B`, with `σ = +1` when the
/// upwind neighbour is on the low side.
#[derive(Clone, Copy)]
struct Axis {
    sigma: f64,
    a1: f64,
    b1: f64,
    a2: f64,
    b2: f64,
}

/// Reusable buffers of one solver thread: `O(nx·nz)`.
#[derive(Debug)]
pub(crate) struct Workspace {
    /// Everything the march reads and writes at a node, in one record (copied into
    /// the [`TimeField`] at the end).
    nodes: Vec<Node>,
    heap: MinHeap,
}

/// The march's data at one node: `T`, `τ`, slowness, heap slot and state side by side,
/// so that reading a neighbour or updating a node touches one cache line (32 bytes,
/// aligned: two records per line, none straddling two lines).
#[derive(Debug, Clone, Copy)]
#[repr(C, align(32))]
struct Node {
    time: f64,
    tau: f64,
    /// Slowness, s/m (`+inf` or NaN at air).
    s: f64,
    /// Heap slot when queued, [`NOT_QUEUED`] otherwise (for every node between
    /// solves: the march runs until the heap is empty).
    pos: u32,
    st: u8,
}

/// What the stencil needs about the grid and the source.
#[derive(Clone, Copy)]
struct Ctx {
    /// Row stride of the padded records, `nx + 2·PAD`.
    nxp: usize,
    x0: f64,
    z0: f64,
    dx: f64,
    dz: f64,
    idx: f64,
    idz: f64,
    sx: f64,
    sz: f64,
    s_src: f64,
    second: bool,
}

impl Ctx {
    /// `T0 = s_src·r` and its gradient at node `(i, j)`.
    #[inline(always)]
    fn t0(&self, i: usize, j: usize) -> (f64, f64, f64) {
        let rx = self.x0 + i as f64 * self.dx - self.sx;
        let rz = self.z0 + j as f64 * self.dz - self.sz;
        let r = (rx * rx + rz * rz).sqrt();
        if r > 0.0 {
            (self.s_src * r, self.s_src * rx / r, self.s_src * rz / r)
        } else {
            (0.0, 0.0, 0.0)
        }
    }
}

impl Workspace {
    pub(crate) fn new(spec: &GridSpec) -> Workspace {
        Workspace {
            // filled by `solve`, which writes every record once
            nodes: Vec::with_capacity((spec.nx + 2 * PAD) * (spec.nz + 2 * PAD)),
            heap: MinHeap {
                v: Vec::with_capacity(4 * (spec.nx + spec.nz)),
            },
        }
    }

    /// Solves into `field`. The inputs must have been checked ([`super::validate`],
    /// [`super::check_point`]).
    pub(crate) fn solve(
        &mut self,
        field: &mut TimeField,
        slowness: &[f64],
        source: Point,
        opts: &FmmOptions,
    ) {
        let spec = field.spec;
        let (nx, nz) = (spec.nx, spec.nz);
        assert_eq!(slowness.len(), spec.len());
        // The grid's records, row by row, inside a ring of PAD ghost records: node
        // (i, j) is record (j + PAD)·nxp + i + PAD.
        let nxp = nx + 2 * PAD;
        let rec = |i: usize, j: usize| (j + PAD) * nxp + i + PAD;
        let ghost = Node {
            time: f64::INFINITY,
            tau: f64::INFINITY,
            s: f64::INFINITY,
            pos: NOT_QUEUED,
            st: EDGE,
        };
        self.nodes.clear();
        self.nodes.resize(PAD * nxp, ghost);
        for row in slowness.chunks_exact(nx) {
            self.nodes.extend([ghost; PAD]);
            self.nodes.extend(row.iter().map(|&s| Node {
                time: f64::INFINITY,
                tau: f64::INFINITY,
                s,
                pos: NOT_QUEUED,
                st: if s < f64::INFINITY { FAR } else { AIR },
            }));
            self.nodes.extend([ghost; PAD]);
        }
        self.nodes.resize((nz + 2 * PAD) * nxp, ghost);
        self.heap.v.clear();
        field.source = source;
        let ground = |k: usize| slowness[k] < f64::INFINITY;
        let s_at = |x: f64, z: f64| {
            interp::sample(&spec, x, z, |k| ground(k).then_some(slowness[k])).map(|v| v.0)
        };
        // Checked by check_point: a ground node lies within a cell diagonal.
        let s_src = s_at(source.x, source.z).unwrap_or(f64::NAN).max(1e-300);
        field.s_src = s_src;

        // Analytic start: nodes of the cell(s) touching the source get the straight-ray
        // time by Simpson's rule on the bilinear slowness.
        let fx = (source.x - spec.x0) / spec.dx;
        let fz = (source.z - spec.z0) / spec.dz;
        let eps = 1e-9;
        let i_lo = ((fx - 1.0 - eps).ceil().max(0.0)) as usize;
        let i_hi = ((fx + 1.0 + eps).floor() as usize).min(nx - 1);
        let j_lo = ((fz - 1.0 - eps).ceil().max(0.0)) as usize;
        let j_hi = ((fz + 1.0 + eps).floor() as usize).min(nz - 1);
        for j in j_lo..=j_hi {
            for i in i_lo..=i_hi {
                let k = spec.idx(i, j);
                if !ground(k) {
                    continue;
                }
                let (x, z) = (spec.x(i), spec.z(j));
                let r = (x - source.x).hypot(z - source.z);
                let (t, tau) = if r <= 1e-12 * spec.dx {
                    (0.0, 1.0)
                } else {
                    let sm = s_at(0.5 * (x + source.x), 0.5 * (z + source.z)).unwrap_or(s_src);
                    let t = r * (s_src + 4.0 * sm + slowness[k]) / 6.0;
                    (t, t / (s_src * r))
                };
                let r = rec(i, j);
                let nd = &mut self.nodes[r];
                (nd.time, nd.tau, nd.st) = (t, tau, FIXED);
                self.heap.set(&mut self.nodes, t, r as u32);
            }
        }

        let c = Ctx {
            nxp,
            x0: spec.x0,
            z0: spec.z0,
            dx: spec.dx,
            dz: spec.dz,
            idx: 1.0 / spec.dx,
            idz: 1.0 / spec.dz,
            sx: source.x,
            sz: source.z,
            s_src,
            second: opts.order == Order::Second,
        };
        let (nodes, heap) = (&mut self.nodes[..], &mut self.heap);
        // fits: `validate` caps the padded record count at u32::MAX
        let nxp32 = nxp as u32;
        while let Some(k32) = heap.pop(nodes) {
            let k = k32 as usize;
            // The next node to be accepted is most likely the heap's new top (this
            // node's neighbours rarely undercut it): start loading the rows of its
            // stencil while this node is worked on.
            if let Some(&(_, next)) = heap.v.first() {
                let next = next as usize;
                for r in [next - 2 * nxp, next - nxp, next, next + nxp, next + 2 * nxp] {
                    prefetch(&nodes[r]);
                }
            }
            nodes[k].st = KNOWN;
            // Only grid nodes are queued, so i, j are real and every record read by
            // the stencil (up to two away along an axis) lies inside the ring.
            let (i, j) = ((k32 % nxp32) as usize - PAD, (k32 / nxp32) as usize - PAD);
            let mut visit = |n: usize, ni: usize, nj: usize| {
                if nodes[n].st <= TRIAL {
                    if let Some((tau, tn)) = update(&c, nodes, n, ni, nj) {
                        // The value from the latest set of accepted neighbours replaces
                        // the old one (it may be larger: a missing axis read as
                        // `∂τ/∂a = 0` is only a guess).
                        if tn != nodes[n].time {
                            let nd = &mut nodes[n];
                            (nd.time, nd.tau, nd.st) = (tn, tau, TRIAL);
                            heap.set(nodes, tn, n as u32);
                        }
                    }
                }
            };
            // ghost neighbours fail the state test (the index wraps but is not used)
            visit(k - 1, i.wrapping_sub(1), j);
            visit(k + 1, i + 1, j);
            visit(k - nxp, i, j.wrapping_sub(1));
            visit(k + nxp, i, j + 1);
        }
        debug_assert!(heap.v.is_empty());
        field.time.clear();
        field.tau.clear();
        for row in self.nodes.chunks_exact(nxp).skip(PAD).take(nz) {
            let row = &row[PAD..PAD + nx];
            field.time.extend(row.iter().map(|v| v.time));
            field.tau.extend(row.iter().map(|v| v.tau));
        }
    }
}

/// Asks the processor to start loading the cache line of `r` (a hint: no effect on
/// results).
#[inline(always)]
fn prefetch(r: &Node) {
    #[cfg(target_arch = "x86_64")]
    // SAFETY: a prefetch reads nothing into the program and cannot fault; the pointer
    // comes from a live reference.
    unsafe {
        std::arch::x86_64::_mm_prefetch::<{ std::arch::x86_64::_MM_HINT_T0 }>(
            (r as *const Node).cast::<i8>(),
        );
    }
    #[cfg(not(target_arch = "x86_64"))]
    let _ = r;
}

/// Upwind data along one axis at record `k` (neighbours `stride` apart, inverse
/// spacing `ih`, exact `p = ∂T0/∂a`): the lower of the accepted neighbours, and the
/// second-order stencil where the node beyond it is accepted and not later.
#[inline(always)]
fn axis(nd: &[Node], k: usize, stride: usize, ih: f64, p: f64, t0: f64) -> Option<Axis> {
    let (lo, hi) = (&nd[k - stride], &nd[k + stride]);
    let (lo_known, hi_known) = (lo.st == KNOWN, hi.st == KNOWN);
    if !(lo_known || hi_known) {
        return None;
    }
    // the low side when it alone is accepted, or both are and it is not later
    let low = lo_known && (!hi_known || lo.time <= hi.time);
    let (n1, sigma, n2) = if low {
        (lo, 1.0, &nd[k - 2 * stride])
    } else {
        (hi, -1.0, &nd[k + 2 * stride])
    };
    let (time1, tau1) = (n1.time, n1.tau);
    // D τ = σ(α τ − β);  ∂T/∂a = (p + σ T0 α) τ − σ T0 β
    let a1 = p + sigma * t0 * ih;
    let b1 = -sigma * t0 * tau1 * ih;
    let (a2, b2) = if n2.st == KNOWN && n2.time <= time1 {
        let tau2 = n2.tau;
        (
            p + sigma * t0 * 1.5 * ih,
            -sigma * t0 * (2.0 * tau1 - 0.5 * tau2) * ih,
        )
    } else {
        (a1, b1)
    };
    Some(Axis {
        sigma,
        a1,
        b1,
        a2,
        b2,
    })
}

/// Smallest causal `τ` from the given stencil coefficients, `+inf` when none.
#[inline(always)]
fn best_tau(ax: Option<(f64, f64, f64)>, az: Option<(f64, f64, f64)>, s: f64) -> f64 {
    let mut best = f64::INFINITY;
    if let (Some((sx, axx, bx)), Some((sz, azz, bz))) = (ax, az) {
        let a = axx * axx + azz * azz;
        let b = 2.0 * (axx * bx + azz * bz);
        let c = bx * bx + bz * bz - s * s;
        let disc = b * b - 4.0 * a * c;
        if disc >= 0.0 && a > 0.0 {
            let tau = (-b + disc.sqrt()) / (2.0 * a);
            if tau > 0.0 && sx * (axx * tau + bx) >= 0.0 && sz * (azz * tau + bz) >= 0.0 {
                best = tau;
            }
        }
    }
    for (sg, a, b) in [ax, az].into_iter().flatten() {
        if a * sg > 0.0 {
            let tau = (sg * s - b) / a;
            if tau > 0.0 && tau < best {
                best = tau;
            }
        }
    }
    best
}

/// New `(τ, T)` at record `n`, node `(i, j)`, from its accepted neighbours.
#[inline(always)]
fn update(c: &Ctx, nd: &[Node], n: usize, i: usize, j: usize) -> Option<(f64, f64)> {
    let s = nd[n].s;
    let (t0, px, pz) = c.t0(i, j);
    let mut ax = axis(nd, n, 1, c.idx, px, t0);
    let mut az = axis(nd, n, c.nxp, c.idz, pz, t0);
    if ax.is_none() && az.is_none() {
        return None;
    }
    // An axis with no accepted neighbour means the node is a minimum of T along that
    // axis. The usual reading `∂T/∂a = 0` is wrong by O(h/r) in the row (column)
    // nearest to a source off the nodes, whose minimum lies between two nodes; there
    // `∂τ/∂a = 0`, i.e. `∂T/∂a = τ·∂T0/∂a`, is exact for a constant velocity and
    // differs from `0` by at most `s·h/(2r)` anywhere else.
    let virt = |p: f64| Axis {
        sigma: 0.0,
        a1: p,
        b1: 0.0,
        a2: p,
        b2: 0.0,
    };
    // The same reading serves a node whose neighbour on the source side is air (a
    // surface sloping away from the source): the wave runs along the surface there, and
    // `∂T/∂a = 0` would make it too slow by O(1) on a staircase of surface nodes.
    let air_toward = |p: f64, stride: usize| {
        if p < 0.0 {
            nd[n + stride].st == AIR
        } else if p > 0.0 {
            nd[n - stride].st == AIR
        } else {
            false
        }
    };
    if ax.is_none()
        && ((c.x0 + i as f64 * c.dx - c.sx).abs() <= 0.5 * c.dx * (1.0 + 1e-9) || air_toward(px, 1))
    {
        ax = Some(virt(px));
    }
    if az.is_none()
        && ((c.z0 + j as f64 * c.dz - c.sz).abs() <= 0.5 * c.dz * (1.0 + 1e-9)
            || air_toward(pz, c.nxp))
    {
        az = Some(virt(pz));
    }
    let mut tau = f64::INFINITY;
    if c.second {
        tau = best_tau(
            ax.map(|a| (a.sigma, a.a2, a.b2)),
            az.map(|a| (a.sigma, a.a2, a.b2)),
            s,
        );
    }
    if !tau.is_finite() {
        tau = best_tau(
            ax.map(|a| (a.sigma, a.a1, a.b1)),
            az.map(|a| (a.sigma, a.a1, a.b1)),
            s,
        );
    }
    tau.is_finite().then_some((tau, tau * t0))
}
