//! The computation step of `kinema analyze`: run the chosen estimator of
//! `kinema-core` on the prepared request and stream one row per region into the sink.
//!
//! Every region's gradient goes through [`kinema_core::kinematics::analyze2`] /
//! [`analyze3`](kinema_core::kinematics::analyze3), and the row carries the strain
//! state ([`columns`]) plus the estimator's own figures (shape or fit statistics).
//! Regions screened out by the estimator — or whose gradient the kinematics refuse
//! (e.g. an inverted element) — go to the `rejected` section with their reason.
//!
//! The Delaunay and neighbourhood methods stream: nothing per element is kept but
//! the rejected ones, so 10⁶ points stay within a few hundred bytes per point.

pub mod columns;
pub mod lattice;
pub mod rosette;
pub mod series;
pub mod stress;

use std::collections::BTreeMap;
use std::io;

use kinema_core::estimate::delaunay::{
    ElementOutcome, delaunay_triangles, triangle_label, triangle_strains_with,
};
use kinema_core::estimate::elements::{ElementSpec, OrientationPolicy, element_strains};
use kinema_core::estimate::grid::grid_gradients;
use kinema_core::estimate::lsq::{DistanceWeight, FitOptions, Group, fit_groups};
use kinema_core::estimate::neighbourhood::{Centres, Selection, fit_neighbourhoods_with};
use kinema_core::estimate::network::fit_network;
use kinema_core::estimate::quality::{QualityThresholds, TetrahedronQuality, TriangleQuality};
use kinema_core::estimate::{FitStats, GradientEstimate, Rejected};
use kinema_core::kinematics::{KinematicsOptions, analyze2, analyze3};
use kinema_core::significance::{
    DeformationParameters, TestResult, VarianceFactor, noncentrality, test_zero_strain,
};
use kinema_core::uncertainty::element::element_gradient_covariance_from_points;
use kinema_core::uncertainty::{IsotropyTest, propagate2, propagate3};
use kinema_core::{CoreError, PointSet};
use nalgebra::{DMatrix, SMatrix};

use self::columns::{Extra, Units};
use crate::cli::CliError;
use crate::cli::analyze::{Method, Request, Weighting};
use crate::input::Points;
use crate::output::{self, Cell, Column, Footer, RowSink, Section};

/// Name of the main section for each method.
fn section_name(method: Method) -> &'static str {
    match method {
        Method::Delaunay | Method::Elements => "elements",
        Method::Groups => "groups",
        Method::Neighbourhood => "neighbourhoods",
        Method::Grid => "grid_nodes",
        Method::Network => "network",
        Method::Rosette => rosette::SECTION,
    }
}

fn extra_for(method: Method) -> Extra {
    match method {
        Method::Delaunay | Method::Elements => Extra::Shape,
        Method::Groups | Method::Neighbourhood | Method::Network => Extra::Fit,
        Method::Grid | Method::Rosette => Extra::None,
    }
}

/// Marker for the dimension-specific parts of a row.
pub struct Dim<const D: usize>;

/// The strain columns and cells of one dimension.
pub trait StrainRow<const D: usize> {
    /// All columns of a main section.
    fn columns(u: Units, extra: Extra) -> Vec<Column>;
    /// Append the strain cells for gradient `g`; returns whether small strain is adequate.
    fn strain_cells(
        g: &SMatrix<f64, D, D>,
        opts: &KinematicsOptions,
        u: Units,
        row: &mut Vec<Cell>,
    ) -> Result<bool, CoreError>;
    /// Append the shape cells of the element with these vertices (metres).
    fn shape_cells(vertices: &[[f64; D]], row: &mut Vec<Cell>);
    /// Columns of the precision block.
    fn precision_columns(u: Units) -> Vec<Column>;
    /// Append the precision cells for gradient `g` with covariance `prec`; returns the
    /// test's verdict when one was made.
    fn precision_cells(
        g: &SMatrix<f64, D, D>,
        prec: Option<&GradientPrecision>,
        stats: &StatOptions,
        u: Units,
        row: &mut Vec<Cell>,
    ) -> Option<bool>;
}

/// The covariance of `vec(G)` of one region (row-major, dimensionless) and how its
/// variance factor is known (a-priori, or estimated from the fit's redundancy).
#[derive(Debug, Clone)]
pub struct GradientPrecision {
    /// Covariance of `vec(G)`, at the variance factor `factor`.
    pub cov: DMatrix<f64>,
    /// The variance factor the covariance carries.
    pub factor: VarianceFactor,
}

/// Options of the precision block: the isotropy screen and the test level.
#[derive(Debug, Clone, Copy)]
pub struct StatOptions {
    /// When the principal direction counts as not meaningful.
    pub isotropy: IsotropyTest,
    /// Significance level of the strain test.
    pub alpha: f64,
    /// Trust the a-priori variance factor 1 (chi-square) even when a fit estimates one.
    pub trust_apriori: bool,
    /// Non-centrality λ₀(alpha, [`MDS_POWER`], m) for m = 3 (2D) and m = 6 (3D).
    pub lambda0: [f64; 2],
}

/// Residuals at or below this many ulp of the largest displacement make a fit "perfect"
/// (no usable a-posteriori variance factor).
pub const PERFECT_FIT_ULPS: f64 = 1000.0;

/// Degrees of freedom of the F test of a fit: `⌊r_eff⌋`, at least 1 (equal to the
/// redundancy without distance weighting).
fn effective_dof<const D: usize>(f: &FitStats<D>) -> usize {
    let r = f.effective_redundancy.floor();
    if r.is_finite() && r >= 1.0 {
        r as usize
    } else {
        f.redundancy.max(1)
    }
}

/// Power of the strain test at which the minimal detectable strain is given (Baarda's
/// customary 80 %, common practice).
pub const MDS_POWER: f64 = 0.80;

/// Minimal detectable strain in the least favourable direction of strain space:
/// `√(λ₀ · q_max)` with `q_max` the largest eigenvalue of the covariance of the strain
/// components and `λ₀(α, β, m)` the non-centrality of the test (Baarda 1968).
fn mds_from(eigenvalues: impl Iterator<Item = f64>, lambda0: f64) -> Option<f64> {
    let qmax = eigenvalues.fold(f64::NEG_INFINITY, f64::max);
    (qmax.is_finite() && qmax >= 0.0).then(|| (lambda0 * qmax).sqrt())
}

// Fixed-size matrices on purpose: nalgebra's dynamic-size decompositions have given
// wrong factors here (see STACK notes); the fixed-size symmetric eigen-solver is the
// one the kinematics use and test.
fn mds_worst2(c: &[[f64; 3]; 3], lambda0: f64) -> Option<f64> {
    let m = nalgebra::Matrix3::from_fn(|i, j| c[i][j]);
    let eig = m.try_symmetric_eigen(f64::EPSILON, 1000)?;
    mds_from(eig.eigenvalues.iter().copied(), lambda0)
}

fn mds_worst3(c: &[[f64; 6]; 6], lambda0: f64) -> Option<f64> {
    let m = nalgebra::Matrix6::from_fn(|i, j| c[i][j]);
    let eig = m.try_symmetric_eigen(f64::EPSILON, 1000)?;
    mds_from(eig.eigenvalues.iter().copied(), lambda0)
}

fn test_of<const D: usize>(
    g: &SMatrix<f64, D, D>,
    p: &GradientPrecision,
    alpha: f64,
) -> Option<TestResult> {
    let s0 = p.factor.sigma0_sq();
    if !(s0.is_finite() && s0 > 0.0) {
        return None;
    }
    let cofactor = &p.cov / s0;
    DeformationParameters::from_gradient(g, &cofactor, p.factor)
        .and_then(|dp| test_zero_strain(&dp, alpha))
        .ok()
}

impl StrainRow<2> for Dim<2> {
    fn columns(u: Units, extra: Extra) -> Vec<Column> {
        columns::columns2(u, extra)
    }
    fn strain_cells(
        g: &SMatrix<f64, 2, 2>,
        opts: &KinematicsOptions,
        u: Units,
        row: &mut Vec<Cell>,
    ) -> Result<bool, CoreError> {
        let k = analyze2(g, opts)?;
        columns::strain_cells2(&k, u, row);
        Ok(k.adequacy.adequate)
    }
    fn precision_columns(u: Units) -> Vec<Column> {
        columns::uncertainty_columns2(u)
    }
    fn precision_cells(
        g: &SMatrix<f64, 2, 2>,
        prec: Option<&GradientPrecision>,
        stats: &StatOptions,
        u: Units,
        row: &mut Vec<Cell>,
    ) -> Option<bool> {
        let un = prec.and_then(|p| propagate2(g, &p.cov, &stats.isotropy).ok());
        let test = prec.and_then(|p| test_of(g, p, stats.alpha));
        let mds = un
            .as_ref()
            .and_then(|x| mds_worst2(&x.cov_strain, stats.lambda0[0]));
        columns::uncertainty_cells2(un.as_ref(), mds, test.as_ref(), u, row);
        test.map(|t| t.significant)
    }
    fn shape_cells(v: &[[f64; 2]], row: &mut Vec<Cell>) {
        match v {
            [a, b, c] => {
                columns::triangle_cells(&TriangleQuality::from_vertices([*a, *b, *c]), row)
            }
            _ => row.extend([Cell::Empty, Cell::Empty]),
        }
    }
}

impl StrainRow<3> for Dim<3> {
    fn columns(u: Units, extra: Extra) -> Vec<Column> {
        columns::columns3(u, extra)
    }
    fn strain_cells(
        g: &SMatrix<f64, 3, 3>,
        opts: &KinematicsOptions,
        u: Units,
        row: &mut Vec<Cell>,
    ) -> Result<bool, CoreError> {
        let k = analyze3(g, opts)?;
        columns::strain_cells3(&k, u, row);
        Ok(k.adequacy.adequate)
    }
    fn precision_columns(u: Units) -> Vec<Column> {
        columns::uncertainty_columns3(u)
    }
    fn precision_cells(
        g: &SMatrix<f64, 3, 3>,
        prec: Option<&GradientPrecision>,
        stats: &StatOptions,
        u: Units,
        row: &mut Vec<Cell>,
    ) -> Option<bool> {
        let un = prec.and_then(|p| propagate3(g, &p.cov, &stats.isotropy).ok());
        let test = prec.and_then(|p| test_of(g, p, stats.alpha));
        let mds = un
            .as_ref()
            .and_then(|x| mds_worst3(&x.cov_strain, stats.lambda0[1]));
        columns::uncertainty_cells3(un.as_ref(), mds, test.as_ref(), u, row);
        test.map(|t| t.significant)
    }
    fn shape_cells(v: &[[f64; 3]], row: &mut Vec<Cell>) {
        match v {
            [a, b, c, d] => columns::tetrahedron_cells(
                &TetrahedronQuality::from_vertices([*a, *b, *c, *d]),
                row,
            ),
            _ => row.extend([Cell::Empty, Cell::Empty]),
        }
    }
}

/// Counts and rejections gathered while rows stream out.
struct Tally {
    accepted: u64,
    inadequate: u64,
    significant: u64,
    not_significant: u64,
    perfect_fits: u64,
    rejected: Vec<Rejected>,
    by_reason: BTreeMap<String, u64>,
}

impl Tally {
    fn new() -> Self {
        Self {
            accepted: 0,
            inadequate: 0,
            significant: 0,
            not_significant: 0,
            perfect_fits: 0,
            rejected: Vec::new(),
            by_reason: BTreeMap::new(),
        }
    }

    fn reject(&mut self, r: Rejected, kind: &str) {
        *self.by_reason.entry(kind.to_owned()).or_insert(0) += 1;
        self.rejected.push(r);
    }
}

/// Writes rows for one dimension; remembers the first I/O error (the core's
/// streaming estimators call back into closures that cannot return one).
struct Writer<'a, const D: usize> {
    sink: &'a mut dyn RowSink,
    points: &'a PointSet<D>,
    units: Units,
    opts: KinematicsOptions,
    extra: Extra,
    /// Stress columns to append to every row (`--material`).
    stress: Option<&'a stress::StressSpec>,
    stats: StatOptions,
    row: Vec<Cell>,
    io_error: Option<io::Error>,
    tally: Tally,
    /// Index of `theta1` when an `azimuth1` cell follows it (2D ENU runs).
    azimuth_at: Option<usize>,
}

impl<'a, const D: usize> Writer<'a, D>
where
    Dim<D>: StrainRow<D>,
{
    fn ids(&self, members: &[usize]) -> Vec<String> {
        members
            .iter()
            .map(|&i| {
                self.points
                    .points()
                    .get(i)
                    .map_or_else(|| format!("#{i}"), |p| p.id.clone())
            })
            .collect()
    }

    /// Write one region, or reject it when the kinematics refuse its gradient.
    /// `tail` appends the estimator-specific cells.
    fn region(
        &mut self,
        label: String,
        members: &[usize],
        centroid: [f64; D],
        g: &SMatrix<f64, D, D>,
        prec: Option<&GradientPrecision>,
        tail: impl FnOnce(&mut Vec<Cell>),
    ) {
        if self.io_error.is_some() {
            return;
        }
        let mut row = std::mem::take(&mut self.row);
        row.clear();
        row.push(Cell::Text(label));
        row.push(Cell::List(self.ids(members)));
        row.extend(centroid.map(|c| Cell::Num(self.units.length.from_metres(c))));
        match <Dim<D>>::strain_cells(g, &self.opts, self.units, &mut row) {
            Ok(adequate) => {
                if let Some(i) = self.azimuth_at {
                    columns::insert_azimuth_cell(&mut row, i);
                }
                tail(&mut row);
                let verdict = <Dim<D>>::precision_cells(g, prec, &self.stats, self.units, &mut row);
                if let Some(s) = self.stress
                    && let Err(e) = s.cells(g, &mut row)
                {
                    self.tally.reject(
                        Rejected {
                            label: match row.swap_remove(0) {
                                Cell::Text(t) => t,
                                _ => String::new(),
                            },
                            members: members.to_vec(),
                            reason: format!("stress not computed: {e}"),
                        },
                        "stress not computed",
                    );
                    self.row = row;
                    return;
                }
                self.tally.accepted += 1;
                if !adequate {
                    self.tally.inadequate += 1;
                }
                match verdict {
                    Some(true) => self.tally.significant += 1,
                    Some(false) => self.tally.not_significant += 1,
                    None => {}
                }
                if let Err(e) = self.sink.row(&row) {
                    self.io_error = Some(e);
                }
            }
            Err(e) => {
                let label = match row.swap_remove(0) {
                    Cell::Text(t) => t,
                    _ => String::new(),
                };
                self.tally.reject(
                    Rejected {
                        label,
                        members: members.to_vec(),
                        reason: format!("strain state not computed: {e}"),
                    },
                    "strain state not computed",
                );
            }
        }
        self.row = row;
    }

    fn estimate(&mut self, e: &GradientEstimate<D>) {
        let extra = self.extra;
        let units = self.units;
        let shape: Vec<[f64; D]> = if extra == Extra::Shape {
            e.members
                .iter()
                .filter_map(|&i| self.points.points().get(i).map(|p| p.x))
                .collect()
        } else {
            Vec::new()
        };
        let prec = match &e.fit {
            // Residuals at the rounding level of the data: the a-posteriori factor is
            // rounding noise, and any test or standard deviation built on it is nonsense.
            Some(f) if !f.exact && self.perfect_fit(f, &e.members) => {
                self.tally.perfect_fits += 1;
                None
            }
            Some(f) => self.fit_precision(f),
            None if extra == Extra::Shape => self.element_precision(&e.members),
            None => None,
        };
        self.region(
            e.label.clone(),
            &e.members,
            e.centroid,
            &e.gradient,
            prec.as_ref(),
            |row| match extra {
                Extra::Shape => <Dim<D>>::shape_cells(&shape, row),
                Extra::Fit => match &e.fit {
                    Some(f) => columns::fit_cells(f, e.translation, units, row),
                    None => row.extend(std::iter::repeat_n(
                        Cell::Empty,
                        <Dim<D>>::columns(units, Extra::Fit).len()
                            - <Dim<D>>::columns(units, Extra::None).len(),
                    )),
                },
                Extra::None => {}
            },
        );
    }

    /// Precision of a least-squares estimate: the estimated variance factor when the fit
    /// has redundancy (F test), the a-priori factor 1 when it is trusted or the fit is
    /// exact with stated precision (chi-square test); none for an exact fit without
    /// stated precision (its covariance carries an arbitrary 1 m²).
    /// The caller has already set perfect fits aside.
    fn fit_precision(&self, f: &FitStats<D>) -> Option<GradientPrecision> {
        let weighted = self.units.precision_weighted;
        let vf = f.variance_factor;
        if f.exact && !weighted {
            return None;
        }
        if f.exact || (self.stats.trust_apriori && weighted) {
            // The covariance carries σ̂₀² when the fit has redundancy: divide it out to
            // get the a-priori one. A perfect fit (σ̂₀² = 0) has lost it: no precision.
            let scale = if f.exact {
                1.0
            } else {
                vf.filter(|v| v.is_finite() && *v > 0.0)?
            };
            return Some(GradientPrecision {
                cov: &f.cov_gradient / scale,
                factor: VarianceFactor::Apriori { sigma0_sq: 1.0 },
            });
        }
        let v = vf.filter(|v| v.is_finite() && *v > 0.0)?;
        Some(GradientPrecision {
            cov: f.cov_gradient.clone(),
            factor: VarianceFactor::Estimated {
                sigma0_sq: v,
                // σ̂₀² = vᵀPv / r_eff; with distance weighting r_eff is not an integer
                // and differs from the point count, so the F test takes ⌊r_eff⌋
                // (conservative), never the raw count.
                redundancy: effective_dof(f),
            },
        })
    }

    /// True when every residual is at the rounding level of the displacements
    /// (≤ 1000 ulp of the largest): the data fit the model exactly.
    fn perfect_fit(&self, f: &FitStats<D>, members: &[usize]) -> bool {
        let pts = self.points.points();
        let max_u = members
            .iter()
            .filter_map(|&i| pts.get(i))
            .flat_map(|p| p.u.iter().map(|v| v.abs()))
            .fold(0.0, f64::max);
        let max_v = f
            .residuals
            .iter()
            .flat_map(|r| r.iter().map(|v| v.abs()))
            .fold(0.0, f64::max);
        max_v <= PERFECT_FIT_ULPS * f64::EPSILON * max_u
    }

    /// Precision of a constant-strain element, propagated through its shape functions
    /// from the stated precision (σ per axis or full covariance) of its vertices
    /// (a-priori factor 1); none when a vertex states none.
    fn element_precision(&self, members: &[usize]) -> Option<GradientPrecision> {
        let cov = element_gradient_covariance_from_points(self.points, members).ok()??;
        Some(GradientPrecision {
            cov,
            factor: VarianceFactor::Apriori { sigma0_sq: 1.0 },
        })
    }

    /// Write the rejected section and the footer; hand back the first I/O error.
    fn finish(mut self, notes: Vec<String>) -> io::Result<()> {
        if let Some(e) = self.io_error.take() {
            return Err(e);
        }
        self.sink.section(output::REJECTED)?;
        for r in &self.tally.rejected {
            let cells = [
                Cell::Text(r.label.clone()),
                Cell::List(self.ids(&r.members)),
                Cell::Text(r.reason.clone()),
            ];
            self.sink.row(&cells)?;
        }
        let mut all_notes = notes;
        let tested = self.tally.significant + self.tally.not_significant;
        if self.tally.perfect_fits > 0 {
            all_notes.push(format!(
                "{} fits have residuals at the rounding level of the data (a perfect fit): \
                 no standard deviations or strain test are given for them.",
                self.tally.perfect_fits
            ));
        }
        if tested > 0 {
            all_notes.push(format!(
                "{} of {} tested regions show strain beyond the survey noise at alpha = {} \
                 (strain_significant); the others are within the noise.",
                self.tally.significant, tested, self.stats.alpha
            ));
        }
        if self.tally.inadequate > 0 {
            all_notes.push(format!(
                "{} of {} regions: small-strain theory is not adequate at strain resolution {} \
                 (see small_strain_ok and adequacy_note); their small-strain values carry \
                 spurious strain, compare the Green-Lagrange columns.",
                self.tally.inadequate, self.tally.accepted, self.opts.strain_resolution
            ));
        }
        let footer = Footer {
            accepted: self.tally.accepted,
            rejected: self.tally.rejected.len() as u64,
            rejected_by_reason: self.tally.by_reason.into_iter().collect(),
            notes: all_notes,
        };
        self.sink.finish(&footer)
    }
}

fn fit_options(request: &Request) -> FitOptions {
    let p = &request.params;
    let distance_weight = match (p.weighting, p.weight_scale_m) {
        (Weighting::Gaussian, Some(s)) => DistanceWeight::Gaussian { scale_m: s },
        (Weighting::Quadratic, Some(r)) => DistanceWeight::QuadraticDecay { radius_m: r },
        _ => DistanceWeight::None,
    };
    FitOptions {
        use_precision: p.use_precision,
        distance_weight,
        ..FitOptions::default()
    }
}

fn thresholds(request: &Request) -> QualityThresholds {
    QualityThresholds {
        min_angle_rad: request.params.min_angle_deg.to_radians(),
        max_aspect_ratio: request.params.max_aspect_ratio,
    }
}

/// Compute the estimates for `request` and stream them into `sink`; `target` names
/// the output (file or `stdout`) for I/O error messages.
///
/// Everything that can fail on the data (triangulation, a collinear group, an unknown
/// point, a grid that is not one) is computed before the first byte is written, so a
/// failed run leaves no half-written output; only the streaming estimators
/// (Delaunay strains, neighbourhoods) write while they compute, and they turn a bad
/// region into a `rejected` row instead of failing.
pub fn run(request: &Request, sink: &mut dyn RowSink, target: &str) -> Result<(), CliError> {
    let opts = KinematicsOptions {
        strain_resolution: request.params.strain_resolution,
        ..KinematicsOptions::default()
    };
    opts.validate()?;
    let units = Units {
        length: request.length_unit,
        strain: request.strain_unit,
        precision_weighted: request.params.use_precision,
    };
    let alpha = request.params.alpha;
    let stats = StatOptions {
        isotropy: IsotropyTest::default(),
        alpha,
        trust_apriori: request.params.trust_apriori,
        lambda0: [
            noncentrality(alpha, MDS_POWER, 3)?,
            noncentrality(alpha, MDS_POWER, 6)?,
        ],
    };
    let ctx = Context {
        request,
        units,
        opts,
        stats,
        target,
    };
    match (&request.points, request.method) {
        (Points::Plane(ps), Method::Delaunay) => {
            let tris = delaunay_triangles(ps)?;
            let th = thresholds(request);
            th.validate()?;
            ctx.emit(ps, sink, |w| {
                stream_triangles(w, &tris, &th)?;
                Ok(Vec::new())
            })
        }
        (Points::Plane(ps), Method::Grid) => {
            let l = lattice::lattice(ps).map_err(CliError::Usage)?;
            let (good, bad) = grid_gradients(&l.field)?;
            ctx.emit(ps, sink, |w| {
                let to_points = |cells: &[usize]| -> Vec<usize> {
                    cells
                        .iter()
                        .filter_map(|&c| l.cell_point.get(c).copied().flatten())
                        .collect()
                };
                for mut e in good {
                    e.members = to_points(&e.members);
                    w.estimate(&e);
                }
                for mut r in bad {
                    r.members = to_points(&r.members);
                    w.tally.reject(r, "finite differences not possible");
                }
                let u = units.length;
                Ok(vec![format!(
                    "grid of {} x {} nodes at spacing {} x {} {}, origin ({}, {}) {}",
                    l.field.nx,
                    l.field.ny,
                    u.from_metres(l.field.spacing[0]),
                    u.from_metres(l.field.spacing[1]),
                    u.label(),
                    u.from_metres(l.field.origin[0]),
                    u.from_metres(l.field.origin[1]),
                    u.label()
                )])
            })
        }
        (Points::Space(_), Method::Delaunay) => Err(CliError::Usage(
            "--method delaunay triangulates 2D points; the file is 3D".to_owned(),
        )),
        (Points::Space(_), Method::Grid) => Err(CliError::Usage(
            "--method grid works on 2D points on a regular grid; the file is 3D".to_owned(),
        )),
        (Points::Plane(ps), _) => ctx.general(ps, sink),
        (Points::Space(ps), _) => ctx.general(ps, sink),
    }
}

/// What every method needs besides the points.
struct Context<'a> {
    request: &'a Request,
    units: Units,
    opts: KinematicsOptions,
    stats: StatOptions,
    target: &'a str,
}

impl Context<'_> {
    fn out(&self, source: io::Error) -> CliError {
        CliError::Output {
            target: self.target.to_owned(),
            source,
        }
    }

    /// Open the sections, let `body` write the rows, then write the rejected regions
    /// and the footer (with the notes `body` returns).
    fn emit<const D: usize>(
        &self,
        ps: &PointSet<D>,
        sink: &mut dyn RowSink,
        body: impl FnOnce(&mut Writer<'_, D>) -> Result<Vec<String>, CliError>,
    ) -> Result<(), CliError>
    where
        Dim<D>: StrainRow<D>,
    {
        let method = self.request.method;
        let extra = extra_for(method);
        let mut columns = <Dim<D>>::columns(self.units, extra);
        columns.extend(<Dim<D>>::precision_columns(self.units));
        let stress = self.request.stress.as_ref();
        if let Some(s) = stress {
            columns.extend(s.columns());
        }
        let azimuth_at = match self.request.enu {
            Some(_) => columns::insert_azimuth_column(&mut columns),
            None => None,
        };
        let main = Section {
            name: section_name(method),
            columns,
        };
        sink.begin(&self.request.header, &[main, output::rejected_section()])
            .map_err(|e| self.out(e))?;
        sink.section(section_name(method))
            .map_err(|e| self.out(e))?;
        let mut w = Writer {
            sink,
            points: ps,
            units: self.units,
            opts: self.opts,
            extra,
            stress,
            stats: self.stats,
            row: Vec::new(),
            io_error: None,
            tally: Tally::new(),
            azimuth_at,
        };
        let mut notes = body(&mut w)?;
        if let Some(s) = stress {
            notes.push(s.note());
        }
        w.finish(notes).map_err(|e| self.out(e))
    }

    /// The methods that work the same in 2D and 3D.
    fn general<const D: usize>(
        &self,
        ps: &PointSet<D>,
        sink: &mut dyn RowSink,
    ) -> Result<(), CliError>
    where
        Dim<D>: StrainRow<D>,
    {
        let request = self.request;
        let fo = fit_options(request);
        match request.method {
            Method::Elements => {
                let specs: Vec<ElementSpec> = request
                    .elements
                    .iter()
                    .flatten()
                    .map(|e| ElementSpec::new(e.id.clone(), e.vertices.clone()))
                    .collect();
                let (good, bad) =
                    element_strains(ps, &specs, OrientationPolicy::Require, &thresholds(request))?;
                self.emit(ps, sink, |w| {
                    good.iter().for_each(|e| w.estimate(e));
                    bad.into_iter()
                        .for_each(|r| w.tally.reject(r, "quality screen"));
                    Ok(Vec::new())
                })
            }
            Method::Groups => {
                let groups: Vec<Group> = request
                    .groups
                    .iter()
                    .flatten()
                    .map(|g| Group {
                        name: g.name.clone(),
                        point_ids: g.point_ids.clone(),
                    })
                    .collect();
                let good = fit_groups(ps, &groups, &fo)?;
                self.emit(ps, sink, |w| {
                    good.iter().for_each(|e| w.estimate(e));
                    Ok(Vec::new())
                })
            }
            Method::Network => {
                let net = fit_network(ps, &fo)?;
                self.emit(ps, sink, |w| {
                    w.estimate(&net.estimate);
                    Ok(Vec::new())
                })
            }
            Method::Neighbourhood => {
                let sel = match request.params.radius_m {
                    Some(r) => Selection::Radius {
                        radius_m: r,
                        min_points: D + 2,
                    },
                    None => Selection::Nearest {
                        k: request.params.k,
                    },
                };
                // Everything the core would refuse is refused before the header is
                // written, so a bad parameter leaves no partial output.
                sel.validate(D, ps.len())?;
                fo.validate()?;
                let centres = match request.params.grid_spacing_m {
                    None => Centres::AtPoints,
                    Some(h) => grid_centres(ps, h)?,
                };
                centres.validate()?;
                self.emit(ps, sink, |w| {
                    fit_neighbourhoods_with(ps, &centres, &sel, &fo, |res| match res {
                        Ok(e) => w.estimate(&e),
                        Err(r) => w.tally.reject(r, "neighbourhood fit not possible"),
                    })?;
                    Ok(Vec::new())
                })
            }
            Method::Rosette => Err(CliError::Usage(
                "--method rosette reads gauge readings; it runs through pipeline::rosette"
                    .to_owned(),
            )),
            Method::Delaunay | Method::Grid => Err(CliError::Usage(format!(
                "--method {} needs 2D points",
                request.method.name()
            ))),
        }
    }
}

/// Most neighbourhood centres accepted on a grid (the core has its own, larger cap).
pub const MAX_GRID_CENTRES: usize = 10_000_000;

/// A grid of neighbourhood centres at spacing `h` (metres) over the bounding box of the
/// points, from its lower corner; the last node along each axis reaches or passes the
/// upper corner.
fn grid_centres<const D: usize>(ps: &PointSet<D>, h: f64) -> Result<Centres<D>, CliError> {
    let mut lo = [f64::INFINITY; D];
    let mut hi = [f64::NEG_INFINITY; D];
    for p in ps.points() {
        for k in 0..D {
            lo[k] = lo[k].min(p.x[k]);
            hi[k] = hi[k].max(p.x[k]);
        }
    }
    let mut counts = [1usize; D];
    let mut total = 1usize;
    for k in 0..D {
        let n = ((hi[k] - lo[k]) / h).ceil() + 1.0;
        if !(n.is_finite() && n <= MAX_GRID_CENTRES as f64) {
            return Err(CliError::Usage(format!(
                "--grid-spacing {h} m gives too many nodes along axis {k}"
            )));
        }
        counts[k] = n as usize;
        total = total.saturating_mul(counts[k]);
    }
    if total > MAX_GRID_CENTRES {
        return Err(CliError::Usage(format!(
            "--grid-spacing gives {total} grid nodes, more than {MAX_GRID_CENTRES}; use a coarser spacing"
        )));
    }
    Ok(Centres::Grid {
        origin: lo,
        spacing: [h; D],
        counts,
    })
}

fn stream_triangles(
    w: &mut Writer<'_, 2>,
    tris: &[[u32; 3]],
    th: &QualityThresholds,
) -> Result<(), CliError> {
    let points = w.points;
    triangle_strains_with(points, tris, th, |outcome| match outcome {
        ElementOutcome::Accepted(t) => {
            let members = t.vertices.map(|v| v as usize);
            let q = t.quality;
            let prec = w.element_precision(&members);
            w.region(
                triangle_label(t.index),
                &members,
                t.centroid,
                &t.gradient,
                prec.as_ref(),
                |row| columns::triangle_cells(&q, row),
            );
        }
        ElementOutcome::Rejected(r) => {
            let kind = if r.failure.degenerate.is_some() {
                "degenerate (zero area)"
            } else if r.failure.min_angle.is_some() {
                "minimum angle"
            } else {
                "aspect ratio"
            };
            w.tally.reject(
                Rejected {
                    label: triangle_label(r.index),
                    members: r.vertices.iter().map(|&v| v as usize).collect(),
                    reason: r.failure.to_string(),
                },
                kind,
            );
        }
    })?;
    Ok(())
}
