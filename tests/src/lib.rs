//! End-to-end and reference tests.
