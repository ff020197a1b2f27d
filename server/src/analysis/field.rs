//! A strain field from points and displacements: points checked and turned into the
//! core's point set, then the offline pipeline's [`run`](crate::pipeline::run) writes
//! its JSON result document, which is returned as a JSON value.
//!
//! The document (see [`crate::output::JsonSink`]) states `length_unit`,
//! `strain_unit`, the shear and angle conventions and the caution; it has `columns`
//! (name, unit and meaning of every column), one member per section (`elements`,
//! `groups`, `neighbourhoods` or `network`, and `rejected`) and a `summary`.

use kinema_core::PointSet;
use kinema_core::geodesy::EnuFrame;
use kinema_core::points::Point;
use serde_json::Value;

use super::AnalysisError;
use crate::cli::analyze::Request;
use crate::input::Points;
use crate::input::geodetic::{EnuInfo, OriginSource};
use crate::output::{Cell, Footer, Header, JsonSink, RowSink, Section};

/// One point of a strain field, metres.
#[derive(Debug, Clone, PartialEq)]
pub struct FieldPoint {
    /// Point ID.
    pub id: String,
    /// Reference coordinates, metres (2 or 3 values).
    pub x: Vec<f64>,
    /// Displacement from the reference coordinates, metres.
    pub u: Vec<f64>,
    /// Standard deviations of the displacement components, metres.
    pub sigma: Option<Vec<f64>>,
}

fn arr<const D: usize>(v: &[f64]) -> Option<[f64; D]> {
    v.try_into().ok()
}

fn set<const D: usize>(pts: Vec<FieldPoint>) -> Result<PointSet<D>, AnalysisError> {
    let mut out = Vec::with_capacity(pts.len());
    for p in pts {
        let bad = || AnalysisError::Internal(format!("point {} does not have {D} values", p.id));
        let x = arr::<D>(&p.x).ok_or_else(bad)?;
        let u = arr::<D>(&p.u).ok_or_else(bad)?;
        let mut q = Point::new(p.id.clone(), x, u);
        if let Some(s) = &p.sigma {
            q = q.with_sigma(arr::<D>(s).ok_or_else(bad)?);
        }
        out.push(q);
    }
    PointSet::new(out).map_err(|e| AnalysisError::NotComputable(e.to_string()))
}

/// The core's point set of `dimension` (2 or 3) from checked points.
pub fn points(dimension: usize, pts: Vec<FieldPoint>) -> Result<Points, AnalysisError> {
    match dimension {
        2 => Ok(Points::Plane(set::<2>(pts)?)),
        3 => Ok(Points::Space(set::<3>(pts)?)),
        d => Err(AnalysisError::Internal(format!("dimension {d}"))),
    }
}

/// Mark `req` as computed in the East-North-Up `frame`: rows of 2D runs get the
/// azimuth of the major principal direction (clockwise from north) beside `theta1`,
/// and the header names the frame and its WGS84 origin.
pub fn set_enu(req: &mut Request, frame: EnuFrame) {
    let horizontal = req.points.dimension() == 2;
    req.enu = Some(EnuInfo {
        frame,
        origin_source: OriginSource::Given,
        horizontal,
    });
    let o = frame.origin;
    let p = &mut req.header.parameters;
    p.push(("frame".into(), Cell::Text("ENU".into())));
    p.push((
        "axes".into(),
        Cell::Text(if horizontal {
            "x = east, y = north".into()
        } else {
            "x = east, y = north, z = up (ellipsoid normal)".into()
        }),
    ));
    p.push(("enu_origin_lat_deg".into(), Cell::Num(o.lat.to_degrees())));
    p.push(("enu_origin_lon_deg".into(), Cell::Num(o.lon.to_degrees())));
    p.push(("enu_origin_h_m".into(), Cell::Num(o.h)));
}

/// Run the estimator of `req` and return the result document.
///
/// # Errors
/// [`AnalysisError::NotComputable`] when the estimator cannot compute on the data (the
/// core's reason), [`AnalysisError::Parameters`] for parameters that do not fit it.
pub fn run(req: &Request) -> Result<Value, AnalysisError> {
    let (bytes, _) = run_bytes(req)?;
    serde_json::from_slice(&bytes)
        .map_err(|e| AnalysisError::Internal(format!("result document: {e}")))
}

/// Run the estimator of `req`: the result document as JSON bytes (as [`run`] gives it,
/// without parsing it back) and its footer (counts of accepted and rejected regions).
///
/// # Errors
/// As [`run`].
pub fn run_bytes(req: &Request) -> Result<(Vec<u8>, Footer), AnalysisError> {
    let mut sink = FooterSink {
        inner: JsonSink::new(Vec::new()),
        footer: Footer::default(),
    };
    crate::pipeline::run(req, &mut sink, "result document")?;
    Ok((sink.inner.into_inner(), sink.footer))
}

/// A JSON sink that keeps a copy of the footer it is finished with.
struct FooterSink {
    inner: JsonSink<Vec<u8>>,
    footer: Footer,
}

impl RowSink for FooterSink {
    fn begin(&mut self, header: &Header, sections: &[Section]) -> std::io::Result<()> {
        self.inner.begin(header, sections)
    }
    fn section(&mut self, name: &str) -> std::io::Result<()> {
        self.inner.section(name)
    }
    fn row(&mut self, cells: &[Cell]) -> std::io::Result<()> {
        self.inner.row(cells)
    }
    fn finish(&mut self, footer: &Footer) -> std::io::Result<()> {
        self.footer = footer.clone();
        self.inner.finish(footer)
    }
}

/// Why no region of a run has a result, from its footer.
pub fn footer_reasons(footer: &Footer) -> String {
    if footer.rejected_by_reason.is_empty() {
        "no region could be computed".to_owned()
    } else {
        let reasons: Vec<&str> = footer
            .rejected_by_reason
            .iter()
            .map(|(r, _)| r.as_str())
            .collect();
        format!("no region could be computed: {}", reasons.join("; "))
    }
}

/// The number of regions with a result (`summary.accepted`) of a document.
pub fn accepted(doc: &Value) -> u64 {
    doc["summary"]["accepted"].as_u64().unwrap_or(0)
}

/// The distinct reasons of the `rejected` section of a document, joined for a message.
pub fn rejection_reasons(doc: &Value) -> String {
    let mut reasons: Vec<&str> = doc["rejected"]
        .as_array()
        .into_iter()
        .flatten()
        .filter_map(|r| r["reason"].as_str())
        .collect();
    reasons.sort_unstable();
    reasons.dedup();
    if reasons.is_empty() {
        "no region could be computed".to_owned()
    } else {
        format!("no region could be computed: {}", reasons.join("; "))
    }
}
