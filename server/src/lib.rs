//! # kinema-server
//!
//! Everything of Kinema that does I/O: the offline `kinema analyze` command (its
//! input readers [`input`], result writers [`output`] and arguments [`cli`]), and the
//! monitoring service: the HTTP API ([`api`]), storage ([`store`]), sensor-batch
//! ingestion ([`ingest`]), stored analyses ([`analysis`]), and the monitoring loop's
//! settings ([`settings`]).
//!
//! Results are kinematic estimates from measured displacements, not a structural
//! assessment; alert levels and decisions rest with the responsible engineer, local
//! codes and licensed practice.
#![forbid(unsafe_code)]

pub mod alerts;
pub mod analysis;
pub mod api;
pub mod backoff;
pub mod cli;
pub mod ingest;
pub mod input;
pub mod jobs;
pub mod keys;
pub mod model;
pub mod output;
pub mod pipeline;
pub mod settings;
pub mod store;
pub mod units;
pub mod webhooks;
pub mod worker_id;
