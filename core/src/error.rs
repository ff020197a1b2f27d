//! Typed errors of the computation core.
//!
//! Every failure on user data is one of these variants; the core never panics on
//! user data. The server maps them to RFC 9457 problem details in one place.

use thiserror::Error;

/// Everything that can go wrong inside `kinema-core`.
///
/// Variants name the offending point, element or parameter so that a caller can
/// point the user at the bad value.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum CoreError {
    /// A coordinate, displacement, precision or parameter is NaN or infinite.
    #[error("point `{id}`: {field} is not a finite number")]
    NonFinite {
        /// Point (or element/group) identifier.
        id: String,
        /// Name of the field, e.g. `x`, `uy`, `sigma_x`.
        field: &'static str,
    },
    /// Two points share one identifier.
    #[error("duplicate point id `{id}`")]
    DuplicatePoint {
        /// The repeated identifier.
        id: String,
    },
    /// A point identifier is empty or not made of `A-Za-z0-9._-` (1–64 chars).
    #[error("invalid point id `{id}`: {reason}")]
    InvalidId {
        /// The offending identifier (possibly truncated for display by the caller).
        id: String,
        /// Why it is invalid.
        reason: String,
    },
    /// Not enough points for the requested estimate.
    #[error("{context}: need at least {needed} points, got {got}")]
    TooFewPoints {
        /// What was being estimated (element, group, neighbourhood …).
        context: String,
        /// Minimum count.
        needed: usize,
        /// Count supplied.
        got: usize,
    },
    /// A point has the wrong number of coordinates for the analysis dimension.
    #[error("point `{id}` has {got} coordinates, expected {expected}")]
    DimensionMismatch {
        /// Point identifier.
        id: String,
        /// Dimension of the analysis (2 or 3).
        expected: usize,
        /// Dimension found.
        got: usize,
    },
    /// An element or group refers to a point that is not in the point set.
    #[error("{context} refers to unknown point `{id}`")]
    UnknownPoint {
        /// The element or group that holds the reference.
        context: String,
        /// The missing point identifier.
        id: String,
    },
    /// The points of a group are collinear (2D) or coplanar (3D), so the gradient
    /// is not determined in every direction.
    #[error(
        "{context}: points are {shape} (moment-matrix condition {condition:.3e}); the gradient is not determined"
    )]
    DegenerateGeometry {
        /// The group, neighbourhood or network concerned.
        context: String,
        /// `collinear` or `coplanar` (or `coincident`).
        shape: &'static str,
        /// Ratio of the smallest to the largest eigenvalue of the centred moment matrix.
        condition: f64,
    },
    /// A user-supplied or triangulated element has (near) zero area or volume, or
    /// repeats a vertex.
    #[error("element `{element}` is degenerate: {reason}")]
    DegenerateElement {
        /// Element identifier.
        element: String,
        /// Why (zero area, repeated vertex …).
        reason: String,
    },
    /// A parameter is outside its allowed range.
    #[error("invalid parameter `{name}`: {reason}")]
    InvalidParameter {
        /// Parameter name as the user sees it.
        name: &'static str,
        /// What is wrong with it.
        reason: String,
    },
    /// The bounded symmetric eigen-solver did not converge within its iteration cap.
    #[error("eigen-solver did not converge within {max_iter} iterations")]
    EigenNoConvergence {
        /// The iteration cap that was reached.
        max_iter: usize,
    },
    /// The input grid is malformed (wrong number of cells, too small, bad spacing).
    #[error("grid: {reason}")]
    InvalidGrid {
        /// What is wrong.
        reason: String,
    },
    /// The input is empty.
    #[error("no {what} given")]
    Empty {
        /// What was expected (points, elements, groups).
        what: &'static str,
    },
    /// A rosette has fewer gauges than the three needed for a plane strain state.
    #[error("rosette: need at least {needed} gauges, got {got}")]
    TooFewGauges {
        /// Minimum count (3).
        needed: usize,
        /// Count supplied.
        got: usize,
    },
    /// Two gauges of one rosette share an identifier.
    #[error("duplicate gauge id `{id}`")]
    DuplicateGauge {
        /// The repeated identifier.
        id: String,
    },
    /// The gauge directions of a rosette do not determine the plane strain state:
    /// angles coincide modulo 180°, or the layout's condition number is too large.
    #[error("rosette layout is near-singular (gauges {gauges}): {reason}")]
    SingularRosette {
        /// The gauges concerned, comma-separated.
        gauges: String,
        /// Which angles coincide, or the condition number against its threshold.
        reason: String,
    },
    /// A material preset ID is not known.
    #[error("unknown material `{id}`; known materials: {known}")]
    UnknownMaterial {
        /// The ID asked for.
        id: String,
        /// The known IDs, comma-separated.
        known: String,
    },
    /// A geodetic latitude lies outside [−90°, 90°].
    #[error("latitude {degrees}° is outside [-90°, 90°]")]
    LatitudeOutOfRange {
        /// The offending latitude, in degrees.
        degrees: f64,
    },
    /// The epochs of a time series are not in strictly increasing time order
    /// (an earlier or equal time follows a later one).
    #[error(
        "epoch `{next}` (t = {next_time_s} s) does not come after epoch `{previous}` (t = {previous_time_s} s); epochs must be strictly increasing in time"
    )]
    EpochsOutOfOrder {
        /// Label of the epoch listed first.
        previous: String,
        /// Its time, seconds since 1970-01-01T00:00:00Z.
        previous_time_s: f64,
        /// Label of the epoch listed next, whose time is not later.
        next: String,
        /// Its time, seconds since 1970-01-01T00:00:00Z.
        next_time_s: f64,
    },
    /// Two epochs of one time series share a label.
    #[error("duplicate epoch label `{label}`")]
    DuplicateEpoch {
        /// The repeated label.
        label: String,
    },
    /// The chosen baseline epoch is not in the series.
    #[error("baseline epoch `{label}` is not in the series; epochs: {known}")]
    BaselineNotInSeries {
        /// The label asked for.
        label: String,
        /// The labels of the series, comma-separated.
        known: String,
    },
    /// Temperature compensation was asked for but an epoch has no temperature.
    #[error("epoch `{epoch}` has no temperature, needed for temperature compensation")]
    MissingTemperature {
        /// Label of the epoch without a temperature.
        epoch: String,
    },
    /// A problem with the data of one epoch of a time series (for example a
    /// non-finite coordinate or a repeated point ID), naming the epoch.
    #[error("epoch `{epoch}`: {source}")]
    InEpoch {
        /// Label of the epoch.
        epoch: String,
        /// The problem itself, naming the point or field.
        #[source]
        source: Box<CoreError>,
    },
    /// A covariance matrix is not a covariance: wrong size, a non-finite entry, not
    /// symmetric, or not positive semi-definite.
    #[error("covariance `{name}` is invalid: {reason}")]
    InvalidCovariance {
        /// Which covariance (e.g. `cov_ref`, `cov_gradient`, `vertex_cov[2]`).
        name: String,
        /// What is wrong, with the offending value.
        reason: String,
    },
    /// A cofactor or covariance matrix that must be inverted is singular (or so badly
    /// conditioned that its inverse is meaningless).
    #[error("covariance `{name}` is singular: {reason}")]
    SingularCovariance {
        /// Which matrix (e.g. `strain cofactor`).
        name: String,
        /// The eigenvalue ratio or pivot that shows it, against its threshold.
        reason: String,
    },
}

/// Result alias for the core.
pub type Result<T> = std::result::Result<T, CoreError>;
