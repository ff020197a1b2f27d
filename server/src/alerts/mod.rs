//! Alert rules: their typed definition and validation ([`rule`]), the values and
//! standard deviations of the watched quantities in a result document ([`quantity`]),
//! the pure evaluation of a finished analysis against a structure's rules
//! ([`evaluate()`], the [`crate::store::Evaluator`] the service passes to the store),
//! and reference strains of common materials for information ([`reference`]).
//!
//! Threshold values are always the user's configuration: Kinema ships none. Results are
//! kinematic estimates from measured displacements, not a structural assessment.

pub mod evaluate;
#[cfg(test)]
mod fixtures;
pub mod quantity;
pub mod reference;
pub mod rule;

pub use self::evaluate::{StateData, evaluate, z_two_sided};
pub use self::rule::{Quantity, RuleDefinition, Sense};

/// The caution written into every alert event's evidence.
pub const CAUTION: &str = "Kinematic estimate from measured displacements, not a structural \
    assessment; the thresholds are the user's configuration. Defer to local codes and \
    licensed practice.";
