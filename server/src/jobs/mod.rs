//! Durable analysis jobs: what a job runs ([`request`]), running it ([`execute`]) and
//! the workers that claim jobs from the database and end them ([`worker`]).
//!
//! The queue is the `jobs` table: several `kinema serve` processes against one
//! PostgreSQL database share it (claims are `FOR UPDATE SKIP LOCKED` with a lease),
//! and each job stores exactly one analysis.

pub mod execute;
pub mod request;
pub mod worker;
