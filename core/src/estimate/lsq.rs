//! Weighted least-squares fit of a uniform displacement gradient over a group of points.
//!
//! ## Model
//! For the member points `p` the model is
//!
//! ```text
//! u_p = t + G · (x_p − x̄)
//! ```
//!
//! with `G[i][j] = ∂u_i/∂x_j` (dimensionless), `t` the displacement at `x̄` (metres) and
//! `x̄` the *weighted centroid* of the group (metres, see below). Fitting about the centroid
//! rather than the origin keeps the normal equations well conditioned for survey
//! coordinates with large offsets (easting/northing of 10⁵–10⁶ m), and makes `t` the
//! displacement of the group's centre of weight.
//!
//! ## Weights
//! Every point has one weight per displacement axis:
//!
//! ```text
//! w_{p,i} = K_p · π_{p,i}
//! ```
//!
//! - precision weight `π_{p,i} = 1/σ_{p,i}²` (σ in metres, so π in 1/m²) when
//!   [`FitOptions::use_precision`] is set and the members state their precision (all of
//!   them or none: a mixture is an error); otherwise 1 (a full covariance on any member
//!   switches to the coupled solution below, "Full covariances");
//! - kernel (distance) weight `K_p` of the point's distance `d` (metres) from a centre
//!   ([`DistanceWeight`]), divided by the largest kernel weight of the group so that it
//!   lies in `(0, 1]`; 1 when no distance weighting is asked for.
//!
//! The two play different parts. `π` states how precise an observation is; `K` only
//! *localises* the fit around its centre and says nothing about precision. The variance
//! of `u_{p,i}` is `σ₀²/π_{p,i}` whatever `K`, and the statistics below account for that.
//!
//! Points with `K_p < 1e-12 · max K` (for example beyond the radius of
//! [`DistanceWeight::QuadraticDecay`], or far out on the Gaussian tail) are not
//! observations of this fit: they are left out of the fit, the member list, the
//! residuals and the redundancy.
//!
//! The centroid and the moment matrix use one scalar weight per point, `w̄_p = K_p · mean_i
//! π_{p,i}`; it equals the per-axis weight whenever the precision is the same on every axis.
//!
//! ## Solution
//! With diagonal (per-axis) weights the `D` displacement components are independent
//! regressions on the regressors `[1, x − x̄]`, each with its own `(D+1)×(D+1)` normal
//! matrix `N_i = Σ_p w_{p,i} a_p a_pᵀ`, `a_p = [1, (x_p − x̄)/s]` (the coordinates are scaled by
//! the RMS spread `s` of the group so that `N_i` is close to diagonal with entries of one
//! size). Each `N_i` is solved by Cholesky decomposition, followed by one step of iterative
//! refinement on the residuals.
//!
//! Per component `i` write `A` for the `n×(D+1)` matrix of rows `a_pᵀ`, `K`, `P` and
//! `W = K·P` for the diagonal matrices of kernel, precision and total weights. The
//! estimate is `β̂ = (AᵀWA)⁻¹AᵀWu = N⁻¹AᵀWu`, and with `H = A N⁻¹ AᵀW`:
//!
//! - Redundancy `r = n·D − D·(D+1)` for the `n` points used ([`FitStats::redundancy`]).
//! - Residuals `v = u_observed − u_fitted` (metres); `vᵀPv = Σ_{p,i} π_{p,i} v_{p,i}²`
//!   (precision weights only: the kernel is not a precision).
//! - Effective redundancy `r_eff = E[vᵀPv]/σ₀² = Σ_i tr((I−H)ᵀP(I−H)P⁻¹)`
//!   `= Σ_i (n − 2(D+1) + tr(N⁻¹ B N⁻¹ C))` with `B = AᵀK²PA`, `C = AᵀPA`
//!   (`O(n·D²)` per component with diagonal weights). Without distance weighting
//!   (`K = I`) it is exactly `r` ([`FitStats::effective_redundancy`]).
//! - A-posteriori variance factor `σ̂₀² = vᵀPv / r_eff` when `r > 0`, unbiased for `σ₀²`
//!   (for `K = I` the reference variance of a weighted adjustment, Ghilani & Wolf,
//!   *Adjustment Computations*).
//! - Covariance of `β̂` by the sandwich (Huber–White) form of a weighted estimator,
//!   `σ₀² N⁻¹ (AᵀK²PA) N⁻¹`, which reduces to `σ₀² (AᵀPA)⁻¹` for `K = I` (and is then
//!   computed as that). The covariance of `vec(G)` (row-major: `G[0][0], G[0][1], …`) is
//!   block diagonal: row `i` of `G` gets the G-part of component `i` (rescaled by `1/s²`).
//!   When `r = 0` the fit is exact, it says nothing about precision, and the a-priori
//!   variance factor `σ₀² = 1` is used instead (`FitStats::exact = true`,
//!   `variance_factor = None`); that is meaningful only with stated precisions
//!   (see [`FitStats::cov_gradient`]).
//!
//! ## Full covariances (coupled solution)
//! When [`FitOptions::use_precision`] is set and any member states a full covariance
//! ([`crate::Point::cov`]), the components are correlated and no longer separate. The fit
//! is then one generalised least-squares adjustment (Ghilani & Wolf, *Adjustment
//! Computations*, general least squares with a full weight matrix) with the `D + D²`
//! unknowns `β = (t, vec G)` (row-major `vec G`) and, per point `k`,
//!
//! ```text
//! A_k = [I_D, I_D ⊗ ((x_k − x̄)/s)ᵀ]      (D × (D+D²))
//! P_k = C_k⁻¹                             (1/m², by Cholesky decomposition)
//! W_k = K_k · P_k
//! ```
//!
//! Members with only `sigma` take `C_k = diag(σ²)` in the same solution. With
//! `N = Σ A_kᵀW_kA_k`, `B = Σ A_kᵀK_k²P_kA_k` and `C = Σ A_kᵀP_kA_k` the estimate is
//! `β̂ = N⁻¹ Σ A_kᵀW_k u_k` (one step of iterative refinement), `vᵀPv = Σ v_kᵀP_kv_k`,
//! `r = n·D − (D+D²)`, `r_eff = tr((I−H)ᵀP(I−H)P⁻¹) = n·D − 2(D+D²) + tr(N⁻¹BN⁻¹C)`
//! (exactly `r` for `K = I`), `σ̂₀² = vᵀPv / r_eff`, and `Cov(β̂) = σ₀² N⁻¹BN⁻¹`
//! (`σ₀² N⁻¹` for `K = I`). The covariance of `vec(G)` is then a full `D²×D²` matrix,
//! not block diagonal. The weighted centroid and the moment matrix use
//! `w̄_k = K_k · tr(P_k)/D`, which for a diagonal `P_k` is the mean per-axis weight of
//! the diagonal path; with diagonal covariances both solutions therefore agree to
//! rounding. The diagonal solution below stays in use whenever no member states a full
//! covariance (or precision weighting is off).
//!
//! ## Weight checks
//! A precision weight `1/σ²` or total weight `K·π` that is zero, subnormal or not finite
//! (σ above about 10¹⁵⁴ m or below about 10⁻¹⁵⁴ m), and a normal matrix that overflows,
//! are rejected as `InvalidParameter { name: "sigma" }` naming the point, rather than
//! misread as degenerate geometry; in the coupled solution the same for `C⁻¹` is
//! `InvalidParameter { name: "cov" }`.
//!
//! ## Geometry check
//! The centred weighted moment matrix `M = Σ_p w̄_p (x_p − x̄)(x_p − x̄)ᵀ` (m² times weight)
//! shows whether the points span every direction. With its eigenvalues
//! `λ_max ≥ … ≥ λ_min`:
//! - the RMS spread `sqrt(tr M / Σ w̄)` is below `1e-12 · max(1 m, |x̄|∞)` (coordinate
//!   rounding) → `coincident`;
//! - otherwise `λ_min/λ_max < min_condition` → `collinear` (2D; in 3D when also the middle
//!   eigenvalue is that small) or `coplanar` (3D).
//!
//! The ratio `λ_min/λ_max` is the squared ratio of the thinnest to the widest extent of the
//! group; the default threshold `1e-10` (a group 10⁵ times longer than it is wide) is
//! common practice for a "numerically flat" group, not a published constant.

// Small fixed-size linear algebra reads most plainly with explicit indices.
#![allow(clippy::needless_range_loop)]

use std::collections::{HashMap, HashSet};

use nalgebra::{DMatrix, DVector, Matrix2, Matrix3, SMatrix};

use super::{FitStats, GradientEstimate, RegionKind};
use crate::error::{CoreError, Result};
use crate::points::{Point, PointSet};

/// Default [`FitOptions::min_condition`]: smallest accepted `λ_min/λ_max` of the moment matrix.
pub const DEFAULT_MIN_CONDITION: f64 = 1e-10;

/// Relative spread below which the points of a group count as one point (coordinate rounding).
const COINCIDENT_REL: f64 = 1e-12;

/// Kernel weights below this fraction of the group's largest are not observations.
const KERNEL_CUTOFF: f64 = 1e-12;

/// Iteration cap of the bounded symmetric eigen-solver on the moment matrix.
const EIGEN_MAX_ITER: usize = 200;

/// Weighting of each point by its distance `d` (metres) from a centre.
///
/// Neither kernel has a single authoritative source; both are common practice in
/// moving least squares and strain-field interpolation.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub enum DistanceWeight {
    /// Every point has distance weight 1.
    #[default]
    None,
    /// Gaussian kernel `δ = exp(−d² / (2 s²))`.
    Gaussian {
        /// Scale `s`, metres; positive and finite.
        scale_m: f64,
    },
    /// Quadratic decay `δ = (1 − d²/R²)²` for `d < R`, else `0` (those points drop out).
    QuadraticDecay {
        /// Radius `R`, metres; positive and finite.
        radius_m: f64,
    },
}

impl DistanceWeight {
    /// Check the kernel parameter: positive and finite.
    pub fn validate(&self) -> Result<()> {
        match *self {
            DistanceWeight::None => Ok(()),
            DistanceWeight::Gaussian { scale_m } => positive_finite("scale_m", scale_m),
            DistanceWeight::QuadraticDecay { radius_m } => positive_finite("radius_m", radius_m),
        }
    }

    /// Weight for a squared distance `d²` (m²), dimensionless, in `[0, 1]`.
    pub fn weight(&self, d2: f64) -> f64 {
        match *self {
            DistanceWeight::None => 1.0,
            DistanceWeight::Gaussian { scale_m } => (-d2 / (2.0 * scale_m * scale_m)).exp(),
            DistanceWeight::QuadraticDecay { radius_m } => {
                let q = d2 / (radius_m * radius_m);
                if q < 1.0 {
                    let a = 1.0 - q;
                    a * a
                } else {
                    0.0
                }
            }
        }
    }
}

fn positive_finite(name: &'static str, v: f64) -> Result<()> {
    if v.is_finite() && v > 0.0 {
        Ok(())
    } else {
        Err(CoreError::InvalidParameter {
            name,
            reason: format!("must be a positive finite length in metres, got {v}"),
        })
    }
}

/// Options of the weighted least-squares fit.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FitOptions {
    /// Weight each displacement component by `1/σ²` from [`crate::Point::sigma`], or
    /// each point by `C⁻¹` from [`crate::Point::cov`] (coupled solution, module docs).
    /// When any member of a fit states its precision (either form), every member must
    /// (a fit that mixed `1/σ²` with weight 1 for the others would be meaningless): a
    /// member without one is an `InvalidParameter { name: "sigma" }` error naming it. When no member states
    /// one, or the option is off, every precision weight is 1 (and `σ̂₀²` is in m²).
    pub use_precision: bool,
    /// Distance weighting relative to the fit's centre.
    pub distance_weight: DistanceWeight,
    /// Smallest accepted ratio `λ_min/λ_max` of the centred moment matrix (dimensionless,
    /// `0 ≤ min_condition < 1`); below it the group is reported as degenerate.
    pub min_condition: f64,
}

impl Default for FitOptions {
    /// Precision weights on, no distance weighting, `min_condition = 1e-10`.
    fn default() -> Self {
        Self {
            use_precision: true,
            distance_weight: DistanceWeight::None,
            min_condition: DEFAULT_MIN_CONDITION,
        }
    }
}

impl FitOptions {
    /// Check the options: kernel parameter positive and finite, `0 ≤ min_condition < 1`.
    pub fn validate(&self) -> Result<()> {
        self.distance_weight.validate()?;
        if !(self.min_condition.is_finite() && (0.0..1.0).contains(&self.min_condition)) {
            return Err(CoreError::InvalidParameter {
                name: "min_condition",
                reason: format!("must lie in [0, 1), got {}", self.min_condition),
            });
        }
        Ok(())
    }
}

/// A named group of points for [`fit_groups`].
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Group {
    /// Group name, used as the estimate's label and in error messages.
    pub name: String,
    /// Identifiers of the member points (each at most once).
    pub point_ids: Vec<String>,
}

/// Fit `u = t + G·(x − x̄)` to the points `members` (indices into `points`).
///
/// - `label`: the estimate's label and the name used in error messages;
/// - `kind`: [`RegionKind::Group`], [`RegionKind::Neighbourhood`] or [`RegionKind::Network`];
/// - `centre`: reference point of the distance weighting, metres; `None` uses the
///   unweighted centroid of the members.
///
/// The estimate's `members` are the points with non-zero weight, in the given order;
/// `centroid` is the weighted centroid `x̄`, `translation` is `t` and `fit` holds the
/// residuals, variance factor, redundancy and covariance of `vec(G)` (module docs).
///
/// # Errors
/// `TooFewPoints` (fewer than `D+1` points with non-negligible weight), `DegenerateGeometry`
/// (coincident, collinear, coplanar), `InvalidParameter` (bad options, member index out of
/// range or repeated, non-finite centre, every weight zero; `sigma` for a member without
/// a stated precision under `use_precision`, or a weight or normal matrix out of the
/// floating-point range), `EigenNoConvergence`.
pub fn fit_points<const D: usize>(
    points: &PointSet<D>,
    members: &[usize],
    label: &str,
    kind: RegionKind,
    centre: Option<[f64; D]>,
    opts: &FitOptions,
) -> Result<GradientEstimate<D>> {
    opts.validate()?;
    let n = points.len();
    let mut seen = HashSet::with_capacity(members.len());
    for &m in members {
        if m >= n {
            return Err(CoreError::InvalidParameter {
                name: "members",
                reason: format!(
                    "{}: index {m} is outside the point set of {n} points",
                    context(kind, label)
                ),
            });
        }
        if !seen.insert(m) {
            return Err(CoreError::InvalidParameter {
                name: "members",
                reason: format!(
                    "{}: point `{}` is listed twice",
                    context(kind, label),
                    points.points()[m].id
                ),
            });
        }
    }
    Fitter::new()
        .fit(points, members, label, kind, centre, opts)
        .map(|o| o.estimate)
}

/// Fit every named group (see [`fit_points`]), in the given order.
///
/// Distance weighting, if asked for, is relative to each group's unweighted centroid.
///
/// # Errors
/// `Empty` when no group is given; `InvalidParameter` for an empty group name or a point
/// listed twice in one group; `UnknownPoint { context: "group `NAME`", id }`; and any error
/// of [`fit_points`] for the first bad group, naming it.
pub fn fit_groups<const D: usize>(
    points: &PointSet<D>,
    groups: &[Group],
    opts: &FitOptions,
) -> Result<Vec<GradientEstimate<D>>> {
    opts.validate()?;
    if groups.is_empty() {
        return Err(CoreError::Empty { what: "groups" });
    }
    let index: HashMap<&str, usize> = points
        .points()
        .iter()
        .enumerate()
        .map(|(i, p)| (p.id.as_str(), i))
        .collect();
    let mut fitter = Fitter::new();
    let mut out = Vec::with_capacity(groups.len());
    let mut members = Vec::new();
    let mut seen = HashSet::new();
    for g in groups {
        if g.name.is_empty() {
            return Err(CoreError::InvalidParameter {
                name: "group name",
                reason: "empty".into(),
            });
        }
        let ctx = || context(RegionKind::Group, &g.name);
        members.clear();
        seen.clear();
        for id in &g.point_ids {
            let Some(&i) = index.get(id.as_str()) else {
                return Err(CoreError::UnknownPoint {
                    context: ctx(),
                    id: id.clone(),
                });
            };
            if !seen.insert(i) {
                return Err(CoreError::InvalidParameter {
                    name: "point_ids",
                    reason: format!("{}: point `{id}` is listed twice", ctx()),
                });
            }
            members.push(i);
        }
        let fit = fitter.fit(points, &members, &g.name, RegionKind::Group, None, opts)?;
        out.push(fit.estimate);
    }
    Ok(out)
}

/// How an estimate of `kind` called `label` is named in error messages.
pub(crate) fn context(kind: RegionKind, label: &str) -> String {
    match kind {
        RegionKind::Group => format!("group `{label}`"),
        RegionKind::Neighbourhood => format!("neighbourhood `{label}`"),
        RegionKind::Network => "network".to_owned(),
        RegionKind::Triangle | RegionKind::Tetrahedron => format!("element `{label}`"),
        RegionKind::GridNode => format!("grid node `{label}`"),
    }
}

/// A fit with the extra numbers the whole-network split needs.
pub(crate) struct FitOutput<const D: usize> {
    /// The estimate handed to callers.
    pub estimate: GradientEstimate<D>,
    /// Variance of each component of `t`, m² (same scaling as `cov_gradient`).
    pub var_translation: [f64; D],
}

/// Reusable work buffers of the fit, so that many small fits do not reallocate.
pub(crate) struct Fitter<const D: usize> {
    kept: Vec<usize>,
    /// Kernel weight per member (first pass), then per kept point, normalised to max 1.
    k: Vec<f64>,
    /// Precision weight `π` per kept point and axis.
    prec: Vec<[f64; D]>,
    /// Total weight `K·π` per kept point and axis.
    w: Vec<[f64; D]>,
    wbar: Vec<f64>,
    d: Vec<[f64; D]>,
    /// Precision matrix `P = C⁻¹` per kept point (1/m²), coupled solution only.
    pm: Vec<[[f64; D]; D]>,
}

impl<const D: usize> Fitter<D> {
    pub(crate) fn new() -> Self {
        Self {
            kept: Vec::new(),
            k: Vec::new(),
            prec: Vec::new(),
            w: Vec::new(),
            wbar: Vec::new(),
            d: Vec::new(),
            pm: Vec::new(),
        }
    }

    /// The error for a sum of weights that overflows: names the first kept point at
    /// which the running sum of `w̄` stops satisfying `ok`.
    fn overflow(
        &self,
        points: &PointSet<D>,
        kind: RegionKind,
        label: &str,
        ok: impl Fn(f64) -> bool,
    ) -> CoreError {
        let mut sum = 0.0;
        let mut at = 0;
        for (q, &wb) in self.wbar.iter().enumerate() {
            sum += wb;
            if !ok(sum) {
                at = q;
                break;
            }
        }
        let p = &points.points()[self.kept[at]];
        CoreError::InvalidParameter {
            name: "sigma",
            reason: format!(
                "{}: point `{}`: weight {:e} makes the sum of weights overflow",
                context(kind, label),
                p.id,
                self.wbar[at]
            ),
        }
    }

    /// The fit itself. Options are assumed validated; members in range and distinct.
    pub(crate) fn fit(
        &mut self,
        points: &PointSet<D>,
        members: &[usize],
        label: &str,
        kind: RegionKind,
        centre: Option<[f64; D]>,
        opts: &FitOptions,
    ) -> Result<FitOutput<D>> {
        if D != 2 && D != 3 {
            return Err(CoreError::InvalidParameter {
                name: "dimension",
                reason: format!("{D} is not 2 or 3"),
            });
        }
        let pts = points.points();
        let needed = D + 1;
        if members.len() < needed {
            return Err(CoreError::TooFewPoints {
                context: context(kind, label),
                needed,
                got: members.len(),
            });
        }
        if let Some(c) = centre
            && c.iter().any(|v| !v.is_finite())
        {
            return Err(CoreError::InvalidParameter {
                name: "centre",
                reason: format!("{}: centre is not finite", context(kind, label)),
            });
        }
        let dw = opts.distance_weight;
        let centre = match (centre, dw) {
            (Some(c), _) => c,
            (None, DistanceWeight::None) => [0.0; D],
            (None, _) => plain_centroid(points, members),
        };

        // Precision weighting: all members state their precision (`sigma` or `cov`), or
        // none does (then unit weights); a mixture would put weight 1 beside weights
        // 1/σ² ≈ 10⁶.
        if opts.use_precision
            && members.iter().any(|&m| pts[m].has_precision())
            && let Some(&m) = members.iter().find(|&&m| !pts[m].has_precision())
        {
            return Err(CoreError::InvalidParameter {
                name: "sigma",
                reason: format!(
                    "{}: point `{}` states no standard deviation while other points do; \
                     precision weighting needs one for every point (or switch it off)",
                    context(kind, label),
                    pts[m].id
                ),
            });
        }

        // A full covariance on any member switches to the coupled (generalised) solution.
        let full = opts.use_precision && members.iter().any(|&m| pts[m].cov.is_some());

        // Kernel weights; their maximum normalises them to (0, 1].
        self.k.clear();
        let mut kmax = 0.0_f64;
        for &m in members {
            let p = &pts[m];
            let kw = match dw {
                DistanceWeight::None => 1.0,
                _ => {
                    let mut d2 = 0.0;
                    for k in 0..D {
                        let e = p.x[k] - centre[k];
                        d2 += e * e;
                    }
                    dw.weight(d2)
                }
            };
            let kw = if kw.is_nan() { 0.0 } else { kw };
            kmax = kmax.max(kw);
            self.k.push(kw);
        }
        // Points with negligible kernel weight drop out (module docs).
        let kcut = KERNEL_CUTOFF * kmax;
        self.kept.clear();
        self.prec.clear();
        self.w.clear();
        self.wbar.clear();
        self.pm.clear();
        let mut kq = 0;
        for (q, &m) in members.iter().enumerate() {
            let kw = self.k[q];
            if kmax <= 0.0 || kw <= 0.0 || kw < kcut {
                continue;
            }
            let kw = if dw == DistanceWeight::None {
                1.0
            } else {
                kw / kmax
            };
            let p = &pts[m];
            let mut prec = [1.0; D];
            let mut w = [kw; D];
            if full {
                // P = C⁻¹ from the full covariance (or diag σ² for a sigma-only member);
                // `prec` holds its diagonal, so that w̄ = K·tr(P)/D.
                let pm = precision_matrix(p, kind, label)?;
                for k in 0..D {
                    prec[k] = pm[k][k];
                    w[k] = kw * prec[k];
                }
                if pm.iter().flatten().any(|v| !v.is_finite())
                    || (0..D).any(|k| !prec[k].is_normal() || !w[k].is_normal())
                {
                    return Err(CoreError::InvalidParameter {
                        name: "cov",
                        reason: format!(
                            "{}: point `{}`: the weight matrix C⁻¹ (kernel weight {kw:e}) \
                             is outside the floating-point range of a weight",
                            context(kind, label),
                            p.id
                        ),
                    });
                }
                self.pm.push(pm);
            } else if opts.use_precision
                && let Some(s) = p.sigma
            {
                for k in 0..D {
                    prec[k] = 1.0 / (s[k] * s[k]);
                    w[k] = kw * prec[k];
                    if !prec[k].is_normal() || !w[k].is_normal() {
                        return Err(CoreError::InvalidParameter {
                            name: "sigma",
                            reason: format!(
                                "{}: point `{}`: standard deviation {} m gives the weight \
                                 1/σ² = {:e} (kernel weight {kw:e}), outside the \
                                 floating-point range of a weight",
                                context(kind, label),
                                p.id,
                                s[k],
                                prec[k]
                            ),
                        });
                    }
                }
            }
            // Reuse the front of `k` for the kept points' normalised kernel weights.
            self.k[kq] = kw;
            kq += 1;
            self.kept.push(m);
            // Mean of the per-axis weights; summed as w/D where the plain sum overflows.
            let mean = w.iter().sum::<f64>() / D as f64;
            self.wbar.push(if mean.is_finite() {
                mean
            } else {
                w.iter().map(|v| v / D as f64).sum()
            });
            self.prec.push(prec);
            self.w.push(w);
        }
        self.k.truncate(kq);
        let localised = self.k.iter().any(|&k| k != 1.0);
        let n = self.kept.len();
        if n == 0 {
            return Err(CoreError::InvalidParameter {
                name: "distance_weight",
                reason: format!(
                    "{}: every one of the {} points has zero distance weight ({dw:?}); nothing to fit",
                    context(kind, label),
                    members.len()
                ),
            });
        }
        if n < needed {
            return Err(CoreError::TooFewPoints {
                context: format!("{} (points with non-zero weight)", context(kind, label)),
                needed,
                got: n,
            });
        }

        // Weighted centroid, accumulated relative to the first point for accuracy.
        let x0 = pts[self.kept[0]].x;
        let mut wsum = 0.0;
        let mut acc = [0.0; D];
        for (q, &m) in self.kept.iter().enumerate() {
            let wb = self.wbar[q];
            wsum += wb;
            for k in 0..D {
                acc[k] += wb * (pts[m].x[k] - x0[k]);
            }
        }
        if !wsum.is_finite() {
            return Err(self.overflow(points, kind, label, |w| w.is_finite()));
        }
        let mut xbar = [0.0; D];
        for k in 0..D {
            xbar[k] = x0[k] + acc[k] / wsum;
        }

        // Centred offsets and the moment matrix.
        self.d.clear();
        let mut mm = [[0.0; 3]; 3];
        for (q, &m) in self.kept.iter().enumerate() {
            let mut d = [0.0; D];
            for k in 0..D {
                d[k] = pts[m].x[k] - xbar[k];
            }
            let wb = self.wbar[q];
            for a in 0..D {
                for b in 0..D {
                    mm[a][b] += wb * d[a] * d[b];
                }
            }
            self.d.push(d);
        }
        let trace: f64 = (0..D).map(|k| mm[k][k]).sum();
        if !trace.is_finite() {
            return Err(CoreError::InvalidParameter {
                name: "sigma",
                reason: format!(
                    "{}: the weighted moment matrix overflows (weights up to {:e}); \
                     the standard deviations are too small",
                    context(kind, label),
                    self.wbar.iter().fold(0.0_f64, |a, &b| a.max(b))
                ),
            });
        }
        let spread = (trace / wsum).sqrt();
        let mag = xbar.iter().fold(1.0_f64, |a, v| a.max(v.abs()));
        let eig = sorted_eigenvalues::<D>(&mm)?;
        let lmax = eig[0];
        let lmin = eig[D - 1];
        let condition = if lmax > 0.0 { lmin / lmax } else { 0.0 };
        if spread.is_nan() || spread <= COINCIDENT_REL * mag {
            return Err(CoreError::DegenerateGeometry {
                context: context(kind, label),
                shape: "coincident",
                condition,
            });
        }
        if condition.is_nan() || condition < opts.min_condition || condition <= 0.0 {
            let mid = eig[1] / lmax;
            let shape = if D == 2 || mid.is_nan() || mid < opts.min_condition {
                "collinear"
            } else {
                "coplanar"
            };
            return Err(CoreError::DegenerateGeometry {
                context: context(kind, label),
                shape,
                condition,
            });
        }

        if full {
            return self.solve_coupled(points, label, kind, xbar, spread, localised, condition);
        }

        // One regression per displacement component on [1, d/s].
        let s = spread;
        let mut gradient = SMatrix::<f64, D, D>::zeros();
        let mut t = [0.0; D];
        let mut cov_blocks = [[[0.0; 4]; 4]; 3];
        let mut r_eff = 0.0;
        for i in 0..D {
            let mut nm = [[0.0; 4]; 4];
            let mut rhs = [0.0; 4];
            // B = Σ K²π a aᵀ and C = Σ π a aᵀ, for the sandwich covariance and r_eff.
            let mut bm = [[0.0; 4]; 4];
            let mut cm = [[0.0; 4]; 4];
            let mut overflow_at = None;
            for q in 0..n {
                let w = self.w[q][i];
                let pi = self.prec[q][i];
                let kw = self.k[q];
                let mut a = [1.0; 4];
                for k in 0..D {
                    a[k + 1] = self.d[q][k] / s;
                }
                let u = pts[self.kept[q]].u[i];
                for r in 0..=D {
                    rhs[r] += w * a[r] * u;
                    for c in 0..=r {
                        nm[r][c] += w * a[r] * a[c];
                        if localised {
                            bm[r][c] += kw * w * a[r] * a[c];
                            cm[r][c] += pi * a[r] * a[c];
                        }
                    }
                }
                if overflow_at.is_none() && (0..=D).any(|r| !nm[r][r].is_finite()) {
                    overflow_at = Some(q);
                }
            }
            if let Some(q) = overflow_at {
                let p = &pts[self.kept[q]];
                return Err(CoreError::InvalidParameter {
                    name: "sigma",
                    reason: format!(
                        "{}: point `{}`: weight {:e} overflows the normal equations of u{}",
                        context(kind, label),
                        p.id,
                        self.w[q][i],
                        ["x", "y", "z"][i]
                    ),
                });
            }
            for r in 0..=D {
                for c in 0..r {
                    nm[c][r] = nm[r][c];
                    bm[c][r] = bm[r][c];
                    cm[c][r] = cm[r][c];
                }
            }
            let Some(inv) = spd_inverse(&nm, D + 1) else {
                let shape = if D == 2 { "collinear" } else { "coplanar" };
                return Err(CoreError::DegenerateGeometry {
                    context: context(kind, label),
                    shape,
                    condition,
                });
            };
            let mut beta = [0.0; 4];
            for r in 0..=D {
                beta[r] = (0..=D).map(|c| inv[r][c] * rhs[c]).sum();
            }
            // One step of iterative refinement on the residuals: recovers the digits the
            // normal equations lose on poorly shaped (but accepted) groups.
            let mut rhs2 = [0.0; 4];
            for q in 0..n {
                let w = self.w[q][i];
                let mut a = [1.0; 4];
                for k in 0..D {
                    a[k + 1] = self.d[q][k] / s;
                }
                let fitted: f64 = (0..=D).map(|r| a[r] * beta[r]).sum();
                let res = pts[self.kept[q]].u[i] - fitted;
                for r in 0..=D {
                    rhs2[r] += w * a[r] * res;
                }
            }
            for r in 0..=D {
                beta[r] += (0..=D).map(|c| inv[r][c] * rhs2[c]).sum::<f64>();
            }
            t[i] = beta[0];
            for j in 0..D {
                gradient[(i, j)] = beta[j + 1] / s;
            }
            if localised {
                // Sandwich N⁻¹ B N⁻¹, and tr(N⁻¹ B N⁻¹ C) for r_eff.
                let sand = mul4(&mul4(&inv, &bm, D + 1), &inv, D + 1);
                let tr: f64 = {
                    let sc = mul4(&sand, &cm, D + 1);
                    (0..=D).map(|r| sc[r][r]).sum()
                };
                r_eff += n as f64 - 2.0 * (D + 1) as f64 + tr;
                cov_blocks[i] = sand;
            } else {
                cov_blocks[i] = inv;
            }
        }

        // Residuals and vᵀPv.
        let mut residuals = Vec::with_capacity(n);
        let mut vtpv = 0.0;
        for q in 0..n {
            let p = &pts[self.kept[q]];
            let mut v = [0.0; D];
            for i in 0..D {
                let mut fitted = t[i];
                for j in 0..D {
                    fitted += gradient[(i, j)] * self.d[q][j];
                }
                v[i] = p.u[i] - fitted;
                vtpv += self.prec[q][i] * v[i] * v[i];
            }
            residuals.push(v);
        }
        let redundancy = n * D - D * (D + 1);
        let effective_redundancy = if localised {
            // Zero up to rounding when r = 0 (then H = I).
            if redundancy == 0 { 0.0 } else { r_eff }
        } else {
            redundancy as f64
        };
        let exact = redundancy == 0 || effective_redundancy.is_nan() || effective_redundancy <= 0.0;
        let variance_factor = (!exact).then(|| vtpv / effective_redundancy);
        let factor = variance_factor.unwrap_or(1.0);

        let mut cov = DMatrix::<f64>::zeros(D * D, D * D);
        let mut var_translation = [0.0; D];
        for i in 0..D {
            let inv = &cov_blocks[i];
            var_translation[i] = factor * inv[0][0];
            for j in 0..D {
                for k in 0..D {
                    cov[(i * D + j, i * D + k)] = factor * inv[j + 1][k + 1] / (s * s);
                }
            }
        }

        Ok(FitOutput {
            estimate: GradientEstimate {
                label: label.to_owned(),
                kind,
                members: self.kept.clone(),
                centroid: xbar,
                gradient,
                translation: Some(t),
                fit: Some(FitStats {
                    n_points: n,
                    redundancy,
                    effective_redundancy,
                    exact,
                    variance_factor,
                    residuals,
                    cov_gradient: cov,
                }),
            },
            var_translation,
        })
    }
}

impl<const D: usize> Fitter<D> {
    /// The coupled (generalised) least-squares solution for members with full
    /// covariances (module docs, "Full covariances"). Called by [`Fitter::fit`] after the
    /// kernel weights, `P_k`, the weighted centroid `xbar` and the geometry checks; `s`
    /// is the RMS spread used to scale the coordinates.
    #[allow(clippy::too_many_arguments)]
    fn solve_coupled(
        &self,
        points: &PointSet<D>,
        label: &str,
        kind: RegionKind,
        xbar: [f64; D],
        s: f64,
        localised: bool,
        condition: f64,
    ) -> Result<FitOutput<D>> {
        let pts = points.points();
        let n = self.kept.len();
        let m = D + D * D;
        // Column c of A_k = [I_D, I_D ⊗ ((x_k − x̄)/s)ᵀ] has one non-zero entry: on row
        // `axis(c)`, with value `val(q, c)`.
        let axis = |c: usize| if c < D { c } else { (c - D) / D };
        let val = |q: usize, c: usize| {
            if c < D {
                1.0
            } else {
                self.d[q][(c - D) % D] / s
            }
        };
        // A_kᵀ P_k y for a D-vector y, added into `out` times `f`.
        let add_atpy = |out: &mut DVector<f64>, q: usize, y: &[f64; D], f: f64| {
            let p = &self.pm[q];
            let mut py = [0.0; D];
            for i in 0..D {
                for j in 0..D {
                    py[i] += p[i][j] * y[j];
                }
            }
            for c in 0..m {
                out[c] += f * val(q, c) * py[axis(c)];
            }
        };
        let fitted = |q: usize, beta: &DVector<f64>| {
            let mut f = [0.0; D];
            for i in 0..D {
                f[i] = beta[i];
                for j in 0..D {
                    f[i] += beta[D + i * D + j] * self.d[q][j] / s;
                }
            }
            f
        };

        let mut nm = DMatrix::<f64>::zeros(m, m);
        let mut bm = DMatrix::<f64>::zeros(m, m);
        let mut cm = DMatrix::<f64>::zeros(m, m);
        let mut rhs = DVector::<f64>::zeros(m);
        for q in 0..n {
            let kw = self.k[q];
            let p = &self.pm[q];
            for r in 0..m {
                let (vr, ar) = (val(q, r), axis(r));
                for c in 0..=r {
                    let e = vr * p[ar][axis(c)] * val(q, c);
                    nm[(r, c)] += kw * e;
                    if localised {
                        bm[(r, c)] += kw * kw * e;
                        cm[(r, c)] += e;
                    }
                }
            }
            add_atpy(&mut rhs, q, &pts[self.kept[q]].u, kw);
        }
        if nm.iter().any(|v| !v.is_finite()) || rhs.iter().any(|v| !v.is_finite()) {
            return Err(CoreError::InvalidParameter {
                name: "cov",
                reason: format!(
                    "{}: the weights C⁻¹ (up to {:e} 1/m²) overflow the normal equations; \
                     the covariances are too small",
                    context(kind, label),
                    self.wbar.iter().fold(0.0_f64, |a, &b| a.max(b))
                ),
            });
        }
        for r in 0..m {
            for c in 0..r {
                nm[(c, r)] = nm[(r, c)];
                bm[(c, r)] = bm[(r, c)];
                cm[(c, r)] = cm[(r, c)];
            }
        }
        let degenerate = || CoreError::DegenerateGeometry {
            context: context(kind, label),
            shape: if D == 2 { "collinear" } else { "coplanar" },
            condition,
        };
        let chol = nm.clone().cholesky().ok_or_else(degenerate)?;
        let inv = chol.inverse();
        if inv.iter().any(|v| !v.is_finite()) {
            return Err(degenerate());
        }
        let mut beta = &inv * &rhs;
        // One step of iterative refinement on the residuals, as in the diagonal path.
        let mut rhs2 = DVector::<f64>::zeros(m);
        for q in 0..n {
            let f = fitted(q, &beta);
            let u = pts[self.kept[q]].u;
            let mut res = [0.0; D];
            for i in 0..D {
                res[i] = u[i] - f[i];
            }
            add_atpy(&mut rhs2, q, &res, self.k[q]);
        }
        beta += &inv * rhs2;

        let mut t = [0.0; D];
        let mut gradient = SMatrix::<f64, D, D>::zeros();
        for i in 0..D {
            t[i] = beta[i];
            for j in 0..D {
                gradient[(i, j)] = beta[D + i * D + j] / s;
            }
        }

        // Residuals and vᵀPv = Σ v_kᵀ P_k v_k (precision only, not the kernel).
        let mut residuals = Vec::with_capacity(n);
        let mut vtpv = 0.0;
        for q in 0..n {
            let u = pts[self.kept[q]].u;
            let mut v = [0.0; D];
            for i in 0..D {
                let mut f = t[i];
                for j in 0..D {
                    f += gradient[(i, j)] * self.d[q][j];
                }
                v[i] = u[i] - f;
            }
            let p = &self.pm[q];
            for i in 0..D {
                for j in 0..D {
                    vtpv += v[i] * p[i][j] * v[j];
                }
            }
            residuals.push(v);
        }
        let redundancy = n * D - m;
        let (cov_beta, effective_redundancy) = if localised {
            let sand = &inv * &bm * &inv;
            let tr = (&sand * &cm).trace();
            let r_eff = if redundancy == 0 {
                0.0
            } else {
                (n * D) as f64 - 2.0 * m as f64 + tr
            };
            (sand, r_eff)
        } else {
            (inv, redundancy as f64)
        };
        let exact = redundancy == 0 || effective_redundancy.is_nan() || effective_redundancy <= 0.0;
        let variance_factor = (!exact).then(|| vtpv / effective_redundancy);
        let factor = variance_factor.unwrap_or(1.0);

        let mut cov = DMatrix::<f64>::zeros(D * D, D * D);
        let mut var_translation = [0.0; D];
        for i in 0..D {
            var_translation[i] = factor * cov_beta[(i, i)];
        }
        for a in 0..D * D {
            for b in 0..D * D {
                cov[(a, b)] = factor * cov_beta[(D + a, D + b)] / (s * s);
            }
        }

        Ok(FitOutput {
            estimate: GradientEstimate {
                label: label.to_owned(),
                kind,
                members: self.kept.clone(),
                centroid: xbar,
                gradient,
                translation: Some(t),
                fit: Some(FitStats {
                    n_points: n,
                    redundancy,
                    effective_redundancy,
                    exact,
                    variance_factor,
                    residuals,
                    cov_gradient: cov,
                }),
            },
            var_translation,
        })
    }
}

/// Precision matrix `P = C⁻¹` (1/m², symmetric) of one point from the covariance it
/// states (full `cov`, or `diag(σ²)` from `sigma`), by Cholesky decomposition.
fn precision_matrix<const D: usize>(
    p: &Point<D>,
    kind: RegionKind,
    label: &str,
) -> Result<[[f64; D]; D]> {
    let Some(c) = p.covariance() else {
        return Err(CoreError::InvalidParameter {
            name: "sigma",
            reason: format!(
                "{}: point `{}` states no precision while other points do",
                context(kind, label),
                p.id
            ),
        });
    };
    let dm = DMatrix::<f64>::from_fn(D, D, |i, j| c[(i, j)]);
    let chol = dm.cholesky().ok_or_else(|| CoreError::SingularCovariance {
        name: format!("point `{}` cov", p.id),
        reason: format!(
            "{}: no Cholesky decomposition (not positive definite)",
            context(kind, label)
        ),
    })?;
    let inv = chol.inverse();
    let mut out = [[0.0; D]; D];
    for i in 0..D {
        for j in 0..D {
            out[i][j] = 0.5 * (inv[(i, j)] + inv[(j, i)]);
        }
    }
    Ok(out)
}

/// Unweighted centroid of the members, metres (members non-empty).
fn plain_centroid<const D: usize>(points: &PointSet<D>, members: &[usize]) -> [f64; D] {
    let pts = points.points();
    let x0 = pts[members[0]].x;
    let mut acc = [0.0; D];
    for &m in members {
        for k in 0..D {
            acc[k] += pts[m].x[k] - x0[k];
        }
    }
    let n = members.len() as f64;
    let mut c = [0.0; D];
    for k in 0..D {
        c[k] = x0[k] + acc[k] / n;
    }
    c
}

/// Eigenvalues of the symmetric `D×D` block of `m`, sorted descending, by the bounded
/// solver of nalgebra.
fn sorted_eigenvalues<const D: usize>(m: &[[f64; 3]; 3]) -> Result<[f64; D]> {
    let mut out = [0.0; D];
    let eps = f64::EPSILON;
    if D == 2 {
        let a = Matrix2::new(m[0][0], m[0][1], m[1][0], m[1][1]);
        let e =
            a.try_symmetric_eigen(eps, EIGEN_MAX_ITER)
                .ok_or(CoreError::EigenNoConvergence {
                    max_iter: EIGEN_MAX_ITER,
                })?;
        for k in 0..D {
            out[k] = e.eigenvalues[k];
        }
    } else {
        let a = Matrix3::new(
            m[0][0], m[0][1], m[0][2], m[1][0], m[1][1], m[1][2], m[2][0], m[2][1], m[2][2],
        );
        let e =
            a.try_symmetric_eigen(eps, EIGEN_MAX_ITER)
                .ok_or(CoreError::EigenNoConvergence {
                    max_iter: EIGEN_MAX_ITER,
                })?;
        for k in 0..D {
            out[k] = e.eigenvalues[k];
        }
    }
    out.sort_by(|a, b| b.total_cmp(a));
    Ok(out)
}

/// Product of the leading `n×n` blocks of two `4×4` matrices.
fn mul4(a: &[[f64; 4]; 4], b: &[[f64; 4]; 4], n: usize) -> [[f64; 4]; 4] {
    let mut out = [[0.0; 4]; 4];
    for r in 0..n {
        for c in 0..n {
            out[r][c] = (0..n).map(|k| a[r][k] * b[k][c]).sum();
        }
    }
    out
}

/// Inverse of a symmetric positive-definite `n×n` matrix (`n ≤ 4`) by Cholesky
/// decomposition; `None` when a pivot is not clearly positive.
fn spd_inverse(a: &[[f64; 4]; 4], n: usize) -> Option<[[f64; 4]; 4]> {
    let mut l = [[0.0; 4]; 4];
    for j in 0..n {
        let mut diag = a[j][j];
        for k in 0..j {
            diag -= l[j][k] * l[j][k];
        }
        if !diag.is_finite() || diag <= 1e-13 * a[j][j] {
            return None;
        }
        let ljj = diag.sqrt();
        l[j][j] = ljj;
        for i in (j + 1)..n {
            let mut v = a[i][j];
            for k in 0..j {
                v -= l[i][k] * l[j][k];
            }
            l[i][j] = v / ljj;
        }
    }
    // Inverse of L (lower triangular), column by column.
    let mut li = [[0.0; 4]; 4];
    for c in 0..n {
        li[c][c] = 1.0 / l[c][c];
        for r in (c + 1)..n {
            let mut v = 0.0;
            for k in c..r {
                v -= l[r][k] * li[k][c];
            }
            li[r][c] = v / l[r][r];
        }
    }
    // A⁻¹ = L⁻ᵀ L⁻¹.
    let mut inv = [[0.0; 4]; 4];
    for r in 0..n {
        for c in 0..=r {
            let v: f64 = (r..n).map(|k| li[k][r] * li[k][c]).sum();
            inv[r][c] = v;
            inv[c][r] = v;
        }
    }
    Some(inv)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn spd_inverse_matches_hand_inverse() {
        // 2×2: [[4, 2], [2, 3]]⁻¹ = 1/8 · [[3, −2], [−2, 4]] (adjugate formula).
        let mut a = [[0.0; 4]; 4];
        a[0][0] = 4.0;
        a[0][1] = 2.0;
        a[1][0] = 2.0;
        a[1][1] = 3.0;
        let inv = spd_inverse(&a, 2).expect("positive definite");
        let want = [[3.0 / 8.0, -0.25], [-0.25, 0.5]];
        for r in 0..2 {
            for c in 0..2 {
                assert!((inv[r][c] - want[r][c]).abs() < 1e-15);
            }
        }
        a[1][1] = 1.0; // singular: det = 4 − 4 = 0
        assert!(spd_inverse(&a, 2).is_none());
    }

    #[test]
    fn kernels_follow_their_formulas() {
        let g = DistanceWeight::Gaussian { scale_m: 2.0 };
        assert!((g.weight(4.0) - (-0.5f64).exp()).abs() < 1e-15);
        let q = DistanceWeight::QuadraticDecay { radius_m: 2.0 };
        assert!((q.weight(1.0) - 0.5625).abs() < 1e-15);
        assert_eq!(q.weight(4.0), 0.0);
        assert!(
            DistanceWeight::Gaussian { scale_m: 0.0 }
                .validate()
                .is_err()
        );
        assert!(
            DistanceWeight::QuadraticDecay { radius_m: f64::NAN }
                .validate()
                .is_err()
        );
    }
}
