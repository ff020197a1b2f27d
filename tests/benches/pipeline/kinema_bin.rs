//! Locating the release binary of the `kinema` CLI.

use std::path::PathBuf;
use std::process::{Command, Stdio};

/// The `kinema` binary to measure: `KINEMA_BIN` if set (it must exist), else the one that
/// `cargo build --release -p kinema-server --bin kinema` produces (built now; cargo
/// reports the executable's path, so `CARGO_TARGET_DIR` is honoured).
pub fn locate() -> Result<PathBuf, String> {
    if let Some(bin) = std::env::var_os("KINEMA_BIN") {
        let bin = PathBuf::from(bin);
        if !bin.is_file() {
            return Err(format!(
                "KINEMA_BIN={} is not a file: point it at a built `kinema` binary, \
                 or unset it to let the bench build one",
                bin.display()
            ));
        }
        return Ok(bin);
    }
    build()
}

/// Builds the CLI in release mode and returns the path cargo reports for it.
fn build() -> Result<PathBuf, String> {
    let cargo = std::env::var_os("CARGO").unwrap_or_else(|| "cargo".into());
    eprintln!(
        "[bench] building the kinema CLI: cargo build --release -p kinema-server --bin kinema"
    );
    let out = Command::new(&cargo)
        .current_dir(kinema_tests::workspace_root())
        .args([
            "build",
            "--release",
            "-p",
            "kinema-server",
            "--bin",
            "kinema",
        ])
        .arg("--message-format=json-render-diagnostics")
        .stdin(Stdio::null())
        .stderr(Stdio::inherit())
        .output()
        .map_err(|e| format!("cannot run cargo to build the kinema CLI: {e}"))?;
    if !out.status.success() {
        return Err(format!(
            "building the kinema CLI failed ({}); see the compiler output above, \
             or set KINEMA_BIN to a built binary",
            out.status
        ));
    }
    let stdout = String::from_utf8_lossy(&out.stdout);
    let exe = stdout
        .lines()
        .filter_map(|l| serde_json::from_str::<serde_json::Value>(l).ok())
        .filter(|v| v["reason"] == "compiler-artifact" && v["target"]["name"] == "kinema")
        .find_map(|v| v["executable"].as_str().map(PathBuf::from));
    match exe {
        Some(p) if p.is_file() => Ok(p),
        Some(p) => Err(format!(
            "cargo reported the kinema binary at {}, but no file is there",
            p.display()
        )),
        None => Err("cargo built kinema-server but reported no `kinema` executable".to_string()),
    }
}
