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
