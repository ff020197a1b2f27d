//! Output columns of `kinema analyze` and the cells of one result row.
//!
//! One row per region (triangle, tetrahedron, group, neighbourhood, grid node or the
//! network): the region, its strain state from [`kinema_core::kinematics`], and the
//! estimator's own figures (element shape, or least-squares statistics). Strains are
//! written in the declared strain unit, lengths in the declared length unit, angles in
//! degrees counter-clockwise from +x. Tensor shear `exy` and engineering shear
//! `gxy = 2·exy` are separate, labelled columns.

use kinema_core::estimate::FitStats;
use kinema_core::estimate::quality::{TetrahedronQuality, TriangleQuality};
use kinema_core::kinematics::{Adequacy, AdequacyReason, Degeneracy3, Kinematics2, Kinematics3};
use kinema_core::significance::TestResult;
use kinema_core::uncertainty::{Uncertainty2, Uncertainty3};

use crate::output::{Cell, Column};
use crate::units::{LengthUnit, StrainUnit};

/// Which estimator-specific block a section carries after the strain columns.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Extra {
    /// Element shape (Delaunay and user elements).
    Shape,
    /// Least-squares statistics (groups, neighbourhoods, network).
    Fit,
    /// Nothing more (grid finite differences).
    None,
}

/// Units of the run, for labelling and converting.
#[derive(Debug, Clone, Copy)]
pub struct Units {
    /// Declared length unit.
    pub length: LengthUnit,
    /// Declared strain unit.
    pub strain: StrainUnit,
    /// Whether fits were weighted by stated precision (makes `sigma0` dimensionless).
    pub precision_weighted: bool,
}

impl Units {
    fn s(&self, e: f64) -> Cell {
        Cell::Num(self.strain.from_strain(e))
    }
    fn l(&self, v: f64) -> Cell {
        Cell::Num(self.length.from_metres(v))
    }
}

fn deg(rad: f64) -> Cell {
    Cell::Num(rad.to_degrees())
}

/// The small-strain adequacy block, the same in 2D and 3D (see [`adequacy_cells`]).
fn adequacy_columns(s: &'static str) -> [Column; 4] {
    [
        Column::new(
            "small_strain_ok",
            "",
            "false when rotation or gradient is too large for small-strain theory at the strain resolution",
        ),
        Column::new(
            "adequacy_note",
            "",
            "why small-strain theory is not adequate: rotation too large and/or gradient too large",
        ),
        Column::new(
            "rotation_spurious_strain",
            s,
            "strain the small-strain tensor wrongly shows for the rigid rotation alone, |rotation|^2/2",
        ),
        Column::new(
            "gradient_quadratic_strain",
            s,
            "quadratic (finite-strain) part of the stretch, max (lambda_i - 1)^2/2, that small-strain theory leaves out",
        ),
    ]
}

/// Columns of a 2D section: region, strain, then the `extra` block.
pub fn columns2(u: Units, extra: Extra) -> Vec<Column> {
    let l = u.length.label();
    let s = u.strain.label();
    let mut c = vec![
        Column::new(
            "label",
            "",
            "element ID, group name, point ID or grid node i,j",
        ),
        Column::new("members", "", "point IDs the estimate uses"),
        Column::new("x", l, "x of the region's centroid (reference)"),
        Column::new("y", l, "y of the region's centroid (reference)"),
        Column::new("exx", s, "normal strain along x, extension positive"),
        Column::new("eyy", s, "normal strain along y, extension positive"),
        Column::new("exy", s, "tensor shear strain exy = gxy/2"),
        Column::new(
            "gxy",
            s,
            "engineering shear strain gxy = 2*exy (decrease of the right angle between x and y)",
        ),
        Column::new(
            "rotation",
            "deg",
            "rigid rotation (duy/dx - dux/dy)/2, counter-clockwise positive",
        ),
        Column::new("e1", s, "major principal strain (e1 >= e2)"),
        Column::new("e2", s, "minor principal strain"),
        Column::new(
            "theta1",
            "deg",
            "direction of e1, counter-clockwise from +x, in (-90, 90]; empty when isotropic",
        ),
        Column::new(
            "isotropic",
            "",
            "true when e1 = e2 within tolerance: no principal direction exists",
        ),
        Column::new(
            "max_shear_tensor",
            s,
            "maximum in-plane tensor shear strain (e1 - e2)/2 = Mohr radius",
        ),
        Column::new(
            "max_shear_engineering",
            s,
            "maximum in-plane engineering shear strain e1 - e2",
        ),
        Column::new("evol", s, "volumetric (areal) strain exx + eyy = trace"),
        Column::new(
            "von_mises_eq",
            s,
            "equivalent strain sqrt(2/3 e':e') of the tensor taken as 3D with ezz = 0",
        ),
        Column::new("mohr_centre", s, "centre of the Mohr circle (exx + eyy)/2"),
        Column::new(
            "gl_exx",
            s,
            "Green-Lagrange strain Exx (finite strain, reference frame)",
        ),
        Column::new("gl_eyy", s, "Green-Lagrange strain Eyy"),
        Column::new("gl_exy", s, "Green-Lagrange tensor shear Exy"),
        Column::new(
            "jacobian",
            "",
            "J = det(I + G), ratio of current to reference area",
        ),
    ];
    c.extend(adequacy_columns(s));
    c.extend(extra_columns(u, extra, 2));
    c
}

/// Columns of a 3D section: region, strain, then the `extra` block.
pub fn columns3(u: Units, extra: Extra) -> Vec<Column> {
    let l = u.length.label();
    let s = u.strain.label();
    let mut c = vec![
        Column::new("label", "", "element ID, group name or point ID"),
        Column::new("members", "", "point IDs the estimate uses"),
        Column::new("x", l, "x of the region's centroid (reference)"),
        Column::new("y", l, "y of the region's centroid (reference)"),
        Column::new("z", l, "z of the region's centroid (reference)"),
        Column::new("exx", s, "normal strain along x, extension positive"),
        Column::new("eyy", s, "normal strain along y"),
        Column::new("ezz", s, "normal strain along z"),
        Column::new("exy", s, "tensor shear strain exy = gxy/2"),
        Column::new("eyz", s, "tensor shear strain eyz = gyz/2"),
        Column::new("exz", s, "tensor shear strain exz = gxz/2"),
        Column::new("gxy", s, "engineering shear strain gxy = 2*exy"),
        Column::new("gyz", s, "engineering shear strain gyz = 2*eyz"),
        Column::new("gxz", s, "engineering shear strain gxz = 2*exz"),
        Column::new(
            "wx",
            "deg",
            "rigid rotation about x, right-hand rule (curl(u)/2)",
        ),
        Column::new("wy", "deg", "rigid rotation about y, right-hand rule"),
        Column::new("wz", "deg", "rigid rotation about z, right-hand rule"),
        Column::new("e1", s, "major principal strain (e1 >= e2 >= e3)"),
        Column::new("e2", s, "intermediate principal strain"),
        Column::new("e3", s, "minor principal strain"),
        Column::new(
            "n1x",
            "",
            "unit direction of e1, x (empty when e1 is repeated)",
        ),
        Column::new("n1y", "", "unit direction of e1, y"),
        Column::new("n1z", "", "unit direction of e1, z"),
        Column::new(
            "n3x",
            "",
            "unit direction of e3, x (empty when e3 is repeated)",
        ),
        Column::new("n3y", "", "unit direction of e3, y"),
        Column::new("n3z", "", "unit direction of e3, z"),
        Column::new(
            "degeneracy",
            "",
            "distinct, first_pair (e1 = e2), last_pair (e2 = e3) or isotropic",
        ),
        Column::new(
            "max_shear_tensor",
            s,
            "maximum tensor shear strain (e1 - e3)/2",
        ),
        Column::new(
            "max_shear_engineering",
            s,
            "maximum engineering shear strain e1 - e3",
        ),
        Column::new("evol", s, "volumetric strain exx + eyy + ezz = trace"),
        Column::new("von_mises_eq", s, "equivalent strain sqrt(2/3 e':e')"),
        Column::new(
            "octahedral_shear_engineering",
            s,
            "engineering octahedral shear strain sqrt(8/3 J2)",
        ),
        Column::new(
            "jacobian",
            "",
            "J = det(I + G), ratio of current to reference volume",
        ),
    ];
    c.extend(adequacy_columns(s));
    c.extend(extra_columns(u, extra, 3));
    c
}

fn extra_columns(u: Units, extra: Extra, dim: usize) -> Vec<Column> {
    let l = u.length.label();
    match (extra, dim) {
        (Extra::None, _) => vec![],
        (Extra::Shape, 2) => vec![
            Column::new(
                "min_angle",
                "deg",
                "smallest interior angle of the triangle",
            ),
            Column::new(
                "aspect_ratio",
                "",
                "radius ratio R/(2r), 1 for an equilateral triangle",
            ),
        ],
        (Extra::Shape, _) => vec![
            Column::new(
                "min_dihedral",
                "deg",
                "smallest dihedral angle of the tetrahedron",
            ),
            Column::new(
                "radius_ratio",
                "",
                "radius ratio R/(3r), 1 for a regular tetrahedron",
            ),
        ],
        (Extra::Fit, d) => {
            let sigma0_unit = if u.precision_weighted { "" } else { l };
            let mut c = vec![
                Column::new("n_points", "", "points in the least-squares fit"),
                Column::new(
                    "redundancy",
                    "",
                    "degrees of freedom n*D - D*(D+1) of the fit",
                ),
                Column::new(
                    "exact_fit",
                    "",
                    "true when the fit has no redundancy (nothing checks the data)",
                ),
                Column::new(
                    "sigma0",
                    sigma0_unit,
                    "a-posteriori standard deviation of unit weight (dimensionless with --use-precision, else a length)",
                ),
            ];
            c.push(Column::new(
                "ux",
                l,
                "fitted displacement at the centroid, x",
            ));
            c.push(Column::new(
                "uy",
                l,
                "fitted displacement at the centroid, y",
            ));
            if d == 3 {
                c.push(Column::new(
                    "uz",
                    l,
                    "fitted displacement at the centroid, z",
                ));
            }
            c
        }
    }
}

/// The verdict, a short reason (the numbers are in their own columns, so that the text
/// is cheap to write for millions of rows), and the two quadratic terms.
fn adequacy_cells(a: &Adequacy, u: Units, row: &mut Vec<Cell>) {
    row.push(Cell::Bool(a.adequate));
    let mut rotation = false;
    let mut gradient = false;
    for r in &a.reasons {
        match r {
            AdequacyReason::RotationTooLarge { .. } => rotation = true,
            AdequacyReason::GradientTooLarge { .. } => gradient = true,
        }
    }
    row.push(match (rotation, gradient) {
        (false, false) => Cell::Empty,
        (true, false) => Cell::Text("rotation too large".to_owned()),
        (false, true) => Cell::Text("gradient too large".to_owned()),
        (true, true) => Cell::Text("rotation too large; gradient too large".to_owned()),
    });
    row.push(u.s(a.rotation_spurious_strain));
    row.push(u.s(a.gradient_quadratic_strain));
}

/// Append the strain cells of a 2D result (after label, members and centroid).
pub fn strain_cells2(k: &Kinematics2, u: Units, row: &mut Vec<Cell>) {
    let st = &k.strain;
    let p = &k.principal;
    row.extend([
        u.s(st.exx),
        u.s(st.eyy),
        u.s(st.exy),
        u.s(st.gxy),
        deg(k.rotation),
        u.s(p.e1),
        u.s(p.e2),
        p.theta1.map_or(Cell::Empty, deg),
        Cell::Bool(p.isotropic),
        u.s(k.max_shear.tensor_shear),
        u.s(k.max_shear.engineering_shear),
        u.s(k.volumetric),
        u.s(k.von_mises),
        u.s(k.mohr.centre),
        u.s(k.finite.green_lagrange[0][0]),
        u.s(k.finite.green_lagrange[1][1]),
        u.s(k.finite.green_lagrange[0][1]),
        Cell::Num(k.finite.jacobian),
    ]);
    adequacy_cells(&k.adequacy, u, row);
}

fn direction_cells(n: Option<[f64; 3]>, row: &mut Vec<Cell>) {
    match n {
        Some(v) => row.extend(v.map(Cell::Num)),
        None => row.extend([Cell::Empty, Cell::Empty, Cell::Empty]),
    }
}

/// Append the strain cells of a 3D result (after label, members and centroid).
pub fn strain_cells3(k: &Kinematics3, u: Units, row: &mut Vec<Cell>) {
    let st = &k.strain;
    let p = &k.principal;
    row.extend([
        u.s(st.exx),
        u.s(st.eyy),
        u.s(st.ezz),
        u.s(st.exy),
        u.s(st.eyz),
        u.s(st.exz),
        u.s(st.gxy),
        u.s(st.gyz),
        u.s(st.gxz),
    ]);
    row.extend(k.rotation_vector.map(deg));
    row.extend([u.s(p.e1), u.s(p.e2), u.s(p.e3)]);
    direction_cells(p.n1, row);
    direction_cells(p.n3, row);
    row.push(Cell::Text(
        match p.degeneracy {
            Degeneracy3::Distinct => "distinct",
            Degeneracy3::FirstPair => "first_pair",
            Degeneracy3::LastPair => "last_pair",
            Degeneracy3::Isotropic => "isotropic",
        }
        .to_owned(),
    ));
    row.extend([
        u.s(k.max_shear.tensor_shear),
        u.s(k.max_shear.engineering_shear),
        u.s(k.volumetric),
        u.s(k.von_mises),
        u.s(k.octahedral.engineering_shear),
        Cell::Num(k.finite.jacobian),
    ]);
    adequacy_cells(&k.adequacy, u, row);
}

/// Column `azimuth1` of 2D runs in an East-North-Up frame (x = east, y = north): the
/// direction of e1 as an azimuth, clockwise from north.
pub const AZIMUTH1: Column = Column::new(
    "azimuth1",
    "deg",
    "direction of e1 as an azimuth, clockwise from north, in [0, 180) (an axis); empty when isotropic",
);

/// Insert [`AZIMUTH1`] right after the `theta1` column; returns the index of `theta1`,
/// or `None` (nothing inserted) when there is none (3D sections).
pub fn insert_azimuth_column(columns: &mut Vec<Column>) -> Option<usize> {
    let at = columns.iter().position(|c| c.name == "theta1")?;
    columns.insert(at + 1, AZIMUTH1);
    Some(at)
}

/// Insert the `azimuth1` cell right after the `theta1` cell at `theta1_at`, from the
/// value written there (degrees counter-clockwise from east, in (−90, 90]) by the
/// core's [`azimuth_from_angle`](kinema_core::geodesy::azimuth_from_angle), reduced
/// modulo 180° because a principal direction is an axis. Empty when `theta1` is.
pub fn insert_azimuth_cell(row: &mut Vec<Cell>, theta1_at: usize) {
    let cell = match row.get(theta1_at) {
        Some(Cell::Num(theta_deg)) => {
            let az = kinema_core::geodesy::azimuth_from_angle(theta_deg.to_radians())
                .rem_euclid(std::f64::consts::PI)
                .to_degrees();
            Cell::Num(if az >= 180.0 { 0.0 } else { az })
        }
        _ => Cell::Empty,
    };
    row.insert((theta1_at + 1).min(row.len()), cell);
}

/// Append the shape cells of a triangle.
pub fn triangle_cells(q: &TriangleQuality, row: &mut Vec<Cell>) {
    row.extend([deg(q.min_angle_rad), Cell::Num(q.aspect_ratio)]);
}

/// Append the shape cells of a tetrahedron.
pub fn tetrahedron_cells(q: &TetrahedronQuality, row: &mut Vec<Cell>) {
    row.extend([deg(q.min_dihedral_rad), Cell::Num(q.radius_ratio)]);
}

/// Append the least-squares cells of a fit in `D` dimensions. `translation` is the
/// fitted displacement at the centroid, metres.
pub fn fit_cells<const D: usize>(
    f: &FitStats<D>,
    translation: Option<[f64; D]>,
    u: Units,
    row: &mut Vec<Cell>,
) {
    let int = |v: usize| Cell::Int(i64::try_from(v).unwrap_or(i64::MAX));
    row.push(int(f.n_points));
    row.push(int(f.redundancy));
    row.push(Cell::Bool(f.exact));
    row.push(match f.variance_factor {
        Some(v) if v >= 0.0 => {
            let s0 = v.sqrt();
            if u.precision_weighted {
                Cell::Num(s0)
            } else {
                u.l(s0)
            }
        }
        _ => Cell::Empty,
    });
    match translation {
        Some(t) => row.extend(t.map(|v| u.l(v))),
        None => row.extend(std::iter::repeat_n(Cell::Empty, D)),
    }
}

fn test_columns(s: &'static str) -> [Column; 5] {
    [
        Column::new(
            "mds",
            s,
            "minimal detectable strain: the smallest strain, in its least favourable combination of components, that the strain test detects with 80 % power at --alpha (Baarda's reliability measure; chi-square approximation, optimistic for an F test with few degrees of freedom)",
        ),
        Column::new(
            "strain_test",
            "",
            "test of H0 'no strain' on the strain components only: chi2(m) with the a-priori variance factor, F(m, r) with the estimated one",
        ),
        Column::new("strain_test_statistic", "", "test statistic"),
        Column::new(
            "strain_p_value",
            "",
            "probability of a statistic at least this large when there is no strain",
        ),
        Column::new(
            "strain_significant",
            "",
            "true when H0 is rejected at --alpha: the strain is larger than the survey noise explains",
        ),
    ]
}

/// Columns of the precision block of a 2D row: standard deviations propagated to first
/// order from the covariance of `G`, and the test of whether the strain is real. Empty
/// cells when the points state no precision (or a fit has nothing to estimate it from).
pub fn uncertainty_columns2(u: Units) -> Vec<Column> {
    let s = u.strain.label();
    let mut c = vec![
        Column::new("sd_exx", s, "standard deviation of exx"),
        Column::new("sd_eyy", s, "standard deviation of eyy"),
        Column::new(
            "sd_exy",
            s,
            "standard deviation of the tensor shear strain exy",
        ),
        Column::new("sd_rotation", "deg", "standard deviation of the rotation"),
        Column::new("sd_evol", s, "standard deviation of the volumetric strain"),
        Column::new("sd_e1", s, "standard deviation of e1 (empty when e1 = e2)"),
        Column::new("sd_e2", s, "standard deviation of e2"),
        Column::new(
            "sd_theta1",
            "deg",
            "standard deviation of theta1; empty when the direction is not meaningful",
        ),
        Column::new(
            "sd_max_shear_engineering",
            s,
            "standard deviation of the engineering maximum shear strain e1 - e2",
        ),
        Column::new(
            "direction_meaningful",
            "",
            "false when the Mohr radius is below k = 2 of its standard deviations: the state is isotropic within the noise and theta1 means nothing",
        ),
    ];
    c.extend(test_columns(s));
    c
}

/// Columns of the precision block of a 3D row (see [`uncertainty_columns2`]).
pub fn uncertainty_columns3(u: Units) -> Vec<Column> {
    let s = u.strain.label();
    let mut c = vec![
        Column::new("sd_exx", s, "standard deviation of exx"),
        Column::new("sd_eyy", s, "standard deviation of eyy"),
        Column::new("sd_ezz", s, "standard deviation of ezz"),
        Column::new(
            "sd_exy",
            s,
            "standard deviation of the tensor shear strain exy",
        ),
        Column::new(
            "sd_eyz",
            s,
            "standard deviation of the tensor shear strain eyz",
        ),
        Column::new(
            "sd_exz",
            s,
            "standard deviation of the tensor shear strain exz",
        ),
        Column::new("sd_evol", s, "standard deviation of the volumetric strain"),
        Column::new("sd_e1", s, "standard deviation of e1 (empty when repeated)"),
        Column::new("sd_e2", s, "standard deviation of e2 (empty when repeated)"),
        Column::new("sd_e3", s, "standard deviation of e3 (empty when repeated)"),
        Column::new(
            "sd_max_shear_engineering",
            s,
            "standard deviation of the engineering maximum shear strain e1 - e3",
        ),
        Column::new(
            "direction_meaningful",
            "",
            "false when a principal gap is below k = 2 of its standard deviations: some principal directions mean nothing",
        ),
    ];
    c.extend(test_columns(s));
    c
}

fn test_cells(mds: Option<f64>, t: Option<&TestResult>, u: Units, row: &mut Vec<Cell>) {
    row.push(mds.map_or(Cell::Empty, |v| u.s(v)));
    match t {
        Some(t) => {
            let name = match t.dof2 {
                Some(r) => format!("F({},{r})", t.dof1),
                None => format!("chi2({})", t.dof1),
            };
            row.extend([
                Cell::Text(name),
                Cell::Num(t.statistic),
                Cell::Num(t.p_value),
                Cell::Bool(t.significant),
            ]);
        }
        None => row.extend(std::iter::repeat_n(Cell::Empty, 4)),
    }
}

/// Append the precision cells of a 2D row.
pub fn uncertainty_cells2(
    un: Option<&Uncertainty2>,
    mds: Option<f64>,
    test: Option<&TestResult>,
    u: Units,
    row: &mut Vec<Cell>,
) {
    match un {
        Some(x) => row.extend([
            u.s(x.sd_exx),
            u.s(x.sd_eyy),
            u.s(x.sd_exy),
            deg(x.sd_rotation),
            u.s(x.sd_volumetric),
            x.sd_e1.map_or(Cell::Empty, |v| u.s(v)),
            x.sd_e2.map_or(Cell::Empty, |v| u.s(v)),
            x.sd_theta1.map_or(Cell::Empty, deg),
            x.sd_max_shear_engineering.map_or(Cell::Empty, |v| u.s(v)),
            Cell::Bool(!x.near_isotropic),
        ]),
        None => row.extend(std::iter::repeat_n(Cell::Empty, 10)),
    }
    test_cells(mds, test, u, row);
}

/// Append the precision cells of a 3D row.
pub fn uncertainty_cells3(
    un: Option<&Uncertainty3>,
    mds: Option<f64>,
    test: Option<&TestResult>,
    u: Units,
    row: &mut Vec<Cell>,
) {
    match un {
        Some(x) => {
            row.extend([
                u.s(x.sd_exx),
                u.s(x.sd_eyy),
                u.s(x.sd_ezz),
                u.s(x.sd_exy),
                u.s(x.sd_eyz),
                u.s(x.sd_exz),
                u.s(x.sd_volumetric),
            ]);
            row.extend(x.sd_principal.map(|v| v.map_or(Cell::Empty, |v| u.s(v))));
            row.push(x.sd_max_shear_engineering.map_or(Cell::Empty, |v| u.s(v)));
            row.push(Cell::Bool(!x.gap_flagged.iter().any(|&f| f)));
        }
        None => row.extend(std::iter::repeat_n(Cell::Empty, 12)),
    }
    test_cells(mds, test, u, row);
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn column_counts_match_cells() {
        use kinema_core::kinematics::{KinematicsOptions, analyze2, analyze3};
        use nalgebra::{Matrix2, Matrix3};
        let u = Units {
            length: LengthUnit::Millimetre,
            strain: StrainUnit::Microstrain,
            precision_weighted: false,
        };
        let k2 = analyze2(
            &Matrix2::new(1e-4, 2e-5, -1e-5, 3e-5),
            &KinematicsOptions::default(),
        )
        .expect("analyze2");
        let mut row = Vec::new();
        strain_cells2(&k2, u, &mut row);
        assert_eq!(row.len() + 4, columns2(u, Extra::None).len());
        assert_eq!(row[0], Cell::Num(100.0), "1e-4 strain = 100 microstrain");
        let k3 = analyze3(
            &Matrix3::new(1e-4, 2e-5, 0.0, -1e-5, 3e-5, 0.0, 0.0, 1e-6, -2e-5),
            &KinematicsOptions::default(),
        )
        .expect("analyze3");
        row.clear();
        strain_cells3(&k3, u, &mut row);
        assert_eq!(row.len() + 5, columns3(u, Extra::None).len());
        row.clear();
        uncertainty_cells2(None, None, None, u, &mut row);
        assert_eq!(row.len(), uncertainty_columns2(u).len());
        row.clear();
        uncertainty_cells3(None, None, None, u, &mut row);
        assert_eq!(row.len(), uncertainty_columns3(u).len());
    }
}
