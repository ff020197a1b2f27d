//! One homogeneous fit over the whole network, split into rigid translation, rigid
//! rotation and deformation.
//!
//! The fit is the weighted least-squares fit of [`super::lsq`] over every point,
//! `u = t + G·(x − x̄)`. Its gradient splits into
//!
//! - rigid rotation `W = (G − Gᵀ)/2`: in 2D the angle `ω = (G[1][0] − G[0][1])/2`
//!   (radians, counter-clockwise positive); in 3D the vector `w = curl(u)/2 =
//!   ((G[2][1] − G[1][2])/2, (G[0][2] − G[2][0])/2, (G[1][0] − G[0][1])/2)` (radians,
//!   right-hand rule);
//! - deformation (small strain) `ε = (G + Gᵀ)/2` (dimensionless);
//! - rigid translation `t` (metres), the displacement at the weighted centroid `x̄`.
//!
//! Covariances of these parts follow from `cov(vec G)` by linear propagation
//! `Σ_y = J Σ_G Jᵀ` for `y = J · vec(G)` (the law of propagation of variances, e.g.
//! Ghilani & Wolf, *Adjustment Computations*).
//!
//! A homogeneous fit assumes one strain state for the whole network; the residuals show
//! how far that holds. Results are kinematic estimates, not a structural assessment.

use nalgebra::{DMatrix, SMatrix};

use super::GradientEstimate;
use super::RegionKind;
use super::lsq::{FitOptions, Fitter};
use crate::error::Result;
use crate::points::PointSet;

/// The rigid rotation of the network.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum RigidRotation {
    /// 2D: rotation angle `ω = (G[1][0] − G[0][1])/2`, radians, counter-clockwise positive.
    Plane {
        /// Angle, radians.
        omega_rad: f64,
    },
    /// 3D: rotation vector `w = curl(u)/2`, radians, right-hand rule, components along x, y, z.
    Space {
        /// Vector, radians.
        w_rad: [f64; 3],
    },
}

/// Result of [`fit_network`].
#[derive(Debug, Clone, PartialEq)]
pub struct NetworkFit<const D: usize> {
    /// The fit itself: kind [`RegionKind::Network`], label `network`, every point a member.
    pub estimate: GradientEstimate<D>,
    /// Rigid translation `t`, metres: the fitted displacement at the weighted centroid.
    pub translation: [f64; D],
    /// Variance of each component of `t`, m² (the components are uncorrelated with
    /// per-axis weights), scaled like `cov_gradient`.
    pub var_translation: [f64; D],
    /// Rotation tensor `W = (G − Gᵀ)/2`, dimensionless (radians for small rotations).
    pub rotation_tensor: SMatrix<f64, D, D>,
    /// Rotation angle (2D) or vector (3D), radians.
    pub rotation: RigidRotation,
    /// Covariance of the rotation, rad²: `1×1` (ω) in 2D, `3×3` (w_x, w_y, w_z) in 3D.
    pub cov_rotation: DMatrix<f64>,
    /// Small strain `ε = (G + Gᵀ)/2`, dimensionless; tensor shear `exy` off the diagonal
    /// (engineering shear `gxy = 2·exy`).
    pub strain: SMatrix<f64, D, D>,
    /// Covariance of `vec(ε)`, row-major (`ε[0][0], ε[0][1], …`), `D²×D²`; singular by
    /// the symmetry of ε.
    pub cov_strain: DMatrix<f64>,
}

/// Fit one uniform gradient to every point and split it into translation, rotation and
/// deformation. Distance weighting, if asked for, is relative to the plain centroid.
///
/// # Errors
/// As [`super::lsq::fit_points`], with context `network`.
pub fn fit_network<const D: usize>(
    points: &PointSet<D>,
    opts: &FitOptions,
) -> Result<NetworkFit<D>> {
    opts.validate()?;
    let members: Vec<usize> = (0..points.len()).collect();
    let out =
        Fitter::<D>::new().fit(points, &members, "network", RegionKind::Network, None, opts)?;
    let g = out.estimate.gradient;
    let translation = out.estimate.translation.unwrap_or([0.0; D]);
    let strain = (g + g.transpose()) * 0.5;
    let rotation_tensor = (g - g.transpose()) * 0.5;
    let cov_g = out
        .estimate
        .fit
        .as_ref()
        .map(|f| f.cov_gradient.clone())
        .unwrap_or_else(|| DMatrix::zeros(D * D, D * D));

    let at = |i: usize, j: usize| i * D + j;
    // Rotation: rows of J pick (G[a][b] − G[b][a]) / 2.
    let pairs: &[(usize, usize)] = if D == 2 {
        &[(1, 0)]
    } else {
        &[(2, 1), (0, 2), (1, 0)]
    };
    let mut j_rot = DMatrix::<f64>::zeros(pairs.len(), D * D);
    for (r, &(a, b)) in pairs.iter().enumerate() {
        j_rot[(r, at(a, b))] = 0.5;
        j_rot[(r, at(b, a))] = -0.5;
    }
    let cov_rotation = &j_rot * &cov_g * j_rot.transpose();
    let rotation = if D == 2 {
        RigidRotation::Plane {
            omega_rad: rotation_tensor[(1, 0)],
        }
    } else {
        RigidRotation::Space {
            w_rad: [
                rotation_tensor[(2, 1)],
                rotation_tensor[(0, 2)],
                rotation_tensor[(1, 0)],
            ],
        }
    };

    // Strain: vec(ε) = S vec(G), S = (I + K)/2 with K the commutation matrix.
    let mut s = DMatrix::<f64>::zeros(D * D, D * D);
    for i in 0..D {
        for j in 0..D {
            s[(at(i, j), at(i, j))] += 0.5;
            s[(at(i, j), at(j, i))] += 0.5;
        }
    }
    let cov_strain = &s * &cov_g * s.transpose();

    Ok(NetworkFit {
        estimate: out.estimate,
        translation,
        var_translation: out.var_translation,
        rotation_tensor,
        rotation,
        cov_rotation,
        strain,
        cov_strain,
    })
}
