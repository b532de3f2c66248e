//! A lattice of cells over a node grid: values at every `stride`-th node, carried to
//! the grid's ground nodes by bilinear weights.
//!
//! Travel time is linear in slowness, so a ray's sensitivity to a lattice value is the
//! sum of its node weights times the interpolation weights (`J·W`,
//! [`crate::linearised::Jacobian::through`]); the solver sees a continuous field
//! rather than blocks. Only lattice nodes that some ground node depends on are kept.

use super::GridSpec;
use crate::survey::Surface;

/// A lattice of every `stride`-th node of a grid, whose values are carried to the
/// grid's ground nodes by bilinear weights: the unknowns of grid tomography (its
/// cells) and the points where the PINN's refinement evaluates its networks on large
/// grids.
#[derive(Debug, Clone, PartialEq)]
pub struct Lattice {
    /// Solver nodes per cell side.
    pub stride: usize,
    /// Lattice columns and rows.
    pub nx: usize,
    /// Lattice rows.
    pub nz: usize,
    /// Position of every unknown, m.
    pub positions: Vec<[f64; 2]>,
    /// Lattice index `b·nx + a` of every unknown.
    pub lattice: Vec<usize>,
    /// Unknown of every lattice index (`usize::MAX`: in the air).
    pub slot: Vec<usize>,
    /// Cells and bilinear weights of every solver node (empty: air).
    pub combination: Vec<Vec<(usize, f64)>>,
    /// Solver-grid index of every ground node.
    pub nodes: Vec<usize>,
    /// The solver grid.
    pub grid: GridSpec,
}

impl Lattice {
    /// The lattice of every `stride`-th node of `grid`, for the nodes below `surface`;
    /// an error when no node is under the ground.
    pub fn new(grid: &GridSpec, surface: &Surface, stride: usize) -> Result<Lattice, String> {
        let r = stride.max(1);
        let nx = (grid.nx - 1).div_ceil(r) + 1;
        let nz = (grid.nz - 1).div_ceil(r) + 1;
        let mut slot = vec![usize::MAX; nx * nz];
        let mut positions = Vec::new();
        let mut lattice = Vec::new();
        let mut combination = vec![Vec::new(); grid.len()];
        let mut nodes = Vec::new();
        let rf = r as f64;
        for j in 0..grid.nz {
            for i in 0..grid.nx {
                if grid.z(j) > surface.elevation(grid.x(i)) + 1e-9 {
                    continue;
                }
                let k = grid.idx(i, j);
                nodes.push(k);
                let (a, b) = (i / r, j / r);
                let (fa, fb) = ((i % r) as f64 / rf, (j % r) as f64 / rf);
                for (da, wa) in [(0, 1.0 - fa), (1, fa)] {
                    for (db, wb) in [(0, 1.0 - fb), (1, fb)] {
                        let w = wa * wb;
                        if w <= 0.0 {
                            continue;
                        }
                        let li = (b + db) * nx + a + da;
                        if slot[li] == usize::MAX {
                            slot[li] = positions.len();
                            positions.push([
                                grid.x0 + ((a + da) * r) as f64 * grid.dx,
                                grid.z0 + ((b + db) * r) as f64 * grid.dz,
                            ]);
                            lattice.push(li);
                        }
                        combination[k].push((slot[li], w));
                    }
                }
            }
        }
        if nodes.is_empty() {
            return Err("no cell lies under the ground surface: check the surface file and the model depth (depth_m)".into());
        }
        Ok(Lattice {
            stride: r,
            nx,
            nz,
            positions,
            lattice,
            slot,
            combination,
            nodes,
            grid: *grid,
        })
    }

    /// Number of unknowns.
    pub fn len(&self) -> usize {
        self.positions.len()
    }

    /// True when there is no unknown.
    pub fn is_empty(&self) -> bool {
        self.positions.is_empty()
    }

    /// Cell side along x and z, m.
    pub fn size(&self) -> (f64, f64) {
        let r = self.stride as f64;
        (r * self.grid.dx, r * self.grid.dz)
    }

    /// Velocity at the solver grid's nodes (`NaN` in the air) from the cells'
    /// slowness: slowness interpolated, then inverted.
    pub fn node_velocity(&self, cell_slowness: &[f64]) -> Vec<f64> {
        let mut v = vec![f64::NAN; self.grid.len()];
        for &k in &self.nodes {
            let s: f64 = self.combination[k]
                .iter()
                .map(|&(c, w)| w * cell_slowness[c])
                .sum();
            v[k] = 1.0 / s;
        }
        v
    }

    /// Pairs of unknowns next to each other on the lattice: `(a, b, along_x)`.
    pub fn neighbours(&self) -> Vec<(usize, usize, bool)> {
        let mut out = Vec::new();
        for (c, &li) in self.lattice.iter().enumerate() {
            let (a, b) = (li % self.nx, li / self.nx);
            if a + 1 < self.nx {
                let n = self.slot[li + 1];
                if n != usize::MAX {
                    out.push((c, n, true));
                }
            }
            if b + 1 < self.nz {
                let n = self.slot[li + self.nx];
                if n != usize::MAX {
                    out.push((c, n, false));
                }
            }
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A field linear in slowness is reproduced exactly at every node: the bilinear
    /// weights of each node add up to one and interpolate linear functions.
    #[test]
    fn nodes_interpolate_the_cells() {
        let grid = GridSpec::covering(0.0, 10.0, -6.0, 0.0, 0.5);
        let surface = Surface::flat(0.0);
        let cells = Lattice::new(&grid, &surface, 3).unwrap();
        let s_of = |p: [f64; 2]| 1e-3 + 2e-5 * p[0] - 3e-5 * p[1];
        let cs: Vec<f64> = cells.positions.iter().map(|&p| s_of(p)).collect();
        let v = cells.node_velocity(&cs);
        for j in 0..grid.nz {
            for i in 0..grid.nx {
                let k = grid.idx(i, j);
                let want = 1.0 / s_of([grid.x(i), grid.z(j)]);
                assert!((v[k] - want).abs() < 1e-9 * want, "node ({i}, {j})");
            }
        }
        assert_eq!(cells.nodes.len(), grid.len());
        // 21 × 13 nodes at stride 3: 8 × 5 lattice nodes, the last past the grid's edge
        assert_eq!((cells.nx, cells.nz), (8, 5));
    }

    #[test]
    fn cells_in_the_air_are_not_unknowns() {
        let grid = GridSpec::covering(0.0, 10.0, -6.0, 3.0, 1.0);
        let cells = Lattice::new(&grid, &Surface::flat(0.0), 2).unwrap();
        // lattice rows at z = −6, −4, −2, 0, 2, 4: the two above the ground are air
        assert!(cells.positions.iter().all(|p| p[1] <= 0.0 + 1e-9));
        assert_eq!(cells.len(), 6 * 4);
        let above = GridSpec::covering(0.0, 10.0, 1.0, 3.0, 1.0);
        assert!(Lattice::new(&above, &Surface::flat(0.0), 2).is_err());
    }
}
