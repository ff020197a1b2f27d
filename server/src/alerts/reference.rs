//! Reference strains of common materials, for information only: the order of
//! magnitude a measured strain can be compared with when choosing thresholds. They are
//! never used as thresholds; Kinema ships no limit values.
//!
//! - Structural steel: yield strain `ε_y = f_y / E` with the nominal yield strength
//!   `f_y` of EN 1993-1-1 Table 3.1 (thickness t ≤ 40 mm) and `E = 210 GPa`
//!   (EN 1993-1-1, 3.2.6).
//! - Concrete: strain at the mean tensile strength `ε_ct = f_ctm / E_cm` with `f_ctm`
//!   and `E_cm` of EN 1992-1-1 Table 3.1 (a linear-elastic estimate of the cracking
//!   strain).
//!
//! The inputs are written from memory, not copied from the standards; the tests check
//! them against the formulas of EN 1992-1-1 Table 3.1 (`f_ctm = 0.30·f_ck^(2/3)`,
//! `E_cm = 22·(f_cm/10)^0.3` GPa with `f_cm = f_ck + 8` MPa), rounded as the table rounds.

use serde::Serialize;
use utoipa::ToSchema;

/// The caution that goes with every reference strain.
pub const REFERENCE_CAUTION: &str = "Information only; not a limit value. Set thresholds from \
    the design, the assessment and local codes with the responsible engineer.";

/// One input of a reference strain.
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct ReferenceInput {
    /// Its symbol, e.g. `f_y`.
    pub symbol: &'static str,
    /// What it is.
    pub meaning: &'static str,
    /// Its value, in `unit`.
    pub value: f64,
    /// Its unit: `MPa` or `GPa`.
    pub unit: &'static str,
}

/// A reference strain: a material property divided by a modulus.
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct ReferenceStrain {
    /// The material, e.g. `structural steel`.
    pub material: &'static str,
    /// Its grade or strength class, e.g. `S355`, `C30/37`.
    pub grade: &'static str,
    /// What the strain is, e.g. `yield strain f_y / E`.
    pub quantity: &'static str,
    /// The strain, dimensionless (extension positive): the first input over the
    /// second, the modulus converted to MPa.
    pub strain: f64,
    /// The same in microstrain (strain × 10^6).
    pub microstrain: f64,
    /// The strength and the modulus it is formed from.
    pub inputs: Vec<ReferenceInput>,
    /// Where the inputs come from.
    pub source: &'static str,
    /// How the inputs were confirmed: `from memory` (not copied from the standard),
    /// and for concrete the check against the table's formulas.
    pub confirmation: &'static str,
    /// Information only; not a limit value.
    pub caution: &'static str,
}

/// The steel grades: (grade, nominal f_y in MPa, t ≤ 40 mm).
const STEEL: [(&str, f64); 2] = [("S235", 235.0), ("S355", 355.0)];
/// Young's modulus of structural steel, GPa (EN 1993-1-1, 3.2.6).
pub const STEEL_E_GPA: f64 = 210.0;
/// The concrete classes: (class, f_ck MPa, f_ctm MPa, E_cm GPa) of EN 1992-1-1
/// Table 3.1.
pub const CONCRETE: [(&str, f64, f64, f64); 3] = [
    ("C25/30", 25.0, 2.6, 31.0),
    ("C30/37", 30.0, 2.9, 33.0),
    ("C40/50", 40.0, 3.5, 35.0),
];

fn entry(
    material: &'static str,
    grade: &'static str,
    quantity: &'static str,
    strength: ReferenceInput,
    modulus: ReferenceInput,
    source: &'static str,
    confirmation: &'static str,
) -> ReferenceStrain {
    let strain = strength.value / (modulus.value * 1000.0);
    ReferenceStrain {
        material,
        grade,
        quantity,
        strain,
        microstrain: strain * 1e6,
        inputs: vec![strength, modulus],
        source,
        confirmation,
        caution: REFERENCE_CAUTION,
    }
}

/// Every reference strain, steel first.
pub fn reference_strains() -> Vec<ReferenceStrain> {
    let mut out = Vec::new();
    for (grade, fy) in STEEL {
        out.push(entry(
            "structural steel",
            grade,
            "yield strain f_y / E",
            ReferenceInput {
                symbol: "f_y",
                meaning: "nominal yield strength, thickness t <= 40 mm",
                value: fy,
                unit: "MPa",
            },
            ReferenceInput {
                symbol: "E",
                meaning: "modulus of elasticity",
                value: STEEL_E_GPA,
                unit: "GPa",
            },
            "EN 1993-1-1, Table 3.1 (f_y) and 3.2.6 (E)",
            "from memory",
        ));
    }
    for (class, _fck, fctm, ecm) in CONCRETE {
        out.push(entry(
            "concrete",
            class,
            "strain at the mean tensile strength f_ctm / E_cm (linear-elastic cracking strain)",
            ReferenceInput {
                symbol: "f_ctm",
                meaning: "mean axial tensile strength",
                value: fctm,
                unit: "MPa",
            },
            ReferenceInput {
                symbol: "E_cm",
                meaning: "secant modulus of elasticity",
                value: ecm,
                unit: "GPa",
            },
            "EN 1992-1-1, Table 3.1",
            "from memory; agrees with the formulas of Table 3.1 rounded as the table rounds",
        ));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_value_is_the_hand_worked_quotient_of_its_inputs() {
        // Worked by hand (1 GPa = 1000 MPa): 235 / 210 000, 355 / 210 000, 2.6 / 31 000,
        // 2.9 / 33 000, 3.5 / 35 000, in microstrain.
        let worked = [
            ("S235", 1_119.047_619),
            ("S355", 1_690.476_190),
            ("C25/30", 83.870_968),
            ("C30/37", 87.878_788),
            ("C40/50", 100.0),
        ];
        let all = reference_strains();
        assert_eq!(all.len(), worked.len());
        for (r, (grade, micro)) in all.iter().zip(worked) {
            assert_eq!(r.grade, grade);
            assert_eq!((r.inputs[0].unit, r.inputs[1].unit), ("MPa", "GPa"));
            assert!(
                (r.microstrain - micro).abs() < 1e-6,
                "{grade}: {}",
                r.microstrain
            );
            assert!((r.strain - micro * 1e-6).abs() < 1e-12, "{grade}");
            assert!(r.caution.contains("not a limit value"));
            assert!(r.confirmation.starts_with("from memory"));
        }
    }

    #[test]
    fn concrete_inputs_follow_the_formulas_of_en_1992_table_3_1() {
        // f_ctm = 0.30·f_ck^(2/3) (≤ C50/60), rounded to 0.1 MPa; E_cm = 22·(f_cm/10)^0.3
        // GPa with f_cm = f_ck + 8 MPa, rounded to 1 GPa (EN 1992-1-1 Table 3.1, the
        // formulas from memory).
        for (class, fck, fctm, ecm) in CONCRETE {
            let f = (0.30 * fck.powf(2.0 / 3.0) * 10.0).round() / 10.0;
            assert!((f - fctm).abs() < 1e-12, "{class}: f_ctm {f} vs {fctm}");
            let e = (22.0 * ((fck + 8.0) / 10.0).powf(0.3)).round();
            assert_eq!(e, ecm, "{class}: E_cm");
            // The strength class names f_ck (cylinder) first.
            assert!(class.starts_with(&format!("C{}", fck as u32)));
        }
    }

    #[test]
    fn steel_grades_name_their_yield_strength() {
        // The grade number is the nominal yield strength in MPa (EN 10025-2 naming,
        // common practice).
        for (grade, fy) in STEEL {
            assert_eq!(grade[1..].parse::<f64>().expect("number"), fy);
        }
    }
}
