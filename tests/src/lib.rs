//! Support for Kinema's end-to-end and reference tests.
//!
//! Reference checks call general-purpose libraries (numpy, scipy) through a Python
//! interpreter. [`python`] finds it: `KINEMA_PYTHON` if set, else the workspace's
//! `.venv/bin/python` (made by `scripts/test`). A missing interpreter is a loud test
//! failure, never a silent skip.

use std::path::PathBuf;

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
