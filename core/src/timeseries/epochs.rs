//! Epochs: one measurement of the whole network at one instant.

use std::collections::HashSet;

use serde::{Deserialize, Serialize};

use crate::error::{CoreError, Result};
use crate::points::{Point, PointSet};

/// Seconds in one day (86 400 s; leap seconds are not counted, as in Unix time).
pub const SECONDS_PER_DAY: f64 = 86_400.0;

/// Days in one Julian year (365.25 d), the year used for every rate "per year".
pub const DAYS_PER_JULIAN_YEAR: f64 = 365.25;

/// One measured point of an epoch: its ID, measured position and stated precision.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EpochPoint<const D: usize> {
    /// Point identifier (1–64 chars of `A-Za-z0-9._-`), the same ID in every epoch.
    pub id: String,
    /// Measured coordinates at this epoch, metres, in the structure's frame.
    #[serde(with = "crate::points::serde_arrays")]
    pub x: [f64; D],
    /// Standard deviation of each measured coordinate, metres, per axis; `None`
    /// when not stated.
    #[serde(default, with = "crate::points::serde_opt_arrays")]
    pub sigma: Option<[f64; D]>,
}

impl<const D: usize> EpochPoint<D> {
    /// A measured point without stated precision.
    pub fn new(id: impl Into<String>, x: [f64; D]) -> Self {
        Self {
            id: id.into(),
            x,
            sigma: None,
        }
    }

    /// The same point with a standard deviation per axis, metres.
    pub fn with_sigma(mut self, sigma: [f64; D]) -> Self {
        self.sigma = Some(sigma);
        self
    }
}

/// One epoch of a monitoring network.
///
/// - `label`: the epoch's name (any non-empty text, unique within a series);
/// - `time_s`: instant of the measurement, seconds since 1970-01-01T00:00:00Z (UTC,
///   Unix time without leap seconds); the server converts RFC 3339 timestamps;
/// - `points`: measured positions, metres; a point of the network that was not
///   measured at this epoch is simply absent;
/// - `temperature_c`: recorded temperature of the structure, degrees Celsius, used
///   only by temperature compensation.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Epoch<const D: usize> {
    /// Epoch label, unique within the series.
    pub label: String,
    /// Seconds since 1970-01-01T00:00:00Z (UTC).
    pub time_s: f64,
    /// Measured points.
    pub points: Vec<EpochPoint<D>>,
    /// Recorded temperature, °C.
    #[serde(default)]
    pub temperature_c: Option<f64>,
}

impl<const D: usize> Epoch<D> {
    /// An epoch without temperature.
    pub fn new(label: impl Into<String>, time_s: f64, points: Vec<EpochPoint<D>>) -> Self {
        Self {
            label: label.into(),
            time_s,
            points,
            temperature_c: None,
        }
    }

    /// The same epoch with a recorded temperature, °C.
    pub fn with_temperature(mut self, temperature_c: f64) -> Self {
        self.temperature_c = Some(temperature_c);
        self
    }

    /// Check the epoch on its own: non-empty label; finite time and temperature;
    /// every point with a valid, unique ID, finite coordinates and positive finite
    /// standard deviations.
    ///
    /// # Errors
    /// - [`CoreError::InvalidParameter`] (`epoch label`) for an empty label;
    /// - [`CoreError::NonFinite`] with `id` = the epoch label and `field` `time_s`
    ///   or `temperature_c`;
    /// - [`CoreError::InEpoch`] wrapping the point problem ([`CoreError::Empty`],
    ///   [`CoreError::InvalidId`], [`CoreError::NonFinite`] with field `x`/`y`/`z`
    ///   or `sigma_x`…, [`CoreError::InvalidParameter`] for a non-positive sigma,
    ///   [`CoreError::DuplicatePoint`]).
    pub fn validate(&self) -> Result<()> {
        if self.label.is_empty() {
            return Err(CoreError::InvalidParameter {
                name: "epoch label",
                reason: "empty".into(),
            });
        }
        if !self.time_s.is_finite() {
            return Err(CoreError::NonFinite {
                id: self.label.clone(),
                field: "time_s",
            });
        }
        if let Some(t) = self.temperature_c
            && !t.is_finite()
        {
            return Err(CoreError::NonFinite {
                id: self.label.clone(),
                field: "temperature_c",
            });
        }
        // PointSet validation checks IDs, finiteness, sigma and duplicates; the
        // displacement is irrelevant here and set to zero.
        let pts: Vec<Point<D>> = self
            .points
            .iter()
            .map(|p| Point {
                id: p.id.clone(),
                x: p.x,
                u: [0.0; D],
                sigma: p.sigma,
                cov: None,
            })
            .collect();
        PointSet::new(pts).map(|_| ()).map_err(|e| self.wrap(e))
    }

    /// Wrap an error about this epoch's data with the epoch label.
    pub(crate) fn wrap(&self, e: CoreError) -> CoreError {
        CoreError::InEpoch {
            epoch: self.label.clone(),
            source: Box::new(e),
        }
    }

    /// Point IDs of this epoch.
    pub(crate) fn ids(&self) -> HashSet<&str> {
        self.points.iter().map(|p| p.id.as_str()).collect()
    }
}
