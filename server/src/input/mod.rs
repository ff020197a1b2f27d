//! Reading input files: monitoring points (CSV or JSON), and the element and group
//! files used by `--method elements` and `--method groups`, and the gauge readings
//! of `--method rosette`.
//!
//! Everything is converted to metres here, with the length unit declared on the
//! command line. Every malformed input becomes an [`InputError`] whose message
//! starts with `file:line:column`.
//!
//! The format is chosen by content: a file whose first non-blank character is `{`
//! is JSON, anything else is CSV.

mod csv_points;
mod elements;
mod epochs;
mod error;
pub mod geodetic;
mod groups;
mod json_doc;
mod json_points;
mod rosette;
mod source;

use std::path::Path;

use kinema_core::{Point, PointSet};

pub use elements::{ElementRow, read_elements};
pub use epochs::{EpochSeries, format_rfc3339, parse_rfc3339, read_epochs};
pub use error::InputError;
pub use groups::{GroupRows, read_groups};
pub use rosette::{RosetteRows, read_rosettes};

use crate::units::LengthUnit;

/// Points read from a file, in metres, validated by [`PointSet::new`].
/// The dimension comes from the file: a `z` column (CSV) or `z` member (JSON) makes it 3D.
#[derive(Debug, Clone, PartialEq)]
pub enum Points {
    /// Plane network: `x`, `y` and `ux`, `uy`.
    Plane(PointSet<2>),
    /// Spatial network: `x`, `y`, `z` and `ux`, `uy`, `uz`.
    Space(PointSet<3>),
}

impl Points {
    /// 2 or 3.
    pub fn dimension(&self) -> usize {
        match self {
            Self::Plane(_) => 2,
            Self::Space(_) => 3,
        }
    }

    /// Number of points.
    pub fn len(&self) -> usize {
        match self {
            Self::Plane(p) => p.len(),
            Self::Space(p) => p.len(),
        }
    }

    /// Always false: a validated set holds at least one point.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// True when every point states its precision: standard deviations (`sigma_*`) or a
    /// full covariance (`cov_*`, or per-epoch `sigma_*_ref`/`sigma_*_cur`). The old name
    /// of [`Self::all_have_precision`], kept for its callers.
    pub fn all_have_sigma(&self) -> bool {
        self.all_have_precision()
    }

    /// True when every point states its precision in either form
    /// ([`kinema_core::Point::has_precision`]).
    pub fn all_have_precision(&self) -> bool {
        match self {
            Self::Plane(p) => p.points().iter().all(Point::has_precision),
            Self::Space(p) => p.points().iter().all(Point::has_precision),
        }
    }

    /// True when some point states a full covariance (`cov_*` or per-epoch columns)
    /// rather than per-axis standard deviations.
    pub fn any_has_covariance(&self) -> bool {
        match self {
            Self::Plane(p) => p.points().iter().any(|q| q.cov.is_some()),
            Self::Space(p) => p.points().iter().any(|q| q.cov.is_some()),
        }
    }

    /// Identifier of the point at `index` (input order), if any.
    pub fn id(&self, index: usize) -> Option<&str> {
        match self {
            Self::Plane(p) => p.points().get(index).map(|q| q.id.as_str()),
            Self::Space(p) => p.points().get(index).map(|q| q.id.as_str()),
        }
    }
}

/// How to read a points file.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct ReadOptions {
    /// Declared unit of coordinates, displacements and standard deviations in the file.
    pub length_unit: LengthUnit,
    /// Show a progress bar on stderr for large files (only when stderr is a terminal).
    pub progress: bool,
}

/// Read a points file (CSV or JSON, chosen by content) into metres and validate it.
///
/// CSV forms (header required, names case-sensitive, any column order):
/// - `id,x,y[,z],ux,uy[,uz]`: reference coordinates and displacements;
/// - `id,x_ref,y_ref[,z_ref],x_cur,y_cur[,z_cur]`: reference and current coordinates;
///   the displacement is `current − reference`, subtracted in the declared unit and
///   then converted once. The subtraction is exact whenever the two coordinates are
///   within a factor of two of each other (Sterbenz lemma), which holds for any
///   realistic movement of a point away from the origin.
///
/// plus, optionally, one form of precision (all columns of a form or none):
/// - `sigma_x,sigma_y[,sigma_z]`: standard deviation per axis, in the length unit;
/// - `cov_xx,cov_xy,cov_yy` (2D) or `cov_xx,cov_xy,cov_xz,cov_yy,cov_yz,cov_zz` (3D): the
///   full covariance of the displacement in the length unit squared (mm² → m² is ÷10⁶),
///   symmetric positive definite;
/// - `sigma_x_ref,sigma_y_ref[,sigma_z_ref]` with `sigma_x_cur,sigma_y_cur[,sigma_z_cur]`:
///   standard deviations of the reference and current coordinates, combined into the
///   displacement covariance `C_ref + C_cur`
///   ([`kinema_core::uncertainty::covariance::displacement_covariance`]). The two epochs
///   are taken as uncorrelated: the file has no cross-covariance.
///
/// `point_id` may stand for `id`.
///
/// JSON: `{"length_unit": "m"|"mm" (optional), "points": [{"id": "T1" or 1, "x", "y",
/// ["z"], "ux", "uy", ["uz"], precision}]}` with the same three optional forms of
/// precision as members (`"sigma_x"` …, `"cov_xx"` …, `"sigma_x_ref"` … `"sigma_x_cur"`
/// …); unknown members are errors and a declared `length_unit` must agree with
/// `options.length_unit`.
pub fn read_points(path: &Path, options: &ReadOptions) -> Result<Points, InputError> {
    let display = path.display().to_string();
    let src = source::open(path, &display, options.progress)?;
    let points = match src {
        source::Source::Json(bytes) => json_points::parse(&bytes, &display, options.length_unit)?,
        source::Source::Csv(reader, len) => {
            csv_points::parse(reader, len, &display, options.length_unit, path)?
        }
        source::Source::Blank => return Err(InputError::Empty { path: display }),
    };
    Ok(points)
}

/// Points as parsed, before validation by the core.
pub(crate) enum Parsed {
    Plane(Vec<Point<2>>),
    Space(Vec<Point<3>>),
}

impl Parsed {
    /// Validate with [`PointSet::new`] (finite values, valid unique IDs, positive sigma).
    /// A duplicate ID comes back as `InputError::Core(CoreError::DuplicatePoint)`;
    /// the CSV reader then looks up its lines.
    pub(crate) fn validate(self, path: &str) -> Result<Points, InputError> {
        let core = |source| InputError::Core {
            path: path.to_owned(),
            source,
        };
        match self {
            Self::Plane(p) if p.is_empty() => Err(no_points(path)),
            Self::Space(p) if p.is_empty() => Err(no_points(path)),
            Self::Plane(p) => PointSet::new(p).map(Points::Plane).map_err(core),
            Self::Space(p) => PointSet::new(p).map(Points::Space).map_err(core),
        }
    }
}

/// A covariance entry in the declared length unit squared, converted to m² in one
/// correctly rounded step (mm²: ÷10⁶).
pub(crate) fn to_square_metres(unit: LengthUnit, v: f64) -> f64 {
    match unit {
        LengthUnit::Metre => v,
        LengthUnit::Millimetre => v / 1e6,
    }
}

fn no_points(path: &str) -> InputError {
    InputError::NoRows {
        path: path.to_owned(),
        what: "points",
    }
}

#[cfg(test)]
mod tests;
