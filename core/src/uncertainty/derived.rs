//! First-order (Jacobian) propagation of the covariance of `vec(G)` to every quantity
//! derived from the gradient: [`propagate2`], [`propagate3`].
//!
//! ## Method
//! For a quantity `q = f(G)` the first-order variance is `var q = J C Jᵀ` with
//! `J = ∂q/∂vec(G)` and `C` the `D²×D²` covariance of `vec(G)` taken row by row
//! (`G[0][0], G[0][1], …`, the layout of [`crate::estimate::FitStats::cov_gradient`])
//! (general law of propagation of variances, Ghilani & Wolf, *Adjustment Computations*,
//! ch. 6). Linear quantities (strain components, rotation, volumetric strain) are exact;
//! principal values, angles and maximum shear are first-order and good while their
//! standard deviation is small against the distances between principal values.
//!
//! ## Conventions
//! Standard deviations (`sd_*`) of strain are dimensionless (strain, not microstrain);
//! of angles and rotations, radians. Tensor shear `exy` and engineering shear
//! `gxy = 2·exy` each have their own field (`sd_gxy = 2·sd_exy`).
//!
//! ## Principal values and directions
//! - 2D: with `c = (exx+eyy)/2`, `d = (exx−eyy)/2` and the deviatoric radius
//!   `R = √(d² + exy²)`: `e1,2 = c ± R`, maximum tensor shear `R`, engineering `2R`,
//!   `θ1 = ½·atan2(exy, d)`, so `dR = (d·dd + exy·dexy)/R` and
//!   `dθ1 = (d·dexy − exy·dd)/(2R²)`.
//! - 3D: for distinct principal values `dλ_k = n_kᵀ dε n_k`, so `∂λ_k/∂G_ij = n_k,i n_k,j`;
//!   maximum tensor shear `(e1−e3)/2`. A direction tilts toward `n_l` by
//!   `n_lᵀ dε n_k /(λ_k − λ_l)`; `sd_direction[k]` is the root of the summed variances of
//!   the two tilts (radians, the RMS angle by which `n_k` moves).
//! - Values that coincide within [`IsotropyTest::degenerate_tol`] are not differentiable
//!   one by one: their standard deviations are `None`.
//!
//! ## Near isotropy
//! The principal direction is not meaningful when the deviatoric radius is small against
//! its own standard deviation. The 2D direction is flagged when `R < k·sd(R)`; in 3D
//! each gap `e1−e2`, `e2−e3` is flagged when it is below `k` times its standard deviation,
//! and a direction is flagged when a gap next to its value is. A flagged direction gets
//! no standard deviation, and a field says why. Default `k = 2`: the common-practice
//! "two-sigma" screen — a value below twice its standard deviation is not told apart from
//! zero at roughly the 95 % level (normal quantiles: 1.96 two-sided, and `k = 2` is the
//! 97.7 % one-sided point). Near `R = 0` the first-order `sd(R)` is itself rough (the
//! distribution of `R̂` is then far from normal), so this is a screen, not a formal test.

// Small fixed-size linear algebra reads most plainly with explicit indices.
#![allow(clippy::needless_range_loop)]

use nalgebra::{DMatrix, Matrix2, Matrix3, Vector3};
use serde::Serialize;

use super::covariance::check_covariance;
use crate::error::{CoreError, Result};
use crate::kinematics::eigen::sym_spectral3;

/// Default [`IsotropyTest::k`]: the common-practice two-sigma screen (module docs).
pub const DEFAULT_ISOTROPY_K: f64 = 2.0;

/// Default [`IsotropyTest::degenerate_tol`], the same as
/// [`crate::kinematics::KinematicsOptions::degenerate_tol`].
pub const DEFAULT_DEGENERATE_TOL: f64 = 1e-10;

/// When a principal direction counts as not meaningful.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct IsotropyTest {
    /// Multiple of the standard deviation (dimensionless, finite, > 0): a deviatoric
    /// radius (2D) or a principal gap (3D) below `k·sd` flags the direction. Default 2.
    pub k: f64,
    /// Absolute tolerance (strain, ≥ 0) under which two principal values coincide; their
    /// one-by-one standard deviations are then `None`. Default `1e-10`.
    pub degenerate_tol: f64,
}

impl Default for IsotropyTest {
    fn default() -> Self {
        Self {
            k: DEFAULT_ISOTROPY_K,
            degenerate_tol: DEFAULT_DEGENERATE_TOL,
        }
    }
}

impl IsotropyTest {
    /// Checks the options.
    ///
    /// # Errors
    /// [`CoreError::InvalidParameter`] naming `k` (finite, > 0) or `degenerate_tol`
    /// (finite, ≥ 0).
    pub fn validate(&self) -> Result<()> {
        if !(self.k.is_finite() && self.k > 0.0) {
            return Err(CoreError::InvalidParameter {
                name: "k",
                reason: format!("must be finite and > 0, got {}", self.k),
            });
        }
        if !(self.degenerate_tol.is_finite() && self.degenerate_tol >= 0.0) {
            return Err(CoreError::InvalidParameter {
                name: "degenerate_tol",
                reason: format!("must be finite and >= 0, got {}", self.degenerate_tol),
            });
        }
        Ok(())
    }
}

/// Standard deviations of everything derived from a 2D gradient (first order).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Uncertainty2 {
    /// sd of the normal strain `exx`.
    pub sd_exx: f64,
    /// sd of the normal strain `eyy`.
    pub sd_eyy: f64,
    /// sd of the tensor shear strain `exy`.
    pub sd_exy: f64,
    /// sd of the engineering shear strain `gxy = 2·exy` (radians).
    pub sd_gxy: f64,
    /// Covariance of `(exx, eyy, exy)` (tensor shear), row-major `[row][column]`.
    pub cov_strain: [[f64; 3]; 3],
    /// sd of the rotation `ω = (G[1][0] − G[0][1])/2`, radians.
    pub sd_rotation: f64,
    /// sd of the volumetric (areal) strain `exx + eyy`.
    pub sd_volumetric: f64,
    /// Deviatoric radius `R = √(((exx−eyy)/2)² + exy²)` (= maximum tensor shear).
    pub deviatoric_radius: f64,
    /// sd of `R`; `None` when `e1 = e2` within `degenerate_tol` (not differentiable).
    pub sd_deviatoric_radius: Option<f64>,
    /// sd of the major principal strain `e1`; `None` when `e1 = e2`.
    pub sd_e1: Option<f64>,
    /// sd of the minor principal strain `e2`; `None` when `e1 = e2`.
    pub sd_e2: Option<f64>,
    /// sd of the maximum in-plane tensor shear `(e1−e2)/2`; `None` when `e1 = e2`.
    pub sd_max_shear_tensor: Option<f64>,
    /// sd of the maximum in-plane engineering shear `e1−e2` (radians); `None` when `e1 = e2`.
    pub sd_max_shear_engineering: Option<f64>,
    /// The `k` of the isotropy screen that was applied.
    pub isotropy_k: f64,
    /// True when `R < k·sd(R)` (or `e1 = e2`): the principal direction is not meaningful.
    pub near_isotropic: bool,
    /// sd of the principal angle `θ1`, radians; `None` when `near_isotropic`.
    pub sd_theta1: Option<f64>,
    /// Why `sd_theta1` is withheld, with the numbers; `None` when it is given.
    pub theta1_withheld: Option<String>,
}

/// Standard deviations of everything derived from a 3D gradient (first order).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Uncertainty3 {
    /// sd of `exx`.
    pub sd_exx: f64,
    /// sd of `eyy`.
    pub sd_eyy: f64,
    /// sd of `ezz`.
    pub sd_ezz: f64,
    /// sd of the tensor shear `exy`.
    pub sd_exy: f64,
    /// sd of the tensor shear `eyz`.
    pub sd_eyz: f64,
    /// sd of the tensor shear `exz`.
    pub sd_exz: f64,
    /// sd of the engineering shear `gxy = 2·exy` (radians).
    pub sd_gxy: f64,
    /// sd of the engineering shear `gyz = 2·eyz` (radians).
    pub sd_gyz: f64,
    /// sd of the engineering shear `gxz = 2·exz` (radians).
    pub sd_gxz: f64,
    /// Covariance of `(exx, eyy, ezz, exy, eyz, exz)` (tensor shears), row-major.
    pub cov_strain: [[f64; 6]; 6],
    /// sd of the rotation vector `w = curl(u)/2` components, radians.
    pub sd_rotation_vector: [f64; 3],
    /// Covariance of the rotation vector, rad², row-major.
    pub cov_rotation_vector: [[f64; 3]; 3],
    /// sd of the volumetric strain `tr ε`.
    pub sd_volumetric: f64,
    /// sd of the principal strains `[e1, e2, e3]` (descending); `None` for a value that
    /// coincides with a neighbour within `degenerate_tol`.
    pub sd_principal: [Option<f64>; 3],
    /// Principal gaps `[e1−e2, e2−e3]`, both ≥ 0.
    pub gaps: [f64; 2],
    /// sd of the gaps; `None` when the gap itself is within `degenerate_tol`. Next to a
    /// coinciding pair, the gap is taken to the mean of the pair (differentiable).
    pub sd_gaps: [Option<f64>; 2],
    /// True for a gap below `k·sd` (or within `degenerate_tol`).
    pub gap_flagged: [bool; 2],
    /// sd of the maximum tensor shear `(e1−e3)/2`; `None` unless all values are distinct.
    pub sd_max_shear_tensor: Option<f64>,
    /// sd of the maximum engineering shear `e1−e3` (radians); `None` unless all distinct.
    pub sd_max_shear_engineering: Option<f64>,
    /// The `k` of the isotropy screen that was applied.
    pub isotropy_k: f64,
    /// RMS angular sd of each principal direction, radians; `None` when flagged.
    pub sd_direction: [Option<f64>; 3],
    /// Why a direction's sd is withheld, with the numbers; `None` when it is given.
    pub direction_withheld: [Option<String>; 3],
}

/// First-order standard deviations of the quantities derived from a 2D gradient `g`
/// (dimensionless) with `cov` the 4×4 covariance of `vec(G)` (row-major).
///
/// # Errors
/// [`CoreError::NonFinite`] (id `gradient`) for a non-finite entry of `g`;
/// [`CoreError::InvalidCovariance`] (`cov_gradient`) for a wrong size, non-finite,
/// non-symmetric or indefinite `cov`; [`CoreError::InvalidParameter`] for bad options.
pub fn propagate2(
    g: &Matrix2<f64>,
    cov: &DMatrix<f64>,
    opts: &IsotropyTest,
) -> Result<Uncertainty2> {
    opts.validate()?;
    check_inputs(g.iter(), cov, 2)?;
    let (exx, eyy) = (g[(0, 0)], g[(1, 1)]);
    let exy = 0.5 * (g[(0, 1)] + g[(1, 0)]);
    let d = 0.5 * (exx - eyy);
    let r = d.hypot(exy);
    // Rows: exx, eyy, exy, ω, vol (linear).
    let mut rows: Vec<[f64; 4]> = vec![
        [1.0, 0.0, 0.0, 0.0],
        [0.0, 0.0, 0.0, 1.0],
        [0.0, 0.5, 0.5, 0.0],
        [0.0, -0.5, 0.5, 0.0],
        [1.0, 0.0, 0.0, 1.0],
    ];
    let dc = [0.5, 0.0, 0.0, 0.5];
    let dd = [0.5, 0.0, 0.0, -0.5];
    let dexy = [0.0, 0.5, 0.5, 0.0];
    let degenerate = 2.0 * r <= opts.degenerate_tol || r == 0.0;
    if !degenerate {
        let dr: [f64; 4] = std::array::from_fn(|k| (d * dd[k] + exy * dexy[k]) / r);
        let dth: [f64; 4] = std::array::from_fn(|k| (d * dexy[k] - exy * dd[k]) / (2.0 * r * r));
        rows.push(dr);
        rows.push(dth);
        rows.push(std::array::from_fn(|k| dc[k] + dr[k]));
        rows.push(std::array::from_fn(|k| dc[k] - dr[k]));
    }
    let c = jcjt(&rows, cov);
    let sd = |i: usize| c[(i, i)].max(0.0).sqrt();
    let cov_strain = std::array::from_fn(|i| std::array::from_fn(|j| c[(i, j)]));
    let (sd_r, sd_th, sd_e1, sd_e2) = if degenerate {
        (None, None, None, None)
    } else {
        (Some(sd(5)), Some(sd(6)), Some(sd(7)), Some(sd(8)))
    };
    let (near_isotropic, theta1_withheld) = match sd_r {
        None => (
            true,
            Some(format!(
                "principal strains coincide (e1 − e2 = {:.3e} ≤ degenerate_tol {:.3e}): every direction is principal",
                2.0 * r,
                opts.degenerate_tol
            )),
        ),
        Some(s) if r < opts.k * s => (
            true,
            Some(format!(
                "deviatoric radius R = {r:.3e} is below k·sd(R) = {} × {s:.3e}: the principal direction is not distinguished from noise",
                opts.k
            )),
        ),
        Some(_) => (false, None),
    };
    Ok(Uncertainty2 {
        sd_exx: sd(0),
        sd_eyy: sd(1),
        sd_exy: sd(2),
        sd_gxy: 2.0 * sd(2),
        cov_strain,
        sd_rotation: sd(3),
        sd_volumetric: sd(4),
        deviatoric_radius: r,
        sd_deviatoric_radius: sd_r,
        sd_e1,
        sd_e2,
        sd_max_shear_tensor: sd_r,
        sd_max_shear_engineering: sd_r.map(|s| 2.0 * s),
        isotropy_k: opts.k,
        near_isotropic,
        sd_theta1: if near_isotropic { None } else { sd_th },
        theta1_withheld,
    })
}

/// First-order standard deviations of the quantities derived from a 3D gradient `g`
/// (dimensionless) with `cov` the 9×9 covariance of `vec(G)` (row-major).
///
/// # Errors
/// As [`propagate2`], plus [`CoreError::EigenNoConvergence`] from the bounded solver.
pub fn propagate3(
    g: &Matrix3<f64>,
    cov: &DMatrix<f64>,
    opts: &IsotropyTest,
) -> Result<Uncertainty3> {
    opts.validate()?;
    check_inputs(g.iter(), cov, 3)?;
    let idx = |i: usize, j: usize| i * 3 + j;
    let unit = |pairs: &[(usize, usize, f64)]| {
        let mut r = [0.0; 9];
        for &(i, j, v) in pairs {
            r[idx(i, j)] += v;
        }
        r
    };
    // Linear rows: exx, eyy, ezz, exy, eyz, exz, w0, w1, w2, vol.
    let mut rows: Vec<[f64; 9]> = vec![
        unit(&[(0, 0, 1.0)]),
        unit(&[(1, 1, 1.0)]),
        unit(&[(2, 2, 1.0)]),
        unit(&[(0, 1, 0.5), (1, 0, 0.5)]),
        unit(&[(1, 2, 0.5), (2, 1, 0.5)]),
        unit(&[(0, 2, 0.5), (2, 0, 0.5)]),
        unit(&[(2, 1, 0.5), (1, 2, -0.5)]),
        unit(&[(0, 2, 0.5), (2, 0, -0.5)]),
        unit(&[(1, 0, 0.5), (0, 1, -0.5)]),
        unit(&[(0, 0, 1.0), (1, 1, 1.0), (2, 2, 1.0)]),
    ];
    let eps = (g + g.transpose()) * 0.5;
    let (values, q) = sym_spectral3(&eps)?;
    let n: [Vector3<f64>; 3] = std::array::from_fn(|k| q.column(k).into_owned());
    let proj = |k: usize| -> [f64; 9] { std::array::from_fn(|m| n[k][m / 3] * n[k][m % 3]) };
    let p: [[f64; 9]; 3] = std::array::from_fn(proj);
    let ident = unit(&[(0, 0, 1.0), (1, 1, 1.0), (2, 2, 1.0)]);
    let gaps = [
        (values[0] - values[1]).max(0.0),
        (values[1] - values[2]).max(0.0),
    ];
    let tol = opts.degenerate_tol;
    let deg = [gaps[0] <= tol, gaps[1] <= tol];
    // Principal-value rows 10, 11, 12; gap rows 13, 14; max shear row 15.
    for k in 0..3 {
        rows.push(p[k]);
    }
    let sub = |a: &[f64; 9], b: &[f64; 9]| -> [f64; 9] { std::array::from_fn(|m| a[m] - b[m]) };
    // Mean of a coinciding pair (differentiable): (tr ε − λ_simple)/2.
    let pair_mean = |k: usize| -> [f64; 9] { std::array::from_fn(|m| 0.5 * (ident[m] - p[k][m])) };
    let gap_row = [
        if deg[1] {
            sub(&p[0], &pair_mean(0))
        } else {
            sub(&p[0], &p[1])
        },
        if deg[0] {
            sub(&pair_mean(2), &p[2])
        } else {
            sub(&p[1], &p[2])
        },
    ];
    rows.push(gap_row[0]);
    rows.push(gap_row[1]);
    rows.push(std::array::from_fn(|m| 0.5 * (p[0][m] - p[2][m])));
    // Tilt rows (n_lᵀ dε n_k), for k < l: rows 16 (0,1), 17 (0,2), 18 (1,2).
    let tilt = |k: usize, l: usize| -> [f64; 9] {
        std::array::from_fn(|m| {
            let (i, j) = (m / 3, m % 3);
            0.5 * (n[l][i] * n[k][j] + n[k][i] * n[l][j])
        })
    };
    rows.push(tilt(0, 1));
    rows.push(tilt(0, 2));
    rows.push(tilt(1, 2));
    let c = jcjt(&rows, cov);
    let sd = |i: usize| c[(i, i)].max(0.0).sqrt();
    let cov_strain = std::array::from_fn(|i| std::array::from_fn(|j| c[(i, j)]));
    let cov_rotation_vector = std::array::from_fn(|i| std::array::from_fn(|j| c[(6 + i, 6 + j)]));
    let simple = [!deg[0], !deg[0] && !deg[1], !deg[1]];
    let sd_principal = std::array::from_fn(|k| simple[k].then(|| sd(10 + k)));
    let sd_gaps: [Option<f64>; 2] = std::array::from_fn(|k| (!deg[k]).then(|| sd(13 + k)));
    let mut gap_flagged = [false; 2];
    let mut gap_reason: [Option<String>; 2] = [None, None];
    let names = ["e1 − e2", "e2 − e3"];
    for k in 0..2 {
        match sd_gaps[k] {
            None => {
                gap_flagged[k] = true;
                gap_reason[k] = Some(format!(
                    "{} = {:.3e} ≤ degenerate_tol {tol:.3e}: the values coincide",
                    names[k], gaps[k]
                ));
            }
            Some(s) if gaps[k] < opts.k * s => {
                gap_flagged[k] = true;
                gap_reason[k] = Some(format!(
                    "{} = {:.3e} is below k·sd = {} × {s:.3e}: not distinguished from noise",
                    names[k], gaps[k], opts.k
                ));
            }
            Some(_) => {}
        }
    }
    let all_distinct = !deg[0] && !deg[1];
    let sd_max = all_distinct.then(|| sd(15));
    // Tilt variance of direction k toward l: var(n_lᵀ dε n_k)/(λ_k − λ_l)².
    let tilt_row = |k: usize, l: usize| match (k.min(l), k.max(l)) {
        (0, 1) => 16,
        (0, 2) => 17,
        _ => 18,
    };
    let mut sd_direction = [None; 3];
    let mut direction_withheld: [Option<String>; 3] = [None, None, None];
    for k in 0..3 {
        let reasons: Vec<&String> = match k {
            0 => gap_reason[0].iter().collect(),
            1 => gap_reason.iter().flatten().collect(),
            _ => gap_reason[1].iter().collect(),
        };
        if reasons.is_empty() {
            let var: f64 = (0..3)
                .filter(|&l| l != k)
                .map(|l| {
                    let dl = values[k] - values[l];
                    c[(tilt_row(k, l), tilt_row(k, l))].max(0.0) / (dl * dl)
                })
                .sum();
            sd_direction[k] = Some(var.sqrt());
        } else {
            direction_withheld[k] = Some(
                reasons
                    .iter()
                    .map(|s| s.as_str())
                    .collect::<Vec<_>>()
                    .join("; "),
            );
        }
    }
    Ok(Uncertainty3 {
        sd_exx: sd(0),
        sd_eyy: sd(1),
        sd_ezz: sd(2),
        sd_exy: sd(3),
        sd_eyz: sd(4),
        sd_exz: sd(5),
        sd_gxy: 2.0 * sd(3),
        sd_gyz: 2.0 * sd(4),
        sd_gxz: 2.0 * sd(5),
        cov_strain,
        sd_rotation_vector: [sd(6), sd(7), sd(8)],
        cov_rotation_vector,
        sd_volumetric: sd(9),
        sd_principal,
        gaps,
        sd_gaps,
        gap_flagged,
        sd_max_shear_tensor: sd_max,
        sd_max_shear_engineering: sd_max.map(|s| 2.0 * s),
        isotropy_k: opts.k,
        sd_direction,
        direction_withheld,
    })
}

/// The deformation parameters of a gradient and their covariance: 2D `(exx, eyy, exy)`,
/// 3D `(exx, eyy, ezz, exy, eyz, exz)` (tensor shears), from `cov` of `vec(G)` (row-major).
/// Translation and rotation are not among them.
///
/// # Errors
/// [`CoreError::InvalidParameter`] when `D` is not 2 or 3; as [`propagate2`] for the inputs.
pub fn strain_parameters<const D: usize>(
    g: &nalgebra::SMatrix<f64, D, D>,
    cov: &DMatrix<f64>,
) -> Result<(Vec<f64>, DMatrix<f64>)> {
    check_inputs(g.iter(), cov, D)?;
    let pairs: &[(usize, usize)] = match D {
        2 => &[(0, 0), (1, 1), (0, 1)],
        3 => &[(0, 0), (1, 1), (2, 2), (0, 1), (1, 2), (0, 2)],
        _ => {
            return Err(CoreError::InvalidParameter {
                name: "dimension",
                reason: format!("{D} is not 2 or 3"),
            });
        }
    };
    let n = D * D;
    let mut j = DMatrix::<f64>::zeros(pairs.len(), n);
    let mut e = Vec::with_capacity(pairs.len());
    for (row, &(a, b)) in pairs.iter().enumerate() {
        j[(row, a * D + b)] += 0.5;
        j[(row, b * D + a)] += 0.5;
        e.push(0.5 * (g[(a, b)] + g[(b, a)]));
    }
    let c = &j * cov * j.transpose();
    Ok((e, (&c + c.transpose()) * 0.5))
}

/// `J C Jᵀ` for Jacobian rows of length `N = D²`.
fn jcjt<const N: usize>(rows: &[[f64; N]], cov: &DMatrix<f64>) -> DMatrix<f64> {
    let j = DMatrix::from_fn(rows.len(), N, |r, c| rows[r][c]);
    let out = &j * cov * j.transpose();
    (&out + out.transpose()) * 0.5
}

fn check_inputs<'a>(g: impl Iterator<Item = &'a f64>, cov: &DMatrix<f64>, d: usize) -> Result<()> {
    let mut g = g;
    if g.any(|v| !v.is_finite()) {
        return Err(CoreError::NonFinite {
            id: "gradient".into(),
            field: "G",
        });
    }
    let n = d * d;
    if cov.nrows() != n || cov.ncols() != n {
        return Err(CoreError::InvalidCovariance {
            name: "cov_gradient".into(),
            reason: format!(
                "expected {n}×{n} for vec(G) in {d}D, got {}×{}",
                cov.nrows(),
                cov.ncols()
            ),
        });
    }
    check_covariance("cov_gradient", cov)
}
