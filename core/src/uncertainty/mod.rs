//! Precision of every estimate: point and displacement covariances, the covariance of
//! the gradient `G` (least-squares fits carry it in [`crate::estimate::FitStats`];
//! elements get it here by propagation through the shape functions), and its first-order
//! propagation to every derived quantity.
//!
//! | module | holds |
//! |---|---|
//! | [`covariance`] | per-axis σ → covariance, two-epoch displacement covariance, checks |
//! | [`element`] | covariance of `vec(G)` of a constant-strain triangle / tetrahedron |
//! | [`derived`] | standard deviations of strain, rotation, principal values, angle, shear |
//!
//! Units: displacement covariances m²; `vec(G)` covariances dimensionless; standard
//! deviations of strain dimensionless, of angles radians. `vec(G)` is always taken row
//! by row (`G[0][0], G[0][1], …`).
//!
//! The standard deviations describe the precision of a kinematic estimate from the
//! stated measurement precision; they are not a structural assessment.

pub mod covariance;
pub mod derived;
pub mod element;

pub use covariance::{
    check_covariance, check_covariance_s, covariance_from_sigma, displacement_covariance,
};
pub use derived::{
    IsotropyTest, Uncertainty2, Uncertainty3, propagate2, propagate3, strain_parameters,
};
pub use element::{element_gradient_covariance, shape_gradients};
