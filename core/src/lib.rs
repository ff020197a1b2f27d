//! # kinema-core
//!
//! Pure computation for Kinema: from measured displacements at scattered points to
//! displacement gradients, strain tensors and everything derived from them.
//! No I/O, no async; plain Rust values in, plain values or [`CoreError`] out.
//!
//! ## Conventions (the whole crate)
//! - Gradient `G[i][j] = ∂u_i/∂x_j`; small strain `ε = (G+Gᵀ)/2`; rotation `W = (G−Gᵀ)/2`.
//! - Lengths in metres, strain dimensionless (strain, not microstrain), angles in radians,
//!   measured counter-clockwise from +x of the structure's frame.
//! - Shear is always labelled: tensor shear `exy` and engineering shear `gxy = 2·exy`.
//! - Extension positive; rotation counter-clockwise positive (2D), right-hand rule (3D).
//! - Principal values sorted descending; degenerate (equal) values are flagged, never
//!   given an arbitrary direction.
//!
//! Results are kinematic estimates from measured data, not a structural assessment.
#![forbid(unsafe_code)]

pub mod elasticity;
pub mod error;
pub mod estimate;
pub mod geodesy;
pub mod kinematics;
pub mod points;
pub mod rosette;
pub mod significance;
pub mod timeseries;
pub mod uncertainty;

pub use error::{CoreError, Result};
pub use points::{Point, PointSet};
