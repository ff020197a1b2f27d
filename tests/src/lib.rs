//! Support for Kinema's end-to-end and reference tests.
//!
//! Reference checks call general-purpose libraries (numpy, scipy) through a Python
//! interpreter. [`python`] finds it: `KINEMA_PYTHON` if set, else the workspace's
//! `.venv/bin/python` (made by `scripts/test`). A missing interpreter is a loud test
//! failure, never a silent skip.
//!
//! End-to-end tests start the real `kinema` binary ([`server`]) and talk to it over
//! plain HTTP ([`http`]), each case on an SQLite file and on a PostgreSQL schema
//! ([`e2e!`]).

pub mod db;
pub mod http;
pub mod server;

use std::io::Write;
use std::path::PathBuf;
use std::process::{Command, Stdio};

/// Root of the workspace (the folder holding the top-level `Cargo.toml`).
pub fn workspace_root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .parent()
        .map(PathBuf::from)
        .unwrap_or_else(|| PathBuf::from(".."))
}

/// Path of the Python interpreter with numpy and scipy.
///
/// # Panics
/// When no interpreter is found: the reference tests must not pass silently.
pub fn python() -> PathBuf {
    if let Some(p) = std::env::var_os("KINEMA_PYTHON") {
        return PathBuf::from(p);
    }
    let venv = workspace_root().join(".venv/bin/python");
    assert!(
        venv.exists(),
        "no Python with numpy/scipy: set KINEMA_PYTHON or run scripts/test (it creates {})",
        venv.display()
    );
    venv
}

/// The shared peer benchmark folder (`../shared/bench` beside the checkout), if present;
/// otherwise the copy under `tests/peer/`.
pub fn peer_dir() -> PathBuf {
    let shared = workspace_root().join("../shared/bench");
    if shared.join("peer_numpy.py").exists() {
        return shared;
    }
    workspace_root().join("tests/peer")
}

/// Run the Python `script` with `input` as JSON on its stdin and parse its stdout as
/// JSON: the one way the reference tests talk to numpy and scipy.
///
/// # Panics
/// When Python cannot be started or the script fails (its stderr is shown).
pub fn python_json(script: &str, input: &serde_json::Value) -> serde_json::Value {
    let py = python();
    let mut child = Command::new(&py)
        .args(["-c", script])
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap_or_else(|e| panic!("cannot start {}: {e}", py.display()));
    child
        .stdin
        .take()
        .expect("stdin")
        .write_all(input.to_string().as_bytes())
        .expect("write to Python");
    let out = child.wait_with_output().expect("Python finished");
    assert!(
        out.status.success(),
        "the Python reference failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).expect("the reference printed JSON")
}

/// SplitMix64 (Steele, Lea & Flood, OOPSLA 2014): a small seeded generator for test data.
#[derive(Debug, Clone)]
pub struct SplitMix64(pub u64);

impl SplitMix64 {
    /// Uniform in [0, 1), 53 bits.
    pub fn uniform(&mut self) -> f64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        ((z ^ (z >> 31)) >> 11) as f64 / (1u64 << 53) as f64
    }

    /// Uniform in [a, b).
    pub fn range(&mut self, a: f64, b: f64) -> f64 {
        a + (b - a) * self.uniform()
    }
}
