//! Stress from strain for `kinema analyze --material ID` (or `--youngs-modulus-gpa E
//! --poisson-ratio NU`): the extra stress columns appended to every result row.
//!
//! The strain is the small strain `ε = (G+Gᵀ)/2` of the row's gradient; the stress
//! comes from [`kinema_core::elasticity`]: full Hooke's law in 3D, and in 2D either
//! plane stress (`σzz = 0`, out-of-plane strain `ezz` reported) or plane strain
//! (`εzz = 0`, out-of-plane stress `szz` reported), chosen with `--stress-state`.
//! Stresses are written in MPa (N/mm²), tension positive; `sxy`, `syz`, `sxz` are the
//! shear components of the stress tensor. Every output with stress also carries
//! [`kinema_core::elasticity::CAUTION`] (header parameter and footer note).

use clap::ValueEnum;
use kinema_core::CoreError;
use kinema_core::elasticity::{CAUTION, Isotropic, material};
use nalgebra::{Matrix3, SMatrix};

use crate::cli::CliError;
use crate::output::{Cell, Column};
use crate::units::StrainUnit;

/// Pascals in one MPa (N/mm²), the unit of the stress columns.
const PA_PER_MPA: f64 = 1.0e6;

/// Pascals in one GPa, the unit of `--youngs-modulus-gpa`.
const PA_PER_GPA: f64 = 1.0e9;

/// Unit label of the stress columns.
pub const STRESS_UNIT: &str = "MPa";

/// The 2D idealisation chosen with `--stress-state`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum StressState {
    /// Plane stress: σzz = σxz = σyz = 0 (thin plates, free surfaces); ezz is reported.
    PlaneStress,
    /// Plane strain: εzz = εxz = εyz = 0 (long or restrained bodies); szz is reported.
    PlaneStrain,
}

impl StressState {
    /// Name as on the command line.
    pub fn name(self) -> &'static str {
        match self {
            Self::PlaneStress => "plane-stress",
            Self::PlaneStrain => "plane-strain",
        }
    }
}

/// A validated stress request: the material and, in 2D, the plane idealisation.
#[derive(Debug, Clone, PartialEq)]
pub struct StressSpec {
    /// Material ID: the preset's ID, or `custom` for `--youngs-modulus-gpa`.
    pub material_id: String,
    /// Elastic constants (E in Pa, ν).
    pub elastic: Isotropic,
    /// Where the constants come from (standard and clause, or the flags).
    pub source: String,
    /// `Some` for a 2D analysis, `None` in 3D (full Hooke's law).
    pub state: Option<StressState>,
    /// Unit of the out-of-plane strain column `ezz` (plane stress).
    pub strain_unit: StrainUnit,
}

/// The stress flags as given on the command line.
#[derive(Debug, Clone, Copy, Default)]
pub struct StressFlags<'a> {
    /// `--material ID`.
    pub material: Option<&'a str>,
    /// `--youngs-modulus-gpa E`, GPa.
    pub youngs_modulus_gpa: Option<f64>,
    /// `--poisson-ratio NU`.
    pub poisson_ratio: Option<f64>,
    /// `--stress-state`.
    pub state: Option<StressState>,
}

fn usage(msg: impl Into<String>) -> CliError {
    CliError::Usage(msg.into())
}

impl StressSpec {
    /// Resolve the stress flags for an analysis of dimension `dim` (2 or 3).
    /// `Ok(None)` when no stress is asked for.
    ///
    /// Errors (usage, exit 2): an unknown material (listing the known IDs), both a
    /// preset and constants, one constant without the other, constants out of range,
    /// `--stress-state` without a material, a 2D analysis without `--stress-state`, or
    /// `--stress-state` with a 3D analysis.
    pub fn from_flags(
        f: &StressFlags<'_>,
        dim: usize,
        strain_unit: StrainUnit,
    ) -> Result<Option<Self>, CliError> {
        let custom = f.youngs_modulus_gpa.is_some() || f.poisson_ratio.is_some();
        let (material_id, elastic, source) = match (f.material, custom) {
            (None, false) => {
                if f.state.is_some() {
                    return Err(usage(
                        "--stress-state needs --material ID (or --youngs-modulus-gpa with --poisson-ratio)",
                    ));
                }
                return Ok(None);
            }
            (Some(_), true) => {
                return Err(usage(
                    "give --material ID or --youngs-modulus-gpa with --poisson-ratio, not both",
                ));
            }
            (Some(id), false) => {
                let m = material(id).map_err(|e| match e {
                    CoreError::UnknownMaterial { id, known } => usage(format!(
                        "--material: unknown material `{id}`; known materials: {known}"
                    )),
                    other => CliError::Core(other),
                })?;
                let elastic = m.elastic()?;
                (m.id, elastic, m.source)
            }
            (None, true) => {
                let (Some(e), Some(nu)) = (f.youngs_modulus_gpa, f.poisson_ratio) else {
                    return Err(usage(
                        "--youngs-modulus-gpa and --poisson-ratio go together: give both",
                    ));
                };
                let elastic = Isotropic::new(e * PA_PER_GPA, nu).map_err(|err| {
                    usage(format!(
                        "--youngs-modulus-gpa {e} / --poisson-ratio {nu}: {err}"
                    ))
                })?;
                (
                    "custom".to_owned(),
                    elastic,
                    "given on the command line (--youngs-modulus-gpa, --poisson-ratio)".to_owned(),
                )
            }
        };
        let state = match (dim, f.state) {
            (2, Some(s)) => Some(s),
            (2, None) => {
                return Err(usage(
                    "a 2D analysis with a material needs --stress-state plane-stress|plane-strain",
                ));
            }
            (_, Some(s)) => {
                return Err(usage(format!(
                    "--stress-state {} applies to 2D analyses; 3D stress uses the full Hooke's law",
                    s.name()
                )));
            }
            (_, None) => None,
        };
        Ok(Some(Self {
            material_id,
            elastic,
            source,
            state,
            strain_unit,
        }))
    }

    /// Header parameters: material, E (GPa), ν, source, stress state, unit, caution.
    pub fn parameters(&self) -> Vec<(String, Cell)> {
        vec![
            ("material".to_owned(), Cell::Text(self.material_id.clone())),
            (
                "youngs_modulus_gpa".to_owned(),
                Cell::Num(self.elastic.youngs_modulus() / PA_PER_GPA),
            ),
            (
                "poisson_ratio".to_owned(),
                Cell::Num(self.elastic.poisson_ratio()),
            ),
            (
                "material_source".to_owned(),
                Cell::Text(self.source.clone()),
            ),
            (
                "stress_state".to_owned(),
                Cell::Text(self.state.map_or("3d", StressState::name).to_owned()),
            ),
            ("stress_unit".to_owned(), Cell::Text(STRESS_UNIT.to_owned())),
            ("stress_caution".to_owned(), Cell::Text(CAUTION.to_owned())),
        ]
    }

    /// The footer note carrying the caution.
    pub fn note(&self) -> String {
        format!(
            "stress columns ({STRESS_UNIT}, material {}, {}): {CAUTION}",
            self.material_id,
            self.state.map_or("3D Hooke's law", StressState::name)
        )
    }

    /// The stress columns appended after a row's own columns.
    pub fn columns(&self) -> Vec<Column> {
        let m = STRESS_UNIT;
        let mut c = vec![Column::new(
            "material",
            "",
            "material whose constants give the stress columns",
        )];
        match self.state {
            Some(state) => {
                c.extend([
                    Column::new("sxx", m, "normal stress along x, tension positive"),
                    Column::new("syy", m, "normal stress along y, tension positive"),
                    Column::new("sxy", m, "shear stress sxy of the stress tensor"),
                ]);
                c.push(match state {
                    StressState::PlaneStress => Column::new(
                        "ezz",
                        self.strain_unit.label(),
                        "out-of-plane strain -nu/(1-nu)*(exx+eyy) under plane stress (szz = 0)",
                    ),
                    StressState::PlaneStrain => Column::new(
                        "szz",
                        m,
                        "out-of-plane stress nu*(sxx+syy) under plane strain (ezz = 0)",
                    ),
                });
                c.extend([
                    Column::new("s1", m, "major in-plane principal stress (s1 >= s2)"),
                    Column::new("s2", m, "minor in-plane principal stress"),
                    Column::new(
                        "von_mises",
                        m,
                        "von Mises equivalent stress of the full 3D state",
                    ),
                ]);
            }
            None => c.extend([
                Column::new("sxx", m, "normal stress along x, tension positive"),
                Column::new("syy", m, "normal stress along y"),
                Column::new("szz", m, "normal stress along z"),
                Column::new("sxy", m, "shear stress sxy of the stress tensor"),
                Column::new("syz", m, "shear stress syz of the stress tensor"),
                Column::new("sxz", m, "shear stress sxz of the stress tensor"),
                Column::new("s1", m, "major principal stress (s1 >= s2 >= s3)"),
                Column::new("s2", m, "intermediate principal stress"),
                Column::new("s3", m, "minor principal stress"),
                Column::new("von_mises", m, "von Mises equivalent stress"),
            ]),
        }
        c
    }

    /// Append the stress cells for the small strain of gradient `g` (dimension `D`,
    /// which must match the spec: 2 with a stress state, 3 without).
    ///
    /// Errors: the core's `NonFinite` / `EigenNoConvergence`, or `InvalidParameter`
    /// when `D` does not match the spec.
    pub fn cells<const D: usize>(
        &self,
        g: &SMatrix<f64, D, D>,
        row: &mut Vec<Cell>,
    ) -> Result<(), CoreError> {
        let mpa = |v: f64| Cell::Num(v / PA_PER_MPA);
        let eps = |i: usize, j: usize| 0.5 * (g[(i, j)] + g[(j, i)]);
        match (D, self.state) {
            (2, Some(StressState::PlaneStress)) => {
                let s = self.elastic.plane_stress(eps(0, 0), eps(1, 1), eps(0, 1))?;
                row.push(Cell::Text(self.material_id.clone()));
                row.extend([mpa(s.sxx), mpa(s.syy), mpa(s.sxy)]);
                row.push(Cell::Num(self.strain_unit.from_strain(s.ezz)));
                row.extend([mpa(s.principal[0]), mpa(s.principal[1]), mpa(s.von_mises)]);
            }
            (2, Some(StressState::PlaneStrain)) => {
                let s = self.elastic.plane_strain(eps(0, 0), eps(1, 1), eps(0, 1))?;
                row.push(Cell::Text(self.material_id.clone()));
                row.extend([mpa(s.sxx), mpa(s.syy), mpa(s.sxy), mpa(s.szz)]);
                row.extend([mpa(s.principal[0]), mpa(s.principal[1]), mpa(s.von_mises)]);
            }
            (3, None) => {
                let e = Matrix3::from_fn(eps);
                let s = self.elastic.stress(&e)?;
                let t = &s.sigma;
                row.push(Cell::Text(self.material_id.clone()));
                row.extend([
                    mpa(t[(0, 0)]),
                    mpa(t[(1, 1)]),
                    mpa(t[(2, 2)]),
                    mpa(t[(0, 1)]),
                    mpa(t[(1, 2)]),
                    mpa(t[(0, 2)]),
                ]);
                row.extend(s.principal.map(mpa));
                row.push(mpa(s.von_mises));
            }
            _ => {
                return Err(CoreError::InvalidParameter {
                    name: "stress_state",
                    reason: format!(
                        "a {D}D strain with stress state {}",
                        self.state.map_or("3d", StressState::name)
                    ),
                });
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use nalgebra::{Matrix2, Matrix3};

    use super::*;

    fn spec(dim: usize, state: Option<StressState>) -> StressSpec {
        StressSpec::from_flags(
            &StressFlags {
                material: Some("steel-en1993"),
                state,
                ..StressFlags::default()
            },
            dim,
            StrainUnit::Microstrain,
        )
        .expect("valid")
        .expect("asked for")
    }

    #[test]
    fn columns_match_cells() {
        for (dim, state) in [
            (2, Some(StressState::PlaneStress)),
            (2, Some(StressState::PlaneStrain)),
        ] {
            let s = spec(dim, state);
            let mut row = Vec::new();
            s.cells(&Matrix2::new(1e-4, 0.0, 0.0, -3e-5), &mut row)
                .expect("cells");
            assert_eq!(row.len(), s.columns().len());
        }
        let s = spec(3, None);
        let mut row = Vec::new();
        s.cells(&Matrix3::from_diagonal_element(1e-4), &mut row)
            .expect("cells");
        assert_eq!(row.len(), s.columns().len());
        assert!(
            s.cells(&Matrix2::zeros(), &mut row).is_err(),
            "2D on a 3D spec"
        );
    }

    #[test]
    fn hydrostatic_3d_stress_is_three_k_times_strain() {
        // For ε = e·I: σ = λ·3e·I + 2μ·e·I = (3λ + 2μ)·e·I = 3K·e·I, and the von Mises
        // stress of a hydrostatic state is 0 (Source: Timoshenko & Goodier, Theory of
        // Elasticity, 3rd ed., §6, bulk modulus K = E/(3(1−2ν))).
        let s = spec(3, None);
        let mut row = Vec::new();
        s.cells(&Matrix3::from_diagonal_element(1e-4), &mut row)
            .expect("cells");
        let k = 210e9 / (3.0 * (1.0 - 0.6));
        let want = 3.0 * k * 1e-4 / 1e6;
        match row[1] {
            Cell::Num(v) => assert!((v - want).abs() < 1e-9 * want, "{v} vs {want}"),
            ref c => panic!("{c:?}"),
        }
        match row[10] {
            Cell::Num(v) => assert!(v.abs() < 1e-6, "von Mises of hydrostatic stress {v}"),
            ref c => panic!("{c:?}"),
        }
    }

    #[test]
    fn flag_errors() {
        let bad = |f: StressFlags<'_>, dim: usize| {
            StressSpec::from_flags(&f, dim, StrainUnit::Strain)
                .expect_err("refused")
                .to_string()
        };
        let e = bad(
            StressFlags {
                material: Some("unobtainium"),
                state: Some(StressState::PlaneStress),
                ..StressFlags::default()
            },
            2,
        );
        assert!(
            e.contains("steel-en1993") && e.contains("unobtainium"),
            "{e}"
        );
        let e = bad(
            StressFlags {
                material: Some("steel-en1993"),
                ..StressFlags::default()
            },
            2,
        );
        assert!(e.contains("--stress-state"), "{e}");
        let e = bad(
            StressFlags {
                youngs_modulus_gpa: Some(200.0),
                ..StressFlags::default()
            },
            3,
        );
        assert!(e.contains("give both"), "{e}");
        let e = bad(
            StressFlags {
                youngs_modulus_gpa: Some(200.0),
                poisson_ratio: Some(0.5),
                ..StressFlags::default()
            },
            3,
        );
        assert!(e.contains("poisson_ratio"), "{e}");
        let e = bad(
            StressFlags {
                material: Some("steel-en1993"),
                state: Some(StressState::PlaneStrain),
                ..StressFlags::default()
            },
            3,
        );
        assert!(e.contains("2D"), "{e}");
        assert!(
            StressSpec::from_flags(&StressFlags::default(), 2, StrainUnit::Strain)
                .expect("ok")
                .is_none()
        );
    }
}
