//! Bench data: point files generated once by the peer's `gen_field.py`, cached by name.

use std::path::{Path, PathBuf};
use std::process::Command;

/// Seed of every generated data set (same seed, same file).
pub const SEED: u64 = 42;
/// Standard deviation of the Gaussian noise added to each displacement component, mm.
pub const NOISE_MM: f64 = 0.5;

/// The cargo target folder: `CARGO_TARGET_DIR` if set (relative to the workspace root
/// when relative), else `<workspace>/target`.
pub fn target_dir() -> PathBuf {
    let root = kinema_tests::workspace_root();
    match std::env::var_os("CARGO_TARGET_DIR") {
        Some(d) => {
            let d = PathBuf::from(d);
            if d.is_absolute() { d } else { root.join(d) }
        }
        None => root.join("target"),
    }
}

/// Path of the cached 2D data set with `n` points.
pub fn data_path(n: u64) -> PathBuf {
    target_dir()
        .join("bench-data")
        .join(format!("pts2d_{n}_seed{SEED}_noise{NOISE_MM}mm.csv"))
}

/// The 2D data set with `n` points (CSV `point_id,x,y,ux,uy`, metres), generating it
/// with `gen_field.py` (default field: translation, uniform strain, rigid rotation and
/// cantilever bending, plus noise) if it is not cached yet.
pub fn ensure_data(python: &Path, peer_dir: &Path, n: u64) -> Result<PathBuf, String> {
    let path = data_path(n);
    if path.metadata().map(|m| m.len() > 0).unwrap_or(false) {
        return Ok(path);
    }
    let dir = path.parent().unwrap_or(Path::new("."));
    std::fs::create_dir_all(dir).map_err(|e| format!("cannot create {}: {e}", dir.display()))?;
    // Write under a temporary name and rename, so an interrupted run leaves no half file.
    let partial = path.with_extension("csv.partial");
    eprintln!("[bench] generating {} ({n} points)", path.display());
    let status = Command::new(python)
        .arg(peer_dir.join("gen_field.py"))
        .args(["-n", &n.to_string()])
        .args(["--seed", &SEED.to_string()])
        .args(["--noise-mm", &NOISE_MM.to_string()])
        .arg("-o")
        .arg(&partial)
        .status()
        .map_err(|e| format!("cannot run {}: {e}", python.display()))?;
    if !status.success() {
        return Err(format!("gen_field.py failed ({status}) for n = {n}"));
    }
    let rows = count_lines(&partial)?;
    if rows != n + 1 {
        return Err(format!(
            "gen_field.py wrote {rows} lines to {}, expected {} (header + {n} points)",
            partial.display(),
            n + 1
        ));
    }
    std::fs::rename(&partial, &path).map_err(|e| {
        format!(
            "cannot rename {} to {}: {e}",
            partial.display(),
            path.display()
        )
    })?;
    Ok(path)
}

/// Number of lines in a file (a last line without a newline counts).
pub fn count_lines(path: &Path) -> Result<u64, String> {
    use std::io::Read;
    let mut f =
        std::fs::File::open(path).map_err(|e| format!("cannot open {}: {e}", path.display()))?;
    let mut buf = vec![0u8; 1 << 20];
    let (mut lines, mut last) = (0u64, b'\n');
    loop {
        let k = f
            .read(&mut buf)
            .map_err(|e| format!("cannot read {}: {e}", path.display()))?;
        if k == 0 {
            break;
        }
        lines += buf[..k].iter().filter(|&&b| b == b'\n').count() as u64;
        last = buf[k - 1];
    }
    if last != b'\n' {
        lines += 1;
    }
    Ok(lines)
}

/// Reads a file once and drops it, so the first timed run does not pay for a cold
/// page cache that the later ones do not.
pub fn warm_cache(path: &Path) -> Result<(), String> {
    count_lines(path).map(|_| ())
}
