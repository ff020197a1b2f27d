//! # kinema-server
//!
//! Everything of Kinema that does I/O. For now: the offline `kinema analyze`
//! command's input readers ([`input`]), result writers ([`output`]), units
//! ([`units`]) and command-line arguments ([`cli`]).
//!
//! Results are kinematic estimates from measured displacements, not a structural
//! assessment; alert levels and decisions rest with the responsible engineer, local
//! codes and licensed practice.
#![forbid(unsafe_code)]

pub mod analysis;
pub mod api;
pub mod cli;
pub mod ingest;
pub mod input;
pub mod keys;
pub mod model;
pub mod output;
pub mod pipeline;
pub mod store;
pub mod units;
