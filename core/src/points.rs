//! Measured points: reference coordinates, displacements and stated precision.

use std::collections::HashSet;

use nalgebra::SMatrix;
use serde::{Deserialize, Serialize};

use crate::error::{CoreError, Result};
use crate::uncertainty::covariance::check_covariance_s;

/// Longest allowed point identifier, in characters.
pub const MAX_ID_LEN: usize = 64;

/// One monitoring point in `D` dimensions (2 or 3).
///
/// - `x`: reference coordinates in metres, in the structure's frame.
/// - `u`: displacement (current minus reference) in metres, same frame.
/// - `sigma`: optional stated standard deviation of each displacement component,
///   in metres. Used for per-point weights (`w = 1/σ²`) by the least-squares
///   estimators; `None` means unit weight.
/// - `cov`: optional full covariance of the displacement `u` (m², row-major,
///   `cov[i][j] = cov(u_i, u_j)`), for correlated components (for example a displacement
///   formed from two epochs, or GNSS precision rotated into the local frame). It
///   replaces `sigma`: a point states one of the two or neither, never both.
///   The least-squares estimators weight such a point by `C⁻¹` ([`crate::estimate::lsq`]).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Point<const D: usize> {
    /// Client's point identifier (1–64 chars of `A-Za-z0-9._-`).
    pub id: String,
    /// Reference coordinates, metres.
    #[serde(with = "serde_arrays")]
    pub x: [f64; D],
    /// Displacement, metres.
    #[serde(with = "serde_arrays")]
    pub u: [f64; D],
    /// Standard deviation of each displacement component, metres.
    #[serde(default, with = "serde_opt_arrays")]
    pub sigma: Option<[f64; D]>,
    /// Covariance of the displacement, m², row-major; symmetric positive definite.
    /// Mutually exclusive with `sigma`. Boxed: most points state none, and a point set
    /// of 10⁶ points should not carry the space of 10⁶ matrices.
    #[serde(default, with = "serde_opt_matrix")]
    pub cov: Option<Box<[[f64; D]; D]>>,
}

impl<const D: usize> Point<D> {
    /// A point with unit weight.
    pub fn new(id: impl Into<String>, x: [f64; D], u: [f64; D]) -> Self {
        Self {
            id: id.into(),
            x,
            u,
            sigma: None,
            cov: None,
        }
    }

    /// The same point with a stated standard deviation per axis (metres).
    pub fn with_sigma(mut self, sigma: [f64; D]) -> Self {
        self.sigma = Some(sigma);
        self
    }

    /// The same point with a full covariance of its displacement (m², row-major,
    /// `cov[i][j] = cov(u_i, u_j)`). A point with both `sigma` and `cov` is rejected by
    /// [`PointSet::new`].
    pub fn with_cov(mut self, cov: [[f64; D]; D]) -> Self {
        self.cov = Some(Box::new(cov));
        self
    }

    /// The covariance of the displacement (m²) from whichever precision the point
    /// states: the full `cov`, or `diag(σ_1², …, σ_D²)` from `sigma`; `None` when it
    /// states neither. When both are set (which [`PointSet::new`] rejects), `cov` wins.
    pub fn covariance(&self) -> Option<SMatrix<f64, D, D>> {
        if let Some(c) = &self.cov {
            return Some(SMatrix::<f64, D, D>::from_fn(|i, j| c[i][j]));
        }
        self.sigma.map(|s| {
            let mut c = SMatrix::<f64, D, D>::zeros();
            for k in 0..D {
                c[(k, k)] = s[k] * s[k];
            }
            c
        })
    }

    /// True when the point states a precision (`sigma` or `cov`).
    pub fn has_precision(&self) -> bool {
        self.sigma.is_some() || self.cov.is_some()
    }
}

/// Check one identifier against the ID rule (1–64 chars of `A-Za-z0-9._-`).
pub fn validate_id(id: &str) -> Result<()> {
    if id.is_empty() {
        return Err(CoreError::InvalidId {
            id: id.to_owned(),
            reason: "empty".into(),
        });
    }
    if id.chars().count() > MAX_ID_LEN {
        return Err(CoreError::InvalidId {
            id: id.chars().take(MAX_ID_LEN).collect::<String>() + "…",
            reason: format!("longer than {MAX_ID_LEN} characters"),
        });
    }
    if let Some(c) = id
        .chars()
        .find(|c| !(c.is_ascii_alphanumeric() || matches!(c, '.' | '_' | '-')))
    {
        return Err(CoreError::InvalidId {
            id: id.to_owned(),
            reason: format!("character {c:?} is not one of A-Z a-z 0-9 . _ -"),
        });
    }
    Ok(())
}

const AXES: [&str; 3] = ["x", "y", "z"];
const DISP: [&str; 3] = ["ux", "uy", "uz"];
const SIG: [&str; 3] = ["sigma_x", "sigma_y", "sigma_z"];

/// Smallest accepted ratio `λ_min/λ_max` of a point's covariance: below it the
/// covariance counts as singular (not positive definite to working precision).
/// Common practice for "numerically singular", not a published constant.
pub const COV_MIN_RATIO: f64 = 1e-12;

/// Iteration cap of the bounded symmetric eigen-solver used on point covariances.
const COV_EIGEN_MAX_ITER: usize = 200;

/// Check one point's full covariance of the displacement (m², row-major): finite,
/// symmetric (relative tolerance
/// [`SYM_REL`](crate::uncertainty::covariance::SYM_REL) = 1e-9) and positive definite
/// (`λ_min > COV_MIN_RATIO · λ_max`). [`PointSet::new`] runs it on every `cov`; readers
/// call it to report a bad row where they read it.
///
/// # Errors
/// `NonFinite { id, field: "cov" }`; `InvalidCovariance` (not symmetric, or a negative
/// eigenvalue) and `SingularCovariance` (singular to working precision), both with
/// `name` = ``point `ID` cov``; `EigenNoConvergence`.
pub fn validate_cov<const D: usize>(id: &str, c: &[[f64; D]; D]) -> Result<()> {
    if c.iter().flatten().any(|v| !v.is_finite()) {
        return Err(CoreError::NonFinite {
            id: id.to_owned(),
            field: "cov",
        });
    }
    let m = SMatrix::<f64, D, D>::from_fn(|i, j| c[i][j]);
    let name = format!("point `{id}` cov");
    check_covariance_s(&name, &m)?;
    let sym = nalgebra::DMatrix::<f64>::from_fn(D, D, |i, j| 0.5 * (c[i][j] + c[j][i]));
    let eig = sym
        .try_symmetric_eigen(f64::EPSILON, COV_EIGEN_MAX_ITER)
        .ok_or(CoreError::EigenNoConvergence {
            max_iter: COV_EIGEN_MAX_ITER,
        })?;
    let max = eig.eigenvalues.iter().fold(0.0_f64, |a, &v| a.max(v));
    let min = eig.eigenvalues.iter().fold(f64::INFINITY, |a, &v| a.min(v));
    if !(max > 0.0 && min > COV_MIN_RATIO * max) {
        return Err(CoreError::SingularCovariance {
            name,
            reason: format!(
                "not positive definite: smallest eigenvalue {min:e} m² is not above \
                 {COV_MIN_RATIO:e} × the largest {max:e} m²"
            ),
        });
    }
    Ok(())
}

/// A validated set of points: finite values, valid and unique IDs,
/// positive standard deviations, symmetric positive-definite covariances (never both
/// on one point), `D` in {2, 3}.
#[derive(Debug, Clone, PartialEq)]
pub struct PointSet<const D: usize> {
    points: Vec<Point<D>>,
}

impl<const D: usize> PointSet<D> {
    /// Validate `points`. The first problem found is returned, naming the point.
    ///
    /// # Errors
    /// `InvalidParameter` for a dimension other than 2 or 3, a non-positive standard
    /// deviation, or a point with both `sigma` and `cov` (`name: "cov"`); `Empty`;
    /// `InvalidId`; `NonFinite` (also `field: "cov"`); `DuplicatePoint`;
    /// `InvalidCovariance` for a non-symmetric or indefinite `cov` and
    /// `SingularCovariance` for a singular one, both named `point `ID` cov`.
    pub fn new(points: Vec<Point<D>>) -> Result<Self> {
        if D != 2 && D != 3 {
            return Err(CoreError::InvalidParameter {
                name: "dimension",
                reason: format!("{D} is not 2 or 3"),
            });
        }
        if points.is_empty() {
            return Err(CoreError::Empty { what: "points" });
        }
        // foldhash instead of the default SipHash: the duplicate check was a quarter of
        // the time to read 10⁶ points. Its `RandomState` is seeded per process, so
        // crafted IDs cannot force collisions (input may come over HTTP).
        let mut seen: HashSet<&str, foldhash::fast::RandomState> =
            HashSet::with_capacity_and_hasher(points.len(), foldhash::fast::RandomState::default());
        for p in &points {
            validate_id(&p.id)?;
            for k in 0..D {
                if !p.x[k].is_finite() {
                    return Err(CoreError::NonFinite {
                        id: p.id.clone(),
                        field: AXES[k],
                    });
                }
                if !p.u[k].is_finite() {
                    return Err(CoreError::NonFinite {
                        id: p.id.clone(),
                        field: DISP[k],
                    });
                }
                if let Some(s) = p.sigma {
                    if !s[k].is_finite() {
                        return Err(CoreError::NonFinite {
                            id: p.id.clone(),
                            field: SIG[k],
                        });
                    }
                    if s[k] <= 0.0 {
                        return Err(CoreError::InvalidParameter {
                            name: SIG[k],
                            reason: format!(
                                "point `{}`: standard deviation must be positive, got {}",
                                p.id, s[k]
                            ),
                        });
                    }
                }
            }
            if let Some(c) = &p.cov {
                if p.sigma.is_some() {
                    return Err(CoreError::InvalidParameter {
                        name: "cov",
                        reason: format!(
                            "point `{}`: states both sigma and cov; give one form of precision",
                            p.id
                        ),
                    });
                }
                validate_cov(&p.id, c)?;
            }
            if !seen.insert(p.id.as_str()) {
                return Err(CoreError::DuplicatePoint { id: p.id.clone() });
            }
        }
        Ok(Self { points })
    }

    /// The points, in input order.
    pub fn points(&self) -> &[Point<D>] {
        &self.points
    }

    /// Number of points.
    pub fn len(&self) -> usize {
        self.points.len()
    }

    /// Always false for a validated set (it holds at least one point).
    pub fn is_empty(&self) -> bool {
        self.points.is_empty()
    }

    /// Position of the point with identifier `id`, by linear search.
    /// Estimators that look up many IDs build their own map.
    pub fn position(&self, id: &str) -> Option<usize> {
        self.points.iter().position(|p| p.id == id)
    }

    /// Centroid of the reference coordinates, metres.
    pub fn centroid(&self) -> [f64; D] {
        let mut c = [0.0; D];
        for p in &self.points {
            for (ck, xk) in c.iter_mut().zip(p.x.iter()) {
                *ck += xk;
            }
        }
        let n = self.points.len() as f64;
        c.map(|v| v / n)
    }

    /// Give the points back.
    pub fn into_inner(self) -> Vec<Point<D>> {
        self.points
    }
}

/// serde for `[f64; D]` with a const generic `D` (serde's own impls stop at fixed sizes).
pub(crate) mod serde_arrays {
    use serde::de::Error;
    use serde::{Deserialize, Deserializer, Serializer};

    pub fn serialize<S: Serializer, const D: usize>(v: &[f64; D], s: S) -> Result<S::Ok, S::Error> {
        s.collect_seq(v.iter())
    }

    pub fn deserialize<'de, De: Deserializer<'de>, const D: usize>(
        d: De,
    ) -> Result<[f64; D], De::Error> {
        let v = Vec::<f64>::deserialize(d)?;
        let n = v.len();
        v.try_into()
            .map_err(|_| De::Error::invalid_length(n, &"one number per axis"))
    }
}

/// serde for `Option<[f64; D]>` with a const generic `D`.
pub(crate) mod serde_opt_arrays {
    use serde::de::Error;
    use serde::{Deserialize, Deserializer, Serializer};

    pub fn serialize<S: Serializer, const D: usize>(
        v: &Option<[f64; D]>,
        s: S,
    ) -> Result<S::Ok, S::Error> {
        match v {
            Some(a) => s.collect_seq(a.iter()),
            None => s.serialize_none(),
        }
    }

    pub fn deserialize<'de, De: Deserializer<'de>, const D: usize>(
        d: De,
    ) -> Result<Option<[f64; D]>, De::Error> {
        match Option::<Vec<f64>>::deserialize(d)? {
            None => Ok(None),
            Some(v) => {
                let n = v.len();
                v.try_into()
                    .map(Some)
                    .map_err(|_| De::Error::invalid_length(n, &"one number per axis"))
            }
        }
    }
}

/// serde for `Option<[[f64; D]; D]>` as a list of rows.
mod serde_opt_matrix {
    use serde::de::Error;
    use serde::{Deserialize, Deserializer, Serializer};

    /// An optional boxed `D×D` matrix, row-major.
    type OptMatrix<const D: usize> = Option<Box<[[f64; D]; D]>>;

    pub fn serialize<S: Serializer, const D: usize>(
        v: &OptMatrix<D>,
        s: S,
    ) -> Result<S::Ok, S::Error> {
        match v {
            Some(a) => s.collect_seq(a.iter().map(|row| row.to_vec())),
            None => s.serialize_none(),
        }
    }

    pub fn deserialize<'de, De: Deserializer<'de>, const D: usize>(
        d: De,
    ) -> Result<OptMatrix<D>, De::Error> {
        let Some(rows) = Option::<Vec<Vec<f64>>>::deserialize(d)? else {
            return Ok(None);
        };
        let n = rows.len();
        if n != D {
            return Err(De::Error::invalid_length(n, &"one row per axis"));
        }
        let mut out = [[0.0; D]; D];
        for (o, row) in out.iter_mut().zip(rows) {
            let m = row.len();
            *o = row
                .try_into()
                .map_err(|_| De::Error::invalid_length(m, &"one number per axis in each row"))?;
        }
        Ok(Some(Box::new(out)))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rejects_nan_duplicate_bad_id_and_bad_sigma() {
        let ok = Point::new("P1", [0.0, 0.0], [0.0, 0.0]);
        let nan = Point::new("P2", [f64::NAN, 0.0], [0.0, 0.0]);
        assert_eq!(
            PointSet::new(vec![ok.clone(), nan]),
            Err(CoreError::NonFinite {
                id: "P2".into(),
                field: "x"
            })
        );
        let inf = Point::new("P2", [0.0, 0.0], [0.0, f64::INFINITY]);
        assert_eq!(
            PointSet::new(vec![ok.clone(), inf]),
            Err(CoreError::NonFinite {
                id: "P2".into(),
                field: "uy"
            })
        );
        assert_eq!(
            PointSet::new(vec![ok.clone(), ok.clone()]),
            Err(CoreError::DuplicatePoint { id: "P1".into() })
        );
        let bad = Point::new("P 3", [0.0, 0.0], [0.0, 0.0]);
        assert!(matches!(
            PointSet::new(vec![bad]),
            Err(CoreError::InvalidId { .. })
        ));
        let long = Point::new("a".repeat(65), [0.0, 0.0], [0.0, 0.0]);
        assert!(matches!(
            PointSet::new(vec![long]),
            Err(CoreError::InvalidId { .. })
        ));
        let neg = ok.clone().with_sigma([0.001, 0.0]);
        assert!(matches!(
            PointSet::new(vec![neg]),
            Err(CoreError::InvalidParameter {
                name: "sigma_y",
                ..
            })
        ));
        assert_eq!(
            PointSet::<2>::new(vec![]),
            Err(CoreError::Empty { what: "points" })
        );
        assert!(PointSet::new(vec![ok]).is_ok());
    }

    #[test]
    fn json_round_trip_checks_lengths() {
        let p = Point::new("A-1", [1.0, 2.0, 3.0], [0.1, 0.2, 0.3]).with_sigma([1e-3; 3]);
        let s = serde_json::to_string(&p).expect("serialise");
        let back: Point<3> = serde_json::from_str(&s).expect("deserialise");
        assert_eq!(back, p);
        let c = Point::new("C", [1.0, 2.0], [0.1, 0.2]).with_cov([[4e-6, 1e-6], [1e-6, 2e-6]]);
        let s = serde_json::to_string(&c).expect("serialise");
        assert_eq!(
            serde_json::from_str::<Point<2>>(&s).expect("deserialise"),
            c
        );
        let ragged = r#"{"id":"A","x":[1,2],"u":[0,0],"cov":[[1,0],[0]]}"#;
        assert!(serde_json::from_str::<Point<2>>(ragged).is_err());
        let short = r#"{"id":"A","x":[1.0,2.0],"u":[0.0,0.0,0.0]}"#;
        assert!(serde_json::from_str::<Point<3>>(short).is_err());
    }
}
