//! WGS84 geodetic coordinates, Earth-centred Earth-fixed (ECEF) coordinates and local
//! East-North-Up (ENU) frames, for GNSS input.
//!
//! ## Conventions
//! - Latitude φ and longitude λ in radians inside core; φ in [−π/2, π/2] (north
//!   positive), λ east positive. Any finite longitude is accepted and normalised into
//!   (−π, π] (see [`normalize_longitude`]). Ellipsoidal height `h` in metres.
//! - ECEF (X, Y, Z) in metres: origin at the ellipsoid's centre, Z towards the north
//!   pole, X towards (φ, λ) = (0, 0), Y towards (0, 90°E).
//! - ENU (E, N, U) in metres about an origin: `enu = R·(X − X0)` with rows of `R` the
//!   unit East, North and Up (ellipsoid normal) vectors at the origin (Source: IOGP
//!   Guidance Note 7-2, EPSG method 9836, geocentric/topocentric conversions).
//! - Directions in the ENU plane: azimuth clockwise from north in [0, 2π), and the
//!   angle counter-clockwise from east in (−π, π] (the core's angle convention).

use nalgebra::{Matrix3, Vector3};
use serde::{Deserialize, Serialize};

use crate::error::{CoreError, Result};

/// WGS84 semi-major axis `a`, m (Source: NIMA TR8350.2, 3rd ed., §3.2; EPSG 7030).
pub const WGS84_A: f64 = 6_378_137.0;
/// WGS84 inverse flattening `1/f` (Source: NIMA TR8350.2, 3rd ed., §3.2; EPSG 7030).
pub const WGS84_INV_F: f64 = 298.257_223_563;
/// WGS84 flattening `f`.
pub const WGS84_F: f64 = 1.0 / WGS84_INV_F;
/// WGS84 first eccentricity squared `e² = f(2 − f)`.
pub const WGS84_E2: f64 = WGS84_F * (2.0 - WGS84_F);
/// WGS84 semi-minor axis `b = a(1 − f)`, m.
pub const WGS84_B: f64 = WGS84_A * (1.0 - WGS84_F);

/// Iteration cap of the ECEF → geodetic latitude iteration. Convergence is linear with
/// a ratio below `e²·a/r` ≈ 0.04 for points at least [`MIN_RADIUS`] from the centre, so
/// 1e-15 rad is reached in under 12 steps; the cap only guarantees termination.
pub const GEODETIC_MAX_ITER: usize = 30;

/// Smallest distance from the Earth's centre (m) accepted by [`ecef_to_geodetic`].
/// Below it the latitude iteration is not guaranteed to converge; GNSS points are
/// some 6 350 km from the centre.
pub const MIN_RADIUS: f64 = 1.0e6;

/// A geodetic position on WGS84.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Geodetic {
    /// Latitude φ, radians, north positive, in [−π/2, π/2].
    pub lat: f64,
    /// Longitude λ, radians, east positive.
    pub lon: f64,
    /// Ellipsoidal height h, metres.
    pub h: f64,
}

impl Geodetic {
    /// From latitude and longitude in radians and height in metres.
    pub fn new(lat: f64, lon: f64, h: f64) -> Self {
        Self { lat, lon, h }
    }

    /// From latitude and longitude in degrees and height in metres.
    pub fn from_degrees(lat_deg: f64, lon_deg: f64, h: f64) -> Self {
        Self::new(lat_deg.to_radians(), lon_deg.to_radians(), h)
    }

    /// Check the position: finite values, latitude in [−π/2, π/2].
    ///
    /// Errors: `NonFinite { id: "geodetic", field }`, `LatitudeOutOfRange { degrees }`.
    pub fn validate(&self) -> Result<()> {
        for (field, v) in [("lat", self.lat), ("lon", self.lon), ("h", self.h)] {
            if !v.is_finite() {
                return Err(CoreError::NonFinite {
                    id: "geodetic".to_owned(),
                    field,
                });
            }
        }
        if self.lat.abs() > std::f64::consts::FRAC_PI_2 {
            return Err(CoreError::LatitudeOutOfRange {
                degrees: self.lat.to_degrees(),
            });
        }
        Ok(())
    }
}

/// Longitude normalised into (−π, π] radians.
pub fn normalize_longitude(lon: f64) -> f64 {
    let pi = std::f64::consts::PI;
    let l = (lon + pi).rem_euclid(2.0 * pi) - pi;
    if l <= -pi { l + 2.0 * pi } else { l }
}

/// Prime-vertical radius of curvature `N(φ) = a / sqrt(1 − e²·sin²φ)`, m.
pub fn prime_vertical_radius(lat: f64) -> f64 {
    WGS84_A / (1.0 - WGS84_E2 * lat.sin().powi(2)).sqrt()
}

/// Meridian radius of curvature `M(φ) = a(1 − e²) / (1 − e²·sin²φ)^{3/2}`, m.
pub fn meridian_radius(lat: f64) -> f64 {
    WGS84_A * (1.0 - WGS84_E2) / (1.0 - WGS84_E2 * lat.sin().powi(2)).powf(1.5)
}

/// Geodetic → ECEF by the closed form (Source: IOGP Guidance Note 7-2, EPSG method
/// 9602): `X = (N + h)cosφ cosλ`, `Y = (N + h)cosφ sinλ`, `Z = ((1 − e²)N + h)sinφ`.
///
/// Errors: as [`Geodetic::validate`].
pub fn geodetic_to_ecef(g: &Geodetic) -> Result<[f64; 3]> {
    g.validate()?;
    let n = prime_vertical_radius(g.lat);
    let (sp, cp) = g.lat.sin_cos();
    let (sl, cl) = g.lon.sin_cos();
    Ok([
        (n + g.h) * cp * cl,
        (n + g.h) * cp * sl,
        ((1.0 - WGS84_E2) * n + g.h) * sp,
    ])
}

/// ECEF → geodetic by fixed-point iteration on the latitude,
/// `φ ← atan2(Z + e²·N(φ)·sinφ, p)` with `p = sqrt(X² + Y²)`, started from the
/// geocentric latitude and capped at [`GEODETIC_MAX_ITER`] steps; then
/// `h = p·cosφ + Z·sinφ − a·sqrt(1 − e²·sin²φ)`, which holds at the poles too.
/// Longitude `atan2(Y, X)` in (−π, π]; 0 on the polar axis.
///
/// Errors: `NonFinite { id: "ecef", field }`; `InvalidParameter { name: "ecef" }` for a
/// point closer than [`MIN_RADIUS`] to the centre.
pub fn ecef_to_geodetic(x: [f64; 3]) -> Result<Geodetic> {
    check_vec(x, "ecef")?;
    let [x, y, z] = x;
    let p = x.hypot(y);
    let r = p.hypot(z);
    if r < MIN_RADIUS {
        return Err(CoreError::InvalidParameter {
            name: "ecef",
            reason: format!(
                "point is {r:.3} m from the Earth's centre; at least {MIN_RADIUS} m is needed"
            ),
        });
    }
    let mut lat = z.atan2(p);
    for _ in 0..GEODETIC_MAX_ITER {
        let next = (z + WGS84_E2 * prime_vertical_radius(lat) * lat.sin()).atan2(p);
        let done = (next - lat).abs() <= 1.0e-15;
        lat = next;
        if done {
            break;
        }
    }
    let (sp, cp) = lat.sin_cos();
    let h = p * cp + z * sp - WGS84_A * (1.0 - WGS84_E2 * sp * sp).sqrt();
    let lon = if p == 0.0 { 0.0 } else { y.atan2(x) };
    Ok(Geodetic { lat, lon, h })
}

/// A local East-North-Up frame about an origin on WGS84.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct EnuFrame {
    /// The origin, geodetic (longitude normalised into (−π, π]).
    pub origin: Geodetic,
    /// The origin in ECEF, m.
    pub origin_ecef: [f64; 3],
    /// Rotation ECEF → ENU; rows are the unit East, North and Up vectors in ECEF:
    /// `E = (−sinλ, cosλ, 0)`, `N = (−sinφ cosλ, −sinφ sinλ, cosφ)`,
    /// `U = (cosφ cosλ, cosφ sinλ, sinφ)`.
    pub rotation: Matrix3<f64>,
}

impl EnuFrame {
    /// The ENU frame about `origin`.
    ///
    /// Errors: as [`Geodetic::validate`].
    pub fn new(origin: &Geodetic) -> Result<Self> {
        let origin_ecef = geodetic_to_ecef(origin)?;
        let (sp, cp) = origin.lat.sin_cos();
        let (sl, cl) = origin.lon.sin_cos();
        #[rustfmt::skip]
        let rotation = Matrix3::new(
            -sl,       cl,       0.0,
            -sp * cl, -sp * sl,  cp,
             cp * cl,  cp * sl,  sp,
        );
        Ok(Self {
            origin: Geodetic {
                lon: normalize_longitude(origin.lon),
                ..*origin
            },
            origin_ecef,
            rotation,
        })
    }

    /// ECEF (m) → ENU (m): `R·(X − X0)`.
    ///
    /// Errors: `NonFinite { id: "ecef", field }`.
    pub fn ecef_to_enu(&self, x: [f64; 3]) -> Result<[f64; 3]> {
        check_vec(x, "ecef")?;
        let d = Vector3::from(x) - Vector3::from(self.origin_ecef);
        Ok((self.rotation * d).into())
    }

    /// ENU (m) → ECEF (m): `X0 + Rᵀ·enu`.
    ///
    /// Errors: `NonFinite { id: "enu", field }`.
    pub fn enu_to_ecef(&self, enu: [f64; 3]) -> Result<[f64; 3]> {
        check_vec(enu, "enu")?;
        Ok(
            (Vector3::from(self.origin_ecef) + self.rotation.transpose() * Vector3::from(enu))
                .into(),
        )
    }

    /// Geodetic → ENU (m) in one step.
    ///
    /// Errors: as [`geodetic_to_ecef`].
    pub fn geodetic_to_enu(&self, g: &Geodetic) -> Result<[f64; 3]> {
        self.ecef_to_enu(geodetic_to_ecef(g)?)
    }

    /// A 3×3 covariance (m²) in ECEF rotated into ENU: `R·C·Rᵀ`.
    ///
    /// Errors: `NonFinite { id: "covariance", field }`, `InvalidParameter
    /// { name: "covariance" }` when not symmetric (relative tolerance 1e-9).
    pub fn covariance_to_enu(&self, c: &Matrix3<f64>) -> Result<Matrix3<f64>> {
        check_covariance(c)?;
        Ok(self.rotation * c * self.rotation.transpose())
    }

    /// A 3×3 covariance (m²) in ENU rotated into ECEF: `Rᵀ·C·R`.
    ///
    /// Errors: as [`EnuFrame::covariance_to_enu`].
    pub fn covariance_to_ecef(&self, c: &Matrix3<f64>) -> Result<Matrix3<f64>> {
        check_covariance(c)?;
        Ok(self.rotation.transpose() * c * self.rotation)
    }
}

/// A horizontal direction in an ENU frame, in both angle conventions.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Direction {
    /// Azimuth clockwise from north, radians in [0, 2π).
    pub azimuth: f64,
    /// Angle counter-clockwise from east, radians in (−π, π].
    pub angle_from_east: f64,
}

/// The direction of the horizontal vector `(east, north)` (m or any length unit):
/// azimuth `atan2(E, N)` clockwise from north and angle `atan2(N, E)` counter-clockwise
/// from east; `azimuth = π/2 − angle_from_east` (mod 2π).
///
/// Errors: `NonFinite { id: "direction", field }`; `InvalidParameter
/// { name: "direction" }` for a zero vector (no direction).
pub fn direction(east: f64, north: f64) -> Result<Direction> {
    for (field, v) in [("east", east), ("north", north)] {
        if !v.is_finite() {
            return Err(CoreError::NonFinite {
                id: "direction".to_owned(),
                field,
            });
        }
    }
    if east == 0.0 && north == 0.0 {
        return Err(CoreError::InvalidParameter {
            name: "direction",
            reason: "the horizontal vector (0, 0) has no direction".into(),
        });
    }
    let tau = std::f64::consts::TAU;
    let mut azimuth = east.atan2(north).rem_euclid(tau);
    if azimuth >= tau {
        azimuth = 0.0;
    }
    Ok(Direction {
        azimuth,
        angle_from_east: north.atan2(east),
    })
}

/// Azimuth (clockwise from north, [0, 2π)) from an angle counter-clockwise from east.
pub fn azimuth_from_angle(angle_from_east: f64) -> f64 {
    let tau = std::f64::consts::TAU;
    let a = (std::f64::consts::FRAC_PI_2 - angle_from_east).rem_euclid(tau);
    if a >= tau { 0.0 } else { a }
}

const XYZ: [&str; 3] = ["x", "y", "z"];
const ENU: [&str; 3] = ["e", "n", "u"];

fn check_vec(v: [f64; 3], what: &'static str) -> Result<()> {
    let names = if what == "enu" { ENU } else { XYZ };
    for (k, x) in v.iter().enumerate() {
        if !x.is_finite() {
            return Err(CoreError::NonFinite {
                id: what.to_owned(),
                field: names[k],
            });
        }
    }
    Ok(())
}

fn check_covariance(c: &Matrix3<f64>) -> Result<()> {
    const FIELDS: [[&str; 3]; 3] = [["xx", "xy", "xz"], ["yx", "yy", "yz"], ["zx", "zy", "zz"]];
    for i in 0..3 {
        for j in 0..3 {
            if !c[(i, j)].is_finite() {
                return Err(CoreError::NonFinite {
                    id: "covariance".to_owned(),
                    field: FIELDS[i][j],
                });
            }
        }
    }
    let scale = c.amax();
    for (i, j) in [(0, 1), (0, 2), (1, 2)] {
        if (c[(i, j)] - c[(j, i)]).abs() > 1.0e-9 * scale {
            return Err(CoreError::InvalidParameter {
                name: "covariance",
                reason: format!(
                    "not symmetric: [{i}][{j}] = {} but [{j}][{i}] = {}",
                    c[(i, j)],
                    c[(j, i)]
                ),
            });
        }
    }
    Ok(())
}
