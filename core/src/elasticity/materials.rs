//! Material presets with published elastic constants.
//!
//! Each preset names the standard and the clause its constants come from. Values
//! marked "from memory" could not be checked against the printed standard while this
//! was written. Moduli in Pa, thermal expansion in 1/K.
//!
//! IDs: `steel-en1993`, `aluminium-en1999`, and `concrete-cXX-YY` for the strength
//! classes of EN 1992-1-1 Table 3.1 (e.g. `concrete-c30-37`).

use serde::{Deserialize, Serialize};

use super::hooke::Isotropic;
use crate::error::{CoreError, Result};

/// One N/mm² (= 1 MPa) in Pa.
const MPA: f64 = 1.0e6;

/// A material preset.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Material {
    /// Plain lookup ID, e.g. `steel-en1993`.
    pub id: String,
    /// Human-readable name.
    pub name: String,
    /// Young's modulus `E`, Pa.
    pub youngs_modulus: f64,
    /// Poisson's ratio `ν`, dimensionless.
    pub poisson_ratio: f64,
    /// Shear modulus `G`, Pa: the value stated by the standard where it states one,
    /// otherwise `E/(2(1+ν))`. Stress computations use `E` and `ν` only.
    pub shear_modulus: f64,
    /// Coefficient of linear thermal expansion `α`, 1/K.
    pub thermal_expansion: f64,
    /// Standard and clauses of the constants.
    pub source: String,
    /// Scope and limits of the constants.
    pub note: String,
    /// Strength data of a concrete class; `None` for metals.
    pub concrete: Option<ConcreteClass>,
}

impl Material {
    /// The validated elastic constants of this material.
    pub fn elastic(&self) -> Result<Isotropic> {
        Isotropic::new(self.youngs_modulus, self.poisson_ratio)
    }
}

/// Strength class of concrete, EN 1992-1-1 Table 3.1.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ConcreteClass {
    /// Class name, e.g. `C30/37`.
    pub class: String,
    /// Characteristic cylinder strength `fck`, Pa.
    pub fck: f64,
    /// Characteristic cube strength `fck,cube`, Pa.
    pub fck_cube: f64,
    /// Mean cylinder strength `fcm = fck + 8 MPa`, Pa.
    pub fcm: f64,
    /// `Ecm` as printed in Table 3.1, Pa (rounded to 1 GPa; from memory). The preset's
    /// `youngs_modulus` is computed from the formula instead.
    pub ecm_tabulated: f64,
}

/// Concrete classes of EN 1992-1-1 Table 3.1: (class, fck, fck,cube, tabulated Ecm in
/// GPa). Strengths in MPa. Tabulated Ecm values from memory.
const CONCRETE_CLASSES: [(&str, f64, f64, f64); 14] = [
    ("C12/15", 12.0, 15.0, 27.0),
    ("C16/20", 16.0, 20.0, 29.0),
    ("C20/25", 20.0, 25.0, 30.0),
    ("C25/30", 25.0, 30.0, 31.0),
    ("C30/37", 30.0, 37.0, 33.0),
    ("C35/45", 35.0, 45.0, 34.0),
    ("C40/50", 40.0, 50.0, 35.0),
    ("C45/55", 45.0, 55.0, 36.0),
    ("C50/60", 50.0, 60.0, 37.0),
    ("C55/67", 55.0, 67.0, 38.0),
    ("C60/75", 60.0, 75.0, 39.0),
    ("C70/85", 70.0, 85.0, 41.0),
    ("C80/95", 80.0, 95.0, 42.0),
    ("C90/105", 90.0, 105.0, 44.0),
];

/// Secant modulus of elasticity of concrete, EN 1992-1-1 Table 3.1:
/// `Ecm = 22·(fcm/10)^0.3` GPa with `fcm` in MPa. Takes and returns Pa.
pub fn concrete_ecm(fcm: f64) -> f64 {
    22.0e9 * (fcm / (10.0 * MPA)).powf(0.3)
}

/// Structural steel, EN 1993-1-1 §3.2.6 (design values of material coefficients).
fn steel() -> Material {
    Material {
        id: "steel-en1993".into(),
        name: "Structural steel".into(),
        youngs_modulus: 210_000.0 * MPA,
        poisson_ratio: 0.3,
        shear_modulus: 81_000.0 * MPA,
        thermal_expansion: 12.0e-6,
        source: "EN 1993-1-1 §3.2.6: E = 210 000 N/mm², G = E/(2(1+ν)) ≈ 81 000 N/mm², \
                 ν = 0.3, α = 12×10⁻⁶ /K"
            .into(),
        note: "Steels covered by EN 1993-1-1 (S235 to S460); α for temperatures up to 100 °C \
               (from memory). Stresses use the isotropic G = E/(2(1+ν)) = 80 769 N/mm²; the \
               rounded 81 000 N/mm² of the standard is informational."
            .into(),
        concrete: None,
    }
}

/// Aluminium alloys, EN 1999-1-1 §3.2.5 (design values of material constants).
fn aluminium() -> Material {
    Material {
        id: "aluminium-en1999".into(),
        name: "Aluminium alloy".into(),
        youngs_modulus: 70_000.0 * MPA,
        poisson_ratio: 0.3,
        shear_modulus: 27_000.0 * MPA,
        thermal_expansion: 23.0e-6,
        source: "EN 1999-1-1 §3.2.5: E = 70 000 N/mm², G = 27 000 N/mm², ν = 0.3, \
                 α = 23×10⁻⁶ /K"
            .into(),
        note: "Stresses use the isotropic G = E/(2(1+ν)) = 26 923 N/mm²; the rounded \
               27 000 N/mm² of the standard is informational. \
               Wrought and cast alloys covered by EN 1999-1-1; α for 20 °C to 100 °C \
               (from memory)."
            .into(),
        concrete: None,
    }
}

fn concrete_id(class: &str) -> String {
    format!("concrete-{}", class.to_ascii_lowercase().replace('/', "-"))
}

/// Concrete of one class, EN 1992-1-1 §3.1.2 Table 3.1 and §3.1.3.
fn concrete(class: &str, fck: f64, fck_cube: f64, ecm_tab_gpa: f64) -> Material {
    let fcm = (fck + 8.0) * MPA;
    let e = concrete_ecm(fcm);
    let nu = 0.2;
    Material {
        id: concrete_id(class),
        name: format!("Concrete {class}"),
        youngs_modulus: e,
        poisson_ratio: nu,
        shear_modulus: e / (2.0 * (1.0 + nu)),
        thermal_expansion: 10.0e-6,
        source: "EN 1992-1-1 Table 3.1 (fck; fcm = fck + 8 MPa; Ecm = 22(fcm/10)^0.3 GPa, \
                 computed), §3.1.3(4) (ν = 0.2 uncracked), §3.1.3(5) (α = 10×10⁻⁶ /K)"
            .into(),
        note: "Ecm is the secant modulus between σc = 0 and 0.4·fcm for quartzite \
               aggregates; §3.1.3(2) reduces it by 10 % for limestone and 30 % for sandstone \
               aggregates and raises it by 20 % for basalt (from memory). Uncracked \
               concrete, short-term loading."
            .into(),
        concrete: Some(ConcreteClass {
            class: class.into(),
            fck: fck * MPA,
            fck_cube: fck_cube * MPA,
            fcm,
            ecm_tabulated: ecm_tab_gpa * 1.0e9,
        }),
    }
}

/// All presets, metals first, then concrete classes in ascending strength.
pub fn presets() -> Vec<Material> {
    let mut all = vec![steel(), aluminium()];
    all.extend(
        CONCRETE_CLASSES
            .iter()
            .map(|&(class, fck, cube, ecm)| concrete(class, fck, cube, ecm)),
    );
    all
}

/// IDs of all presets, in the order of [`presets`].
pub fn material_ids() -> Vec<String> {
    presets().into_iter().map(|m| m.id).collect()
}

/// Look up a preset by its plain ID (case-insensitive, surrounding spaces ignored).
///
/// Errors: `UnknownMaterial { id, known }` listing the known IDs.
pub fn material(id: &str) -> Result<Material> {
    let wanted = id.trim().to_ascii_lowercase();
    let all = presets();
    let known = all
        .iter()
        .map(|m| m.id.as_str())
        .collect::<Vec<_>>()
        .join(", ");
    all.iter()
        .find(|m| m.id == wanted)
        .cloned()
        .ok_or_else(|| CoreError::UnknownMaterial {
            id: id.to_owned(),
            known,
        })
}
