//! `kinema`: command-line entry point.
#![forbid(unsafe_code)]

fn main() {}
