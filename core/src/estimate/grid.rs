//! Displacement gradients on a regular 2D grid by finite differences (for example a
//! field from digital image correlation).
//!
//! For each cell with data, each derivative `∂u/∂x` (along the row) and `∂u/∂y` (along
//! the column) is formed to second order:
//!
//! - central `(f₊₁ − f₋₁) / (2h)` where both neighbours have data;
//! - otherwise one-sided `(−3f₀ + 4f₊₁ − f₊₂) / (2h)` forward, or
//!   `(3f₀ − 4f₋₁ + f₋₂) / (2h)` backward — at the grid edges and next to missing cells.
//!
//! All three are exact for quadratics, with truncation error `O(h²)` (Taylor series; the
//! weights are those of Fornberg, *Generation of finite difference formulas on
//! arbitrarily spaced grids*, Math. Comp. 51, 1988). A node where a derivative cannot be
//! formed to second order (no usable stencil in that line) is [`Rejected`] with the
//! reason. Cells without data produce no estimate (there is nothing measured there).
//!
//! 3D grids are not handled here.

use nalgebra::Matrix2;

use super::{GradientEstimate, RegionKind, Rejected};
use crate::error::{CoreError, Result};

/// A displacement field on a regular 2D grid.
///
/// Cell `(i, j)` sits at `x = origin[0] + i·spacing[0]`, `y = origin[1] + j·spacing[1]`
/// (metres) and holds `u[j·nx + i]` (row-major, `i` along x), the displacement
/// `[ux, uy]` in metres, or `None` where the cell has no data.
#[derive(Debug, Clone, PartialEq)]
pub struct GridField2 {
    /// Coordinates of cell `(0, 0)`, metres.
    pub origin: [f64; 2],
    /// Cell spacing `[dx, dy]`, metres; positive and finite.
    pub spacing: [f64; 2],
    /// Number of cells along x.
    pub nx: usize,
    /// Number of cells along y.
    pub ny: usize,
    /// Displacements, metres, row-major (`index = j·nx + i`); `None` = missing cell.
    pub u: Vec<Option<[f64; 2]>>,
}

impl GridField2 {
    /// Check the grid: at least one cell, `nx·ny = u.len()`, spacing positive and finite,
    /// origin and every displacement finite.
    ///
    /// No separate cap on `nx·ny` is needed: it must equal `u.len()`, so the work of
    /// [`grid_gradients`] is linear in the data the caller already holds.
    ///
    /// # Errors
    /// `InvalidGrid` for size, spacing or origin; `NonFinite { id: "i,j", field: "ux"|"uy" }`
    /// for a NaN or infinite displacement.
    pub fn validate(&self) -> Result<()> {
        if self.nx == 0 || self.ny == 0 {
            return Err(CoreError::InvalidGrid {
                reason: format!("{} × {} cells: need at least one cell", self.nx, self.ny),
            });
        }
        match self.nx.checked_mul(self.ny) {
            Some(n) if n == self.u.len() => {}
            _ => {
                return Err(CoreError::InvalidGrid {
                    reason: format!(
                        "{} × {} cells need {} values, got {}",
                        self.nx,
                        self.ny,
                        self.nx as u128 * self.ny as u128,
                        self.u.len()
                    ),
                });
            }
        }
        for (k, h) in self.spacing.iter().enumerate() {
            if !(h.is_finite() && *h > 0.0) {
                return Err(CoreError::InvalidGrid {
                    reason: format!(
                        "spacing along {} must be positive and finite, got {h} m",
                        ["x", "y"][k]
                    ),
                });
            }
        }
        if self.origin.iter().any(|v| !v.is_finite()) {
            return Err(CoreError::InvalidGrid {
                reason: format!("origin must be finite, got {:?}", self.origin),
            });
        }
        for (idx, cell) in self.u.iter().enumerate() {
            if let Some(v) = cell {
                for (c, field) in ["ux", "uy"].into_iter().enumerate() {
                    if !v[c].is_finite() {
                        return Err(CoreError::NonFinite {
                            id: format!("{},{}", idx % self.nx, idx / self.nx),
                            field,
                        });
                    }
                }
            }
        }
        Ok(())
    }
}

/// Which second-order stencil formed a derivative.
#[derive(Clone, Copy)]
enum Stencil {
    Central,
    Forward,
    Backward,
}

/// Derivative along one grid line at position `p` (line of `len` cells, spacing `h`),
/// with `get(q)` giving the value of cell `q` of that line. Returns the derivative and
/// the stencil used, or `None` when no second-order stencil has data.
fn line_derivative(
    p: usize,
    len: usize,
    h: f64,
    get: impl Fn(usize) -> Option<[f64; 2]>,
) -> Option<([f64; 2], Stencil)> {
    let f0 = get(p)?;
    let at = |q: Option<usize>| q.filter(|&q| q < len).and_then(&get);
    let (m1, p1) = (at(p.checked_sub(1)), at(p.checked_add(1)));
    if let (Some(a), Some(b)) = (m1, p1) {
        return Some(([0, 1].map(|c| (b[c] - a[c]) / (2.0 * h)), Stencil::Central));
    }
    if let (Some(a), Some(b)) = (p1, at(p.checked_add(2))) {
        return Some((
            [0, 1].map(|c| (-3.0 * f0[c] + 4.0 * a[c] - b[c]) / (2.0 * h)),
            Stencil::Forward,
        ));
    }
    if let (Some(a), Some(b)) = (m1, at(p.checked_sub(2))) {
        return Some((
            [0, 1].map(|c| (3.0 * f0[c] - 4.0 * a[c] + b[c]) / (2.0 * h)),
            Stencil::Backward,
        ));
    }
    None
}

/// Cell offsets (along the line) used by a stencil.
fn stencil_offsets(s: Stencil) -> [isize; 2] {
    match s {
        Stencil::Central => [-1, 1],
        Stencil::Forward => [1, 2],
        Stencil::Backward => [-1, -2],
    }
}

/// Gradient at every cell with data, by second-order finite differences.
///
/// Estimates have kind [`RegionKind::GridNode`], label `"i,j"`, centroid at the cell's
/// coordinates, `translation` = the cell's own displacement, no fit statistics, and
/// members = the cell indices of the node and its stencils (sorted). Nodes where a
/// derivative cannot be formed come back as [`Rejected`] (members = the node's index).
///
/// # Errors
/// As [`GridField2::validate`].
pub fn grid_gradients(field: &GridField2) -> Result<(Vec<GradientEstimate<2>>, Vec<Rejected>)> {
    field.validate()?;
    let (nx, ny) = (field.nx, field.ny);
    let [dx, dy] = field.spacing;
    let mut good = Vec::new();
    let mut bad = Vec::new();
    // Cells with data per row (along x) and per column (along y), for the reasons of
    // rejected nodes: counted once, not once per rejected node.
    let mut row_count = vec![0usize; ny];
    let mut col_count = vec![0usize; nx];
    for (idx, cell) in field.u.iter().enumerate() {
        if cell.is_some() {
            row_count[idx / nx] += 1;
            col_count[idx % nx] += 1;
        }
    }
    for (j, &row_n) in row_count.iter().enumerate() {
        for (i, &col_n) in col_count.iter().enumerate() {
            let idx = j * nx + i;
            let Some(u0) = field.u[idx] else { continue };
            let label = format!("{i},{j}");
            let ddx = line_derivative(i, nx, dx, |q| field.u[j * nx + q]);
            let ddy = line_derivative(j, ny, dy, |q| field.u[q * nx + i]);
            let (Some((gx, sx)), Some((gy, sy))) = (ddx, ddy) else {
                let axis = if ddx.is_none() { "x" } else { "y" };
                let (p, len, usable) = if ddx.is_none() {
                    (i, nx, row_n)
                } else {
                    (j, ny, col_n)
                };
                bad.push(Rejected {
                    reason: format!(
                        "grid node `{label}`: ∂u/∂{axis} cannot be formed to second order: \
                         no two cells with data on one side or both sides of position {p} \
                         along {axis} ({usable} of {len} cells in that line have data)"
                    ),
                    label,
                    members: vec![idx],
                });
                continue;
            };
            let mut members = vec![idx];
            for o in stencil_offsets(sx) {
                members.push(j * nx + (i as isize + o) as usize);
            }
            for o in stencil_offsets(sy) {
                members.push((j as isize + o) as usize * nx + i);
            }
            members.sort_unstable();
            good.push(GradientEstimate {
                label,
                kind: RegionKind::GridNode,
                members,
                centroid: [
                    field.origin[0] + i as f64 * dx,
                    field.origin[1] + j as f64 * dy,
                ],
                gradient: Matrix2::new(gx[0], gy[0], gx[1], gy[1]),
                translation: Some(u0),
                fit: None,
            });
        }
    }
    Ok((good, bad))
}
