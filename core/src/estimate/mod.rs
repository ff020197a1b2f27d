//! Estimating the displacement gradient `G = ∂u/∂x` from measured points.
//!
//! | estimator | module | region |
//! |---|---|---|
//! | Delaunay constant-strain triangles (2D) | [`delaunay`] | triangle |
//! | user-supplied triangles / tetrahedra | [`elements`] | triangle, tetrahedron |
//! | weighted least squares `u = t + G·(x − x̄)` | [`lsq`] | named group |
//! | automatic neighbourhoods (k nearest / radius) | [`neighbourhood`] | point or grid node |
//! | regular grid, finite differences | [`grid`] | grid node |
//! | one homogeneous fit over the whole network | [`network`] | network |
//!
//! Every estimator returns [`GradientEstimate`]s (and, where it screens elements,
//! [`Rejected`] entries that keep their reason). All lengths are metres and `G` is
//! dimensionless.

use nalgebra::{DMatrix, SMatrix};
use serde::Serialize;

pub mod delaunay;
pub mod elements;
pub mod grid;
pub mod lsq;
pub mod neighbourhood;
pub mod network;
pub mod quality;

/// What kind of region one gradient estimate covers.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum RegionKind {
    /// Constant-strain triangle (2D).
    Triangle,
    /// Constant-strain tetrahedron (3D).
    Tetrahedron,
    /// Named group of points, least-squares fit.
    Group,
    /// Automatic neighbourhood around a point or grid node, least-squares fit.
    Neighbourhood,
    /// Node of a regular grid, finite differences.
    GridNode,
    /// The whole network, one homogeneous fit.
    Network,
}

/// Statistics of a weighted least-squares fit `u = t + G·(x − x̄)`.
#[derive(Debug, Clone, PartialEq)]
pub struct FitStats<const D: usize> {
    /// Number of points in the fit (points with negligible distance weight are not
    /// counted: they are not used).
    pub n_points: usize,
    /// Redundancy `r = n·D − D·(D+1)`: the integer count of observations beyond the
    /// unknowns, for the `n` points used.
    pub redundancy: usize,
    /// Effective redundancy `r_eff = E[vᵀPv]/σ₀²`, the number the variance factor divides
    /// by. Equal to `redundancy` without distance weighting; with a distance kernel the
    /// kernel only localises the fit, far points barely influence it, and `r_eff` (not
    /// an integer) accounts for that (see [`lsq`] module docs). 0 when the fit is exact.
    pub effective_redundancy: f64,
    /// True when `r = 0`: the fit is exact and says nothing about precision.
    pub exact: bool,
    /// A-posteriori variance factor `σ̂₀² = vᵀPv / r_eff`, `P` the precision weights
    /// (dimensionless when weights are `1/σ²`; m² with unit weights). `None` when the
    /// fit is exact.
    pub variance_factor: Option<f64>,
    /// Residuals `v = u_observed − u_fitted` per member point, metres, in member order.
    pub residuals: Vec<[f64; D]>,
    /// Covariance of `vec(G)` taken row by row (`G[0][0], G[0][1], …`), `D²×D²`,
    /// dimensionless, scaled by the a-posteriori variance factor when the fit has
    /// redundancy and by the a-priori factor `σ₀² = 1` when it is exact.
    ///
    /// **Exact fit without stated precision** (`exact` and unit weights): the a-priori
    /// factor is then an arbitrary 1 m², so this matrix only shows the geometry's
    /// relative strength, not a precision; do not report standard deviations from it.
    /// With precision weights `1/σ²` and an exact fit it is the propagated a-priori
    /// covariance and meaningful.
    pub cov_gradient: DMatrix<f64>,
}

/// One estimate of the displacement gradient over a region.
#[derive(Debug, Clone, PartialEq)]
pub struct GradientEstimate<const D: usize> {
    /// Element ID, group name, point ID or grid node label (`i,j`), or `network`.
    pub label: String,
    /// What the region is.
    pub kind: RegionKind,
    /// Indices of the points used, into the input [`crate::PointSet`] (or grid cells).
    pub members: Vec<usize>,
    /// Centroid of the region, metres (reference coordinates).
    pub centroid: [f64; D],
    /// Displacement gradient `G[i][j] = ∂u_i/∂x_j`, dimensionless.
    pub gradient: SMatrix<f64, D, D>,
    /// Displacement at the centroid, metres, where the estimator yields one.
    pub translation: Option<[f64; D]>,
    /// Least-squares statistics, for the fitting estimators.
    pub fit: Option<FitStats<D>>,
}

/// A region that was screened out, with its reason. Never silently dropped.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Rejected {
    /// Element ID, group name or point ID.
    pub label: String,
    /// Indices of the points involved, into the input point set.
    pub members: Vec<usize>,
    /// Why the region was rejected, in plain words with the numbers.
    pub reason: String,
}
