//! Automatic neighbourhoods: one least-squares gradient fit ([`super::lsq`]) around every
//! point or every node of a regular grid.
//!
//! The neighbours of a centre are found with a k-d tree (kiddo) over the reference
//! coordinates, either the `k` nearest points or every point within a radius. Distance
//! weighting ([`DistanceWeight`](super::lsq::DistanceWeight)) is relative to the centre.
//!
//! A neighbourhood that cannot be fitted (too few points, collinear or coplanar points,
//! every weight zero) does not stop the run: it becomes a [`Rejected`] entry with the
//! reason and its numbers. Only invalid parameters fail the whole run.
//!
//! Labels: the point ID for [`Centres::AtPoints`]; `"i,j"` (2D) or `"i,j,k"` (3D) grid
//! indices for [`Centres::Grid`], with `i` along x.

use std::num::NonZeroUsize;

use kiddo::{ImmutableKdTree, SquaredEuclidean};

use super::lsq::{FitOptions, Fitter};
use super::{GradientEstimate, RegionKind, Rejected};
use crate::error::{CoreError, Result};
use crate::points::PointSet;

/// Largest number of grid nodes accepted by [`Centres::Grid`] (10⁸). Every node is one
/// fit, so a larger grid would run for hours; a node count beyond it is almost always
/// a mistake in `counts` or `spacing`. Not a published constant: chosen to bound the
/// run time.
pub const MAX_GRID_NODES: usize = 100_000_000;

/// Where neighbourhoods are centred.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Centres<const D: usize> {
    /// One neighbourhood around each point of the set, in input order.
    AtPoints,
    /// One neighbourhood around each node `x = origin + (i·dx, j·dy[, k·dz])` of a regular
    /// grid, visited with `i` fastest, then `j`, then `k`.
    Grid {
        /// Coordinates of node `(0, 0[, 0])`, metres.
        origin: [f64; D],
        /// Node spacing along each axis, metres; positive and finite.
        spacing: [f64; D],
        /// Number of nodes along each axis; at least 1.
        counts: [usize; D],
    },
}

/// Which points make up a neighbourhood.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Selection {
    /// The `k` nearest points to the centre (`k ≥ D+1`); the centre point itself counts
    /// when neighbourhoods are centred at points.
    Nearest {
        /// Number of neighbours.
        k: usize,
    },
    /// Every point within `radius_m` (inclusive) of the centre; neighbourhoods with fewer
    /// than `min_points` are rejected.
    ///
    /// Cost: each neighbourhood holds every point within the radius, so a radius that
    /// covers most of the set makes the run `O(n²)` in time (each of `n` centres fits
    /// `~n` points) although memory stays `O(n)`. Choose the radius from the point
    /// spacing (a few spacings), or use [`Selection::Nearest`] for a bounded cost.
    Radius {
        /// Search radius, metres; positive and finite.
        radius_m: f64,
        /// Smallest accepted number of points (`≥ D+1`).
        min_points: usize,
    },
}

impl Selection {
    /// Check the selection for a `dim`-dimensional fit over a set of `n_points` points
    /// (the same check [`fit_neighbourhoods_with`] makes before its first outcome).
    ///
    /// # Errors
    /// [`CoreError::InvalidParameter`] naming `k`, `radius_m` or `min_points`.
    pub fn validate(&self, dim: usize, n_points: usize) -> Result<()> {
        match *self {
            Selection::Nearest { k } => {
                if k > n_points {
                    return Err(CoreError::InvalidParameter {
                        name: "k",
                        reason: format!("k = {k} exceeds the {n_points} points in the set"),
                    });
                }
                if k < dim + 1 {
                    return Err(CoreError::InvalidParameter {
                        name: "k",
                        reason: format!(
                            "need at least {} neighbours for a {dim}D gradient fit, got {k}",
                            dim + 1
                        ),
                    });
                }
            }
            Selection::Radius {
                radius_m,
                min_points,
            } => {
                if !(radius_m.is_finite() && radius_m > 0.0) {
                    return Err(CoreError::InvalidParameter {
                        name: "radius_m",
                        reason: format!(
                            "must be a positive finite length in metres, got {radius_m}"
                        ),
                    });
                }
                if min_points < dim + 1 {
                    return Err(CoreError::InvalidParameter {
                        name: "min_points",
                        reason: format!(
                            "need at least {} points for a {dim}D gradient fit, got {min_points}",
                            dim + 1
                        ),
                    });
                }
            }
        }
        Ok(())
    }
}

impl<const D: usize> Centres<D> {
    /// Check grid parameters: finite origin, positive finite spacing, ≥ 1 node per axis,
    /// at most [`MAX_GRID_NODES`] nodes.
    ///
    /// # Errors
    /// [`CoreError::InvalidParameter`] naming `origin`, `spacing` or `counts`.
    pub fn validate(&self) -> Result<()> {
        if let Centres::Grid {
            origin,
            spacing,
            counts,
        } = self
        {
            if origin.iter().any(|v| !v.is_finite()) {
                return Err(CoreError::InvalidParameter {
                    name: "origin",
                    reason: format!("grid origin must be finite, got {origin:?}"),
                });
            }
            if spacing.iter().any(|v| !(v.is_finite() && *v > 0.0)) {
                return Err(CoreError::InvalidParameter {
                    name: "spacing",
                    reason: format!(
                        "grid spacing must be positive and finite on every axis, got {spacing:?}"
                    ),
                });
            }
            if counts.contains(&0) {
                return Err(CoreError::InvalidParameter {
                    name: "counts",
                    reason: format!("grid needs at least one node per axis, got {counts:?}"),
                });
            }
            match counts.iter().try_fold(1usize, |a, &c| a.checked_mul(c)) {
                Some(total) if total <= MAX_GRID_NODES => {}
                _ => {
                    let total: f64 = counts.iter().map(|&c| c as f64).product();
                    return Err(CoreError::InvalidParameter {
                        name: "counts",
                        reason: format!(
                            "grid of {counts:?} = {total:.3e} nodes exceeds the limit of \
                             {MAX_GRID_NODES} nodes"
                        ),
                    });
                }
            }
        }
        Ok(())
    }
}

/// Fit every neighbourhood and hand each result to `sink` as soon as it is ready
/// (`Ok(estimate)` or `Err(rejected)`), in centre order. Memory use stays bounded by the
/// point set and the k-d tree, whatever the number of centres.
///
/// Estimates have kind [`RegionKind::Neighbourhood`]; members are nearest first.
///
/// # Errors
/// `InvalidParameter` for `k < D+1` or `k` above the number of points, a radius that is
/// not positive and finite, `min_points < D+1`, a grid with non-positive spacing, zero
/// nodes, more than [`MAX_GRID_NODES`] nodes or a non-finite origin, bad fit options, or
/// coordinates too large for the spatial index.
pub fn fit_neighbourhoods_with<const D: usize>(
    points: &PointSet<D>,
    centres: &Centres<D>,
    sel: &Selection,
    opts: &FitOptions,
    mut sink: impl FnMut(std::result::Result<GradientEstimate<D>, Rejected>),
) -> Result<()> {
    opts.validate()?;
    sel.validate(D, points.len())?;
    centres.validate()?;

    // The tree holds coordinates relative to the plain centroid: small numbers for
    // survey coordinates, and every value finite.
    let origin = points.centroid();
    let mut local: Vec<[f64; D]> = Vec::with_capacity(points.len());
    for p in points.points() {
        let mut c = [0.0; D];
        for k in 0..D {
            c[k] = p.x[k] - origin[k];
            if !c[k].is_finite() || c[k].abs() >= 1e150 {
                return Err(CoreError::InvalidParameter {
                    name: "coordinates",
                    reason: format!("point `{}`: coordinates too large to index", p.id),
                });
            }
        }
        local.push(c);
    }
    let tree: ImmutableKdTree<f64, D> =
        ImmutableKdTree::new_from_slice(&local).map_err(|e| CoreError::InvalidParameter {
            name: "points",
            reason: format!("cannot build the spatial index: {e}"),
        })?;
    drop(local);

    let mut fitter = Fitter::<D>::new();
    let mut members: Vec<usize> = Vec::new();
    let mut run = |label: String, centre: [f64; D], members: &mut Vec<usize>| {
        let mut q = [0.0; D];
        for k in 0..D {
            q[k] = centre[k] - origin[k];
        }
        members.clear();
        match *sel {
            Selection::Nearest { k } => {
                let k = NonZeroUsize::new(k).unwrap_or(NonZeroUsize::MIN);
                let found = tree
                    .query(&q)
                    .nearest_n::<SquaredEuclidean<f64>>(k)
                    .execute();
                members.extend(found.iter().map(|r| r.item as usize));
            }
            Selection::Radius {
                radius_m,
                min_points,
            } => {
                let found = tree
                    .query(&q)
                    .within::<SquaredEuclidean<f64>>(radius_m * radius_m)
                    .execute();
                members.extend(found.iter().map(|r| r.item as usize));
                if members.len() < min_points {
                    sink(Err(Rejected {
                        reason: format!(
                            "neighbourhood `{label}`: {} points within {radius_m} m, need at least {min_points}",
                            members.len()
                        ),
                        label,
                        members: members.clone(),
                    }));
                    return;
                }
            }
        }
        match fitter.fit(
            points,
            members,
            &label,
            RegionKind::Neighbourhood,
            Some(centre),
            opts,
        ) {
            Ok(out) => sink(Ok(out.estimate)),
            Err(e) => sink(Err(Rejected {
                label,
                members: members.clone(),
                reason: e.to_string(),
            })),
        }
    };

    match *centres {
        Centres::AtPoints => {
            for p in points.points() {
                run(p.id.clone(), p.x, &mut members);
            }
        }
        Centres::Grid {
            origin: g0,
            spacing,
            counts,
        } => {
            let total: usize = counts.iter().product();
            let mut idx = [0usize; D];
            for _ in 0..total {
                let mut c = [0.0; D];
                for k in 0..D {
                    c[k] = g0[k] + idx[k] as f64 * spacing[k];
                }
                let label = idx
                    .iter()
                    .map(|v| v.to_string())
                    .collect::<Vec<_>>()
                    .join(",");
                run(label, c, &mut members);
                // Advance the node index, i fastest.
                for k in 0..D {
                    idx[k] += 1;
                    if idx[k] < counts[k] {
                        break;
                    }
                    idx[k] = 0;
                }
            }
        }
    }
    Ok(())
}

/// Fit every neighbourhood (see [`fit_neighbourhoods_with`]) and collect the estimates
/// and the rejected neighbourhoods, each in centre order.
///
/// # Errors
/// As [`fit_neighbourhoods_with`].
pub fn fit_neighbourhoods<const D: usize>(
    points: &PointSet<D>,
    centres: &Centres<D>,
    sel: &Selection,
    opts: &FitOptions,
) -> Result<(Vec<GradientEstimate<D>>, Vec<Rejected>)> {
    let mut good = Vec::new();
    let mut bad = Vec::new();
    fit_neighbourhoods_with(points, centres, sel, opts, |r| match r {
        Ok(e) => good.push(e),
        Err(r) => bad.push(r),
    })?;
    Ok((good, bad))
}
