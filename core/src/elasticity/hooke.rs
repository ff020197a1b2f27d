//! Hooke's law for a linear isotropic elastic material: 3D, plane stress, plane strain.
//!
//! Sources: Timoshenko & Goodier, Theory of Elasticity, 3rd ed., §§5–8 (generalised
//! Hooke's law, plane stress and plane strain) for the relations below.
//! - 3D: `σ = λ·tr(ε)·I + 2μ·ε`, with `λ = Eν/((1+ν)(1−2ν))`, `μ = G = E/(2(1+ν))`;
//!   inverse `ε = ((1+ν)·σ − ν·tr(σ)·I)/E`.
//! - Plane stress (`σzz = σxz = σyz = 0`): `σxx = E/(1−ν²)·(εxx + ν·εyy)`,
//!   `σyy = E/(1−ν²)·(εyy + ν·εxx)`, `σxy = 2G·exy`; out of plane
//!   `εzz = −ν/(1−ν)·(εxx + εyy)`.
//! - Plane strain (`εzz = εxz = εyz = 0`): `σ = λ·(εxx+εyy)·I + 2μ·ε` in plane; out of
//!   plane `σzz = ν·(σxx + σyy)`.
//!
//! Stress in Pa, strain dimensionless, tension positive, tensor shear components.

use nalgebra::Matrix3;
use serde::Serialize;

use super::CAUTION;
use crate::error::{CoreError, Result};

/// Iteration cap of the bounded symmetric eigen-solver.
pub const EIGEN_MAX_ITER: usize = 200;

/// Relative tolerance for the symmetry of an input tensor: `|a_ij − a_ji|` may be at
/// most this fraction of the largest absolute entry.
pub const SYMMETRY_RTOL: f64 = 1.0e-9;

/// Relative tolerance below which two in-plane principal stresses count as equal
/// (Mohr-circle radius at most this fraction of the larger absolute principal value);
/// the principal direction is then not given.
pub const ISOTROPY_RTOL: f64 = 1.0e-9;

/// Elastic constants of a linear isotropic material, validated.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Isotropic {
    e: f64,
    nu: f64,
}

impl Isotropic {
    /// From Young's modulus `e` (Pa, finite, > 0) and Poisson's ratio `nu`
    /// (finite, −1 < ν < 0.5 strictly: ν = 0.5 is incompressible and makes λ infinite).
    ///
    /// Errors: `InvalidParameter { name: "youngs_modulus" | "poisson_ratio" }`.
    pub fn new(e: f64, nu: f64) -> Result<Self> {
        if !(e.is_finite() && e > 0.0) {
            return Err(CoreError::InvalidParameter {
                name: "youngs_modulus",
                reason: format!("{e} Pa is not a finite positive modulus"),
            });
        }
        if !(nu.is_finite() && nu > -1.0 && nu < 0.5) {
            return Err(CoreError::InvalidParameter {
                name: "poisson_ratio",
                reason: format!("{nu} is outside the open interval (−1, 0.5)"),
            });
        }
        Ok(Self { e, nu })
    }

    /// Young's modulus `E`, Pa.
    pub fn youngs_modulus(&self) -> f64 {
        self.e
    }

    /// Poisson's ratio `ν`, dimensionless.
    pub fn poisson_ratio(&self) -> f64 {
        self.nu
    }

    /// First Lamé constant `λ = Eν/((1+ν)(1−2ν))`, Pa.
    pub fn lame_lambda(&self) -> f64 {
        self.e * self.nu / ((1.0 + self.nu) * (1.0 - 2.0 * self.nu))
    }

    /// Shear modulus, the second Lamé constant, `μ = G = E/(2(1+ν))`, Pa.
    pub fn shear_modulus(&self) -> f64 {
        self.e / (2.0 * (1.0 + self.nu))
    }

    /// Bulk modulus `K = E/(3(1−2ν)) = λ + 2μ/3`, Pa.
    pub fn bulk_modulus(&self) -> f64 {
        self.e / (3.0 * (1.0 - 2.0 * self.nu))
    }

    /// 3D stress from a symmetric small-strain tensor `eps` (dimensionless):
    /// `σ = λ·tr(ε)·I + 2μ·ε`, with principal stresses and von Mises stress.
    ///
    /// Errors: `NonFinite { id: "strain", field }`, `InvalidParameter { name: "strain" }`
    /// when not symmetric, `EigenNoConvergence`.
    pub fn stress(&self, eps: &Matrix3<f64>) -> Result<Stress3> {
        check_tensor(eps, "strain")?;
        let eps = symmetric_part(eps);
        let sigma = Matrix3::identity() * (self.lame_lambda() * eps.trace())
            + eps * (2.0 * self.shear_modulus());
        Stress3::from_tensor(sigma)
    }

    /// 3D small strain from a symmetric stress tensor `sigma` (Pa):
    /// `ε = ((1+ν)·σ − ν·tr(σ)·I)/E`.
    ///
    /// Errors: `NonFinite { id: "stress", field }`, `InvalidParameter { name: "stress" }`
    /// when not symmetric.
    pub fn strain(&self, sigma: &Matrix3<f64>) -> Result<Matrix3<f64>> {
        check_tensor(sigma, "stress")?;
        let sigma = symmetric_part(sigma);
        Ok((sigma * (1.0 + self.nu) - Matrix3::identity() * (self.nu * sigma.trace())) / self.e)
    }

    /// Plane stress (`σzz = 0`) from in-plane strains `exx`, `eyy` and tensor shear
    /// `exy`; reports the out-of-plane strain `εzz = −ν/(1−ν)·(εxx + εyy)`.
    ///
    /// Errors: `NonFinite { id: "strain", field }`.
    pub fn plane_stress(&self, exx: f64, eyy: f64, exy: f64) -> Result<PlaneStressResult> {
        check_plane(exx, eyy, exy)?;
        let (e, nu) = (self.e, self.nu);
        let f = e / (1.0 - nu * nu);
        let sxx = f * (exx + nu * eyy);
        let syy = f * (eyy + nu * exx);
        let sxy = 2.0 * self.shear_modulus() * exy;
        let ezz = -nu / (1.0 - nu) * (exx + eyy);
        let (principal, theta_p) = principal_2d(sxx, syy, sxy);
        Ok(PlaneStressResult {
            sxx,
            syy,
            sxy,
            ezz,
            principal,
            theta_p,
            von_mises: von_mises(&Matrix3::new(sxx, sxy, 0.0, sxy, syy, 0.0, 0.0, 0.0, 0.0)),
            caution: CAUTION,
        })
    }

    /// Plane strain (`εzz = 0`) from in-plane strains `exx`, `eyy` and tensor shear
    /// `exy`; reports the out-of-plane stress `σzz = ν·(σxx + σyy)`.
    ///
    /// Errors: `NonFinite { id: "strain", field }`.
    pub fn plane_strain(&self, exx: f64, eyy: f64, exy: f64) -> Result<PlaneStrainResult> {
        check_plane(exx, eyy, exy)?;
        let lambda = self.lame_lambda();
        let mu = self.shear_modulus();
        let tr = exx + eyy;
        let sxx = lambda * tr + 2.0 * mu * exx;
        let syy = lambda * tr + 2.0 * mu * eyy;
        let sxy = 2.0 * mu * exy;
        let szz = self.nu * (sxx + syy);
        let (principal, theta_p) = principal_2d(sxx, syy, sxy);
        Ok(PlaneStrainResult {
            sxx,
            syy,
            sxy,
            szz,
            principal,
            theta_p,
            von_mises: von_mises(&Matrix3::new(sxx, sxy, 0.0, sxy, syy, 0.0, 0.0, 0.0, szz)),
            caution: CAUTION,
        })
    }
}

/// A 3D stress state with its principal values and von Mises stress.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Stress3 {
    /// Stress tensor, Pa (symmetric, tensor shear components).
    pub sigma: Matrix3<f64>,
    /// Principal stresses, Pa, sorted descending `σ1 ≥ σ2 ≥ σ3`.
    pub principal: [f64; 3],
    /// Mean (hydrostatic) stress `tr(σ)/3`, Pa.
    pub mean: f64,
    /// Von Mises equivalent stress, Pa.
    pub von_mises: f64,
    /// [`CAUTION`].
    pub caution: &'static str,
}

impl Stress3 {
    /// Principal values, mean and von Mises stress of a symmetric stress tensor (Pa).
    ///
    /// Errors: `NonFinite { id: "stress", field }`, `InvalidParameter` when not
    /// symmetric, `EigenNoConvergence`.
    pub fn from_tensor(sigma: Matrix3<f64>) -> Result<Self> {
        check_tensor(&sigma, "stress")?;
        let sigma = symmetric_part(&sigma);
        Ok(Self {
            principal: principal_stresses_3d(&sigma)?,
            mean: sigma.trace() / 3.0,
            von_mises: von_mises(&sigma),
            sigma,
            caution: CAUTION,
        })
    }
}

/// Result of a plane-stress computation (`σzz = 0`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PlaneStressResult {
    /// Normal stress along x, Pa.
    pub sxx: f64,
    /// Normal stress along y, Pa.
    pub syy: f64,
    /// Shear stress σxy, Pa.
    pub sxy: f64,
    /// Out-of-plane strain `εzz = −ν/(1−ν)·(εxx + εyy)`, dimensionless.
    pub ezz: f64,
    /// In-plane principal stresses, Pa, sorted descending (the third is σzz = 0).
    pub principal: [f64; 2],
    /// Direction of `principal[0]`, radians CCW from x, `½·atan2(2σxy, σxx − σyy)`;
    /// `None` when the in-plane principal stresses are equal.
    pub theta_p: Option<f64>,
    /// Von Mises stress of the full 3D state (σzz = 0), Pa.
    pub von_mises: f64,
    /// [`CAUTION`].
    pub caution: &'static str,
}

/// Result of a plane-strain computation (`εzz = 0`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PlaneStrainResult {
    /// Normal stress along x, Pa.
    pub sxx: f64,
    /// Normal stress along y, Pa.
    pub syy: f64,
    /// Shear stress σxy, Pa.
    pub sxy: f64,
    /// Out-of-plane stress `σzz = ν·(σxx + σyy)`, Pa.
    pub szz: f64,
    /// In-plane principal stresses, Pa, sorted descending (σzz is the third).
    pub principal: [f64; 2],
    /// Direction of `principal[0]`, radians CCW from x; `None` when equal.
    pub theta_p: Option<f64>,
    /// Von Mises stress of the full 3D state (including σzz), Pa.
    pub von_mises: f64,
    /// [`CAUTION`].
    pub caution: &'static str,
}

/// Principal stresses of a symmetric 3×3 tensor, sorted descending, by nalgebra's
/// bounded symmetric eigen-solver (eigenvalues come unsorted; sorted here).
///
/// Errors: `EigenNoConvergence` when the solver hits [`EIGEN_MAX_ITER`].
pub fn principal_stresses_3d(sigma: &Matrix3<f64>) -> Result<[f64; 3]> {
    let eig = sigma
        .try_symmetric_eigen(f64::EPSILON, EIGEN_MAX_ITER)
        .ok_or(CoreError::EigenNoConvergence {
            max_iter: EIGEN_MAX_ITER,
        })?;
    let mut p = [eig.eigenvalues[0], eig.eigenvalues[1], eig.eigenvalues[2]];
    p.sort_by(|a, b| b.total_cmp(a));
    Ok(p)
}

/// Von Mises equivalent stress of a symmetric tensor (Pa):
/// `sqrt(½[(σxx−σyy)² + (σyy−σzz)² + (σzz−σxx)²] + 3(σxy² + σyz² + σzx²))`.
pub fn von_mises(s: &Matrix3<f64>) -> f64 {
    let d = (s[(0, 0)] - s[(1, 1)]).powi(2)
        + (s[(1, 1)] - s[(2, 2)]).powi(2)
        + (s[(2, 2)] - s[(0, 0)]).powi(2);
    let t = s[(0, 1)].powi(2) + s[(1, 2)].powi(2) + s[(2, 0)].powi(2);
    (0.5 * d + 3.0 * t).sqrt()
}

/// In-plane principal stresses (closed form, Mohr circle) and the direction of the
/// larger one, `None` when they are equal.
fn principal_2d(sxx: f64, syy: f64, sxy: f64) -> ([f64; 2], Option<f64>) {
    let c = 0.5 * (sxx + syy);
    let r = (0.5 * (sxx - syy)).hypot(sxy);
    let p = [c + r, c - r];
    let scale = p[0].abs().max(p[1].abs());
    let theta = if scale == 0.0 || r <= ISOTROPY_RTOL * scale {
        None
    } else {
        Some(0.5 * (2.0 * sxy).atan2(sxx - syy))
    };
    (p, theta)
}

const FIELDS: [[&str; 3]; 3] = [["xx", "xy", "xz"], ["yx", "yy", "yz"], ["zx", "zy", "zz"]];

fn check_tensor(m: &Matrix3<f64>, what: &'static str) -> Result<()> {
    for i in 0..3 {
        for j in 0..3 {
            if !m[(i, j)].is_finite() {
                return Err(CoreError::NonFinite {
                    id: what.to_owned(),
                    field: FIELDS[i][j],
                });
            }
        }
    }
    let scale = m.amax();
    for (i, j) in [(0, 1), (0, 2), (1, 2)] {
        let d = (m[(i, j)] - m[(j, i)]).abs();
        if d > SYMMETRY_RTOL * scale {
            return Err(CoreError::InvalidParameter {
                name: what,
                reason: format!(
                    "tensor is not symmetric: [{i}][{j}] = {} but [{j}][{i}] = {}",
                    m[(i, j)],
                    m[(j, i)]
                ),
            });
        }
    }
    Ok(())
}

fn symmetric_part(m: &Matrix3<f64>) -> Matrix3<f64> {
    (m + m.transpose()) * 0.5
}

fn check_plane(exx: f64, eyy: f64, exy: f64) -> Result<()> {
    for (field, v) in [("exx", exx), ("eyy", eyy), ("exy", exy)] {
        if !v.is_finite() {
            return Err(CoreError::NonFinite {
                id: "strain".to_owned(),
                field,
            });
        }
    }
    Ok(())
}
