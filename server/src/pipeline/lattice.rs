//! Recognise 2D points that lie on a regular grid, for the finite-difference method.
//!
//! Points from image correlation or a gridded survey come as a list; the grid method
//! needs them as cells. The spacing along each axis is the smallest gap between
//! distinct coordinates; every point must sit on a node `origin + (i·dx, j·dy)` to a
//! relative tolerance of [`NODE_TOL`] of the spacing. Nodes without a point are
//! missing cells, which the grid estimator allows.

use kinema_core::PointSet;
use kinema_core::estimate::grid::GridField2;

/// Largest offset of a point from its grid node, as a fraction of the spacing.
pub const NODE_TOL: f64 = 1e-6;

/// Largest number of grid nodes per point accepted (a sparse scatter is not a grid).
pub const MAX_NODES_PER_POINT: usize = 4;

/// A grid built from points, with the point behind every occupied cell.
#[derive(Debug, Clone)]
pub struct Lattice {
    /// The field for [`kinema_core::estimate::grid::grid_gradients`] (metres).
    pub field: GridField2,
    /// For every cell (row-major, `j·nx + i`), the index of its point in the set.
    pub cell_point: Vec<Option<usize>>,
}

fn axis_spacing(values: &mut [f64], axis: &str) -> Result<(f64, f64), String> {
    values.sort_by(f64::total_cmp);
    let lo = values[0];
    let hi = values[values.len() - 1];
    let span = hi - lo;
    let tol = 1e-9 * span.max(f64::MIN_POSITIVE);
    let step = values
        .windows(2)
        .map(|w| w[1] - w[0])
        .filter(|&d| d > tol)
        .fold(f64::INFINITY, f64::min);
    if !step.is_finite() {
        return Err(format!(
            "all points share one {axis} coordinate: a grid needs at least two columns and two rows"
        ));
    }
    Ok((lo, step))
}

/// Put the points on a grid, or say why they are not on one.
pub fn lattice(points: &PointSet<2>) -> Result<Lattice, String> {
    let pts = points.points();
    let mut xs: Vec<f64> = pts.iter().map(|p| p.x[0]).collect();
    let (x0, dx) = axis_spacing(&mut xs, "x")?;
    let mut ys = xs;
    ys.clear();
    ys.extend(pts.iter().map(|p| p.x[1]));
    let (y0, dy) = axis_spacing(&mut ys, "y")?;
    drop(ys);

    let node = |v: f64, o: f64, h: f64, id: &str, axis: &str| -> Result<usize, String> {
        let f = (v - o) / h;
        let r = f.round();
        if (f - r).abs() > NODE_TOL || r < 0.0 || r > u32::MAX as f64 {
            return Err(format!(
                "point `{id}` is not on the grid: its {axis} is {:.6} spacings from the first \
                 column (spacing {h} m)",
                f
            ));
        }
        Ok(r as usize)
    };
    let mut ij = Vec::with_capacity(pts.len());
    let (mut nx, mut ny) = (0usize, 0usize);
    for p in pts {
        let i = node(p.x[0], x0, dx, &p.id, "x")?;
        let j = node(p.x[1], y0, dy, &p.id, "y")?;
        nx = nx.max(i + 1);
        ny = ny.max(j + 1);
        ij.push((i, j));
    }
    let cells = nx
        .checked_mul(ny)
        .filter(|&c| c <= MAX_NODES_PER_POINT.saturating_mul(pts.len()))
        .ok_or_else(|| {
            format!(
                "the points span a {nx} x {ny} grid at spacing {dx} m x {dy} m, more than \
                 {MAX_NODES_PER_POINT} nodes per point: they are scattered, not gridded \
                 (use --method delaunay or neighbourhood)"
            )
        })?;
    let mut u = vec![None; cells];
    let mut cell_point = vec![None; cells];
    for (k, (&(i, j), p)) in ij.iter().zip(pts).enumerate() {
        let c = j * nx + i;
        if let Some(other) = cell_point[c] {
            let other: usize = other;
            return Err(format!(
                "points `{}` and `{}` fall on the same grid node {i},{j}",
                pts[other].id, p.id
            ));
        }
        cell_point[c] = Some(k);
        u[c] = Some(p.u);
    }
    Ok(Lattice {
        field: GridField2 {
            origin: [x0, y0],
            spacing: [dx, dy],
            nx,
            ny,
            u,
        },
        cell_point,
    })
}

#[cfg(test)]
mod tests {
    use kinema_core::Point;

    use super::*;

    fn set(coords: &[(f64, f64)]) -> PointSet<2> {
        PointSet::new(
            coords
                .iter()
                .enumerate()
                .map(|(k, &(x, y))| Point::new(format!("P{k}"), [x, y], [0.0, 0.0]))
                .collect(),
        )
        .expect("valid points")
    }

    #[test]
    fn finds_spacing_origin_and_missing_cells() {
        // 3 x 2 grid at 0.5 m x 2 m from (100, 200), with node (1, 1) missing.
        let s = set(&[
            (100.0, 200.0),
            (100.5, 200.0),
            (101.0, 200.0),
            (100.0, 202.0),
            (101.0, 202.0),
        ]);
        let l = lattice(&s).expect("a grid");
        assert_eq!((l.field.nx, l.field.ny), (3, 2));
        assert_eq!(l.field.spacing, [0.5, 2.0]);
        assert_eq!(l.field.origin, [100.0, 200.0]);
        assert_eq!(
            l.cell_point,
            vec![Some(0), Some(1), Some(2), Some(3), None, Some(4)]
        );
    }

    #[test]
    fn rejects_off_grid_duplicate_node_and_scatter() {
        let e = lattice(&set(&[(0.0, 0.0), (1.0, 0.0), (0.0, 1.0), (0.4, 1.0)]))
            .expect_err("x = 1.0 is 2.5 spacings of 0.4 m");
        assert!(e.contains("not on the grid"), "{e}");
        let e = lattice(&set(&[(0.0, 0.0), (0.0, 1.0)])).expect_err("one column");
        assert!(e.contains("one x coordinate"), "{e}");
        let e = lattice(&set(&[(0.0, 0.0), (1000.0, 0.0), (1.0, 1.0), (0.0, 1.0)]))
            .expect_err("scatter");
        assert!(e.contains("scattered"), "{e}");
    }
}
