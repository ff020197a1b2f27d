//! Helpers shared by the end-to-end tests of `kinema analyze`: running the binary,
//! writing input files, and reading its CSV and JSON output back.
//!
//! Not every test file uses every helper.
#![allow(dead_code)]

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

/// Run the `kinema` binary with `args`.
pub fn kinema<S: AsRef<std::ffi::OsStr>>(args: &[S]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_kinema"))
        .args(args)
        .output()
        .expect("the kinema binary runs")
}

/// Run `kinema analyze` and insist on success; returns stdout as text.
pub fn analyze_ok<S: AsRef<std::ffi::OsStr>>(args: &[S]) -> String {
    let mut all: Vec<std::ffi::OsString> = vec!["analyze".into()];
    all.extend(args.iter().map(|a| a.as_ref().to_owned()));
    let out = kinema(&all);
    assert!(
        out.status.success(),
        "kinema {:?} failed ({:?}):\n{}",
        all,
        out.status.code(),
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout).expect("stdout is UTF-8")
}

/// Write `text` to `dir/name`.
pub fn write(dir: &Path, name: &str, text: &str) -> PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, text).expect("write input file");
    p
}

/// A path as `&str` (tempdirs have UTF-8 paths here).
pub fn s(p: &Path) -> &str {
    p.to_str().expect("UTF-8 path")
}

/// A point of a 2D data set: id, reference coordinates, displacement (any length unit).
#[derive(Debug, Clone)]
pub struct P2 {
    pub id: String,
    pub x: [f64; 2],
    pub u: [f64; 2],
}

/// A point of a 3D data set.
#[derive(Debug, Clone)]
pub struct P3 {
    pub id: String,
    pub x: [f64; 3],
    pub u: [f64; 3],
}

/// Points CSV `id,x,y,ux,uy`, numbers in round-trip form (they read back exactly).
pub fn csv2(points: &[P2]) -> String {
    let mut t = String::from("id,x,y,ux,uy\n");
    for p in points {
        t.push_str(&format!(
            "{},{:?},{:?},{:?},{:?}\n",
            p.id, p.x[0], p.x[1], p.u[0], p.u[1]
        ));
    }
    t
}

/// Points CSV `id,x,y,z,ux,uy,uz`.
pub fn csv3(points: &[P3]) -> String {
    let mut t = String::from("id,x,y,z,ux,uy,uz\n");
    for p in points {
        t.push_str(&format!(
            "{},{:?},{:?},{:?},{:?},{:?},{:?}\n",
            p.id, p.x[0], p.x[1], p.x[2], p.u[0], p.u[1], p.u[2]
        ));
    }
    t
}

/// Points JSON `{"length_unit": unit, "points": [...]}` (unit omitted when `None`).
pub fn json2(points: &[P2], unit: Option<&str>) -> String {
    let pts: Vec<serde_json::Value> = points
        .iter()
        .map(|p| {
            serde_json::json!({"id": p.id, "x": p.x[0], "y": p.x[1], "ux": p.u[0], "uy": p.u[1]})
        })
        .collect();
    let mut doc = serde_json::json!({ "points": pts });
    if let Some(u) = unit {
        doc["length_unit"] = serde_json::Value::from(u);
    }
    doc.to_string()
}

/// A small deterministic generator (64-bit LCG, Knuth's MMIX constants), so the
/// test data need no extra crate and are the same on every run.
pub struct Lcg(u64);

impl Lcg {
    pub fn new(seed: u64) -> Self {
        Self(seed.wrapping_mul(0x9E37_79B9_7F4A_7C15) | 1)
    }
    /// Uniform in [0, 1).
    pub fn next(&mut self) -> f64 {
        self.0 = self
            .0
            .wrapping_mul(6_364_136_223_846_793_005)
            .wrapping_add(1_442_695_040_888_963_407);
        (self.0 >> 11) as f64 / (1u64 << 53) as f64
    }
}

/// `n` random reference positions in the box `origin + [0, size)`.
pub fn scatter2(n: usize, origin: [f64; 2], size: [f64; 2], seed: u64) -> Vec<[f64; 2]> {
    let mut r = Lcg::new(seed);
    (0..n)
        .map(|_| {
            [
                origin[0] + size[0] * r.next(),
                origin[1] + size[1] * r.next(),
            ]
        })
        .collect()
}

/// Displace 2D positions by `u = t + G·x` (IDs `P0`, `P1`, …).
pub fn affine2(xs: &[[f64; 2]], t: [f64; 2], g: [[f64; 2]; 2]) -> Vec<P2> {
    xs.iter()
        .enumerate()
        .map(|(i, x)| P2 {
            id: format!("P{i}"),
            x: *x,
            u: [
                t[0] + g[0][0] * x[0] + g[0][1] * x[1],
                t[1] + g[1][0] * x[0] + g[1][1] * x[1],
            ],
        })
        .collect()
}

/// Displace 3D positions by `u = t + G·x`.
pub fn affine3(xs: &[[f64; 3]], t: [f64; 3], g: [[f64; 3]; 3]) -> Vec<P3> {
    xs.iter()
        .enumerate()
        .map(|(i, x)| {
            let mut u = t;
            for (r, ur) in u.iter_mut().enumerate() {
                *ur += g[r][0] * x[0] + g[r][1] * x[1] + g[r][2] * x[2];
            }
            P3 {
                id: format!("P{i}"),
                x: *x,
                u,
            }
        })
        .collect()
}

/// One table of a result: column keys and rows of fields.
#[derive(Debug, Clone)]
pub struct Table {
    pub keys: Vec<String>,
    pub rows: Vec<Vec<String>>,
}

impl Table {
    fn col(&self, key: &str) -> usize {
        self.keys
            .iter()
            .position(|k| k == key)
            .unwrap_or_else(|| panic!("no column `{key}` in {:?}", self.keys))
    }

    /// Text of column `key` in row `r`.
    pub fn text(&self, r: usize, key: &str) -> &str {
        &self.rows[r][self.col(key)]
    }

    /// Number in column `key` of row `r` (panics on an empty or bad field).
    pub fn num(&self, r: usize, key: &str) -> f64 {
        let t = self.text(r, key);
        t.parse()
            .unwrap_or_else(|_| panic!("row {r} column {key}: `{t}` is not a number"))
    }

    /// Rows as maps from key to field.
    pub fn maps(&self) -> Vec<HashMap<&str, &str>> {
        self.rows
            .iter()
            .map(|r| {
                self.keys
                    .iter()
                    .map(String::as_str)
                    .zip(r.iter().map(String::as_str))
                    .collect()
            })
            .collect()
    }
}

/// Split kinema's CSV output into its tables (separated by one empty line) and
/// parse each with the `csv` crate.
pub fn parse_csv_sections(text: &str) -> Vec<Table> {
    text.split("\r\n\r\n")
        .map(|part| {
            let mut rdr = csv::ReaderBuilder::new().from_reader(part.as_bytes());
            let keys = rdr
                .headers()
                .expect("CSV header row")
                .iter()
                .map(str::to_owned)
                .collect();
            let rows = rdr
                .records()
                .map(|r| {
                    r.expect("well-formed CSV row")
                        .iter()
                        .map(str::to_owned)
                        .collect()
                })
                .collect();
            Table { keys, rows }
        })
        .collect()
}

/// `|a - b| <= tol`, with a message naming what is compared.
pub fn close(what: &str, a: f64, b: f64, tol: f64) {
    assert!(
        (a - b).abs() <= tol,
        "{what}: {a} vs expected {b} (difference {:e} > {tol:e})",
        (a - b).abs()
    );
}
