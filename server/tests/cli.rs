//! End-to-end checks of the `kinema` binary: help text and failures on bad input.

use std::path::PathBuf;
use std::process::{Command, Output};

fn kinema(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_kinema"))
        .args(args)
        .output()
        .expect("the kinema binary runs")
}

fn write(dir: &tempfile::TempDir, name: &str, text: &str) -> PathBuf {
    let p = dir.path().join(name);
    std::fs::write(&p, text).expect("write input");
    p
}

#[test]
fn help_shows_every_default_and_the_caution() {
    let out = kinema(&["analyze", "--help"]);
    assert!(out.status.success());
    let help = String::from_utf8(out.stdout).expect("utf-8");
    for needle in [
        "[default: delaunay for 2D points",
        "[default: table]",
        "[default: m]",
        "[default: microstrain]",
        "[default: stdout]",
        "[default: 12]",
        "[default: none]",
        "[default: 10]",
        "[default: 5]",
        "[default: 0.000001]",
        "Exit codes: 0 success; 2 bad input",
        "not a structural",
        "x_ref,y_ref",
    ] {
        assert!(help.contains(needle), "missing {needle:?} in\n{help}");
    }
}

#[test]
fn malformed_csv_exits_2_naming_line_and_column() {
    let dir = tempfile::tempdir().expect("dir");
    let p = write(
        &dir,
        "wall.csv",
        "id,x,y,ux,uy\nT1,0,0,0,0\nT2,1,0,0,0\nT3,0,1,abc,0\n",
    );
    let out = kinema(&[
        "analyze",
        p.to_str().expect("utf-8 path"),
        "--format",
        "json",
    ]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8(out.stderr).expect("utf-8");
    assert!(
        err.contains("wall.csv:4:4 (column ux): `abc` is not a number"),
        "{err}"
    );
    assert!(out.stdout.is_empty(), "nothing written on error");
}

#[test]
fn json_unit_mismatch_exits_2_with_position() {
    let dir = tempfile::tempdir().expect("dir");
    let p = write(
        &dir,
        "wall.json",
        "{\"length_unit\": \"mm\", \"points\": [{\"id\": 1, \"x\": 0, \"y\": 0, \"ux\": 0, \"uy\": 0}]}",
    );
    let out = kinema(&["analyze", p.to_str().expect("utf-8 path")]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8(out.stderr).expect("utf-8");
    assert!(
        err.contains("wall.json:1:20: the file declares length_unit `mm`"),
        "{err}"
    );
}

#[test]
fn bad_flags_exit_2_and_a_missing_file_exits_1() {
    let out = kinema(&["analyze", "p.csv", "--format", "xml"]);
    assert_eq!(out.status.code(), Some(2), "clap usage error");
    let dir = tempfile::tempdir().expect("dir");
    let p = write(&dir, "p.csv", "id,x,y,ux,uy\nT1,0,0,0,0\n");
    let out = kinema(&[
        "analyze",
        p.to_str().expect("utf-8 path"),
        "--min-angle-deg",
        "75",
    ]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("--min-angle-deg"));
    let missing = dir.path().join("absent.csv");
    let out = kinema(&["analyze", missing.to_str().expect("utf-8 path")]);
    assert_eq!(out.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&out.stderr).contains("absent.csv: cannot read"));
}

#[test]
fn output_file_is_not_created_when_the_input_is_bad() {
    let dir = tempfile::tempdir().expect("dir");
    let p = write(&dir, "p.csv", "id,x,y,ux\n");
    let target = dir.path().join("out.json");
    let out = kinema(&[
        "analyze",
        p.to_str().expect("utf-8 path"),
        "--output",
        target.to_str().expect("utf-8 path"),
    ]);
    assert_eq!(out.status.code(), Some(2));
    assert!(!target.exists());
}
