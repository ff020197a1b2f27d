//! Units declared on the command line: the length unit of the input and the strain
//! unit of the output.
//!
//! Core works in metres and dimensionless strain; these types convert at the edge.

use clap::ValueEnum;
use serde::{Deserialize, Serialize};
use utoipa::ToSchema;

/// Declared unit of input coordinates, displacements and standard deviations
/// (and of `--radius` / `--weight-scale`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum, Serialize, Deserialize, ToSchema)]
pub enum LengthUnit {
    /// Metres (`m`).
    #[value(name = "m")]
    #[serde(rename = "m")]
    Metre,
    /// Millimetres (`mm`).
    #[value(name = "mm")]
    #[serde(rename = "mm")]
    Millimetre,
}

impl LengthUnit {
    /// Convert a value given in this unit to metres.
    ///
    /// Millimetres are divided by 1000 (one correctly rounded operation), so a
    /// value such as 12.5 mm becomes exactly the `f64` nearest to 0.0125 m;
    /// multiplying by 0.001 would not guarantee that.
    pub fn to_metres(self, v: f64) -> f64 {
        match self {
            Self::Metre => v,
            Self::Millimetre => v / 1000.0,
        }
    }

    /// Convert a value in metres to this unit (inverse of [`Self::to_metres`]).
    pub fn from_metres(self, v: f64) -> f64 {
        match self {
            Self::Metre => v,
            Self::Millimetre => v * 1000.0,
        }
    }

    /// Short label: `"m"` or `"mm"`.
    pub fn label(self) -> &'static str {
        match self {
            Self::Metre => "m",
            Self::Millimetre => "mm",
        }
    }

    /// Parse a label (`"m"` or `"mm"`); `None` for anything else.
    pub fn from_label(s: &str) -> Option<Self> {
        match s {
            "m" => Some(Self::Metre),
            "mm" => Some(Self::Millimetre),
            _ => None,
        }
    }
}

/// Unit in which strains are written: dimensionless strain or microstrain (1e-6).
#[derive(
    Debug, Clone, Copy, PartialEq, Eq, Default, ValueEnum, Serialize, Deserialize, ToSchema,
)]
pub enum StrainUnit {
    /// Dimensionless strain (m/m).
    #[value(name = "strain")]
    #[serde(rename = "strain")]
    Strain,
    /// Microstrain: strain × 10^6.
    #[value(name = "microstrain")]
    #[serde(rename = "microstrain")]
    #[default]
    Microstrain,
}

impl StrainUnit {
    /// Convert a dimensionless strain (as core returns it) to this unit.
    pub fn from_strain(self, e: f64) -> f64 {
        match self {
            Self::Strain => e,
            Self::Microstrain => e * 1e6,
        }
    }

    /// A value in this unit as dimensionless strain (microstrain: a division by 10^6,
    /// so that decimal values convert to the nearest double).
    pub fn to_strain(self, v: f64) -> f64 {
        match self {
            Self::Strain => v,
            Self::Microstrain => v / 1e6,
        }
    }

    /// Label: `"strain"` or `"microstrain"`.
    pub fn label(self) -> &'static str {
        match self {
            Self::Strain => "strain",
            Self::Microstrain => "microstrain",
        }
    }

    /// Parse [`StrainUnit::label`].
    pub fn from_label(s: &str) -> Option<Self> {
        [Self::Strain, Self::Microstrain]
            .into_iter()
            .find(|u| u.label() == s)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn millimetres_convert_exactly_for_representable_decimals() {
        // 12.5 mm is exact in binary; the quotient by 1000 is correctly rounded (IEEE 754
        // division), so it equals the literal 0.0125 parsed to the nearest double.
        assert_eq!(LengthUnit::Millimetre.to_metres(12.5), 0.0125);
        assert_eq!(LengthUnit::Millimetre.to_metres(-3.0), -0.003);
        assert_eq!(LengthUnit::Metre.to_metres(0.1), 0.1);
        assert_eq!(LengthUnit::Millimetre.from_metres(0.25), 250.0);
    }

    #[test]
    fn strain_units_and_labels() {
        assert_eq!(StrainUnit::Microstrain.from_strain(2.5e-4), 250.0);
        assert_eq!(StrainUnit::Strain.from_strain(2.5e-4), 2.5e-4);
        assert_eq!(StrainUnit::Microstrain.label(), "microstrain");
        assert_eq!(StrainUnit::Strain.label(), "strain");
        assert_eq!(LengthUnit::Metre.label(), "m");
        assert_eq!(LengthUnit::Millimetre.label(), "mm");
        assert_eq!(LengthUnit::from_label("mm"), Some(LengthUnit::Millimetre));
        assert_eq!(LengthUnit::from_label("cm"), None);
    }
}
