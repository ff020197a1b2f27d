//! Bad input to `kinema analyze`: exit code 2, a message naming the problem (with
//! file:line:column where the problem sits in a file), and nothing written to the
//! `--output` file. Plus one large input that must run through.

mod support;

use std::path::{Path, PathBuf};
use std::time::Instant;

use support::{P2, csv2, kinema, parse_csv_sections, s, scatter2, write};

/// Run `kinema analyze ARGS -o DIR/out.csv`; check exit code 2, that stderr holds
/// every needle, and that nothing reached stdout. Returns the output path.
fn rejects(dir: &Path, args: &[&str], needles: &[&str]) -> PathBuf {
    let target = dir.join("out.csv");
    let mut all = vec!["analyze"];
    all.extend_from_slice(args);
    all.extend(["-o", s(&target)]);
    let out = kinema(&all);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{all:?}: {err}");
    for n in needles {
        assert!(err.contains(n), "{all:?}: stderr lacks {n:?}:\n{err}");
    }
    assert!(out.stdout.is_empty(), "{all:?}: wrote to stdout");
    target
}

/// Bad input found while the input is read: the output file is never created.
fn rejects_before_output(dir: &Path, args: &[&str], needles: &[&str]) {
    let target = rejects(dir, args, needles);
    assert!(!target.exists(), "{args:?}: the output file was created");
}

/// Bad input found by the estimators. Nothing may be written; the file should not
/// exist either, but currently does (empty): see
/// `output_file_is_not_created_when_the_estimator_rejects_the_data`.
fn rejects_nothing_written(dir: &Path, args: &[&str], needles: &[&str]) {
    let target = rejects(dir, args, needles);
    if target.exists() {
        let len = std::fs::metadata(&target).expect("metadata").len();
        assert_eq!(len, 0, "{args:?}: {len} bytes written to the output");
    }
}

const SQUARE: &str = "id,x,y,ux,uy\nA,0,0,0,0\nB,1,0,0,0\nC,0,1,0,0\nD,1,1,0,0\n";

#[test]
fn non_finite_values_are_named_with_line_and_column() {
    let d = tempfile::tempdir().expect("tempdir");
    let p = write(
        d.path(),
        "nan.csv",
        "id,x,y,ux,uy\nA,0,0,0,0\nB,1,0,NaN,0\nC,0,1,0,0\n",
    );
    rejects_before_output(
        d.path(),
        &[s(&p)],
        &["nan.csv:3:4 (column ux): `NaN` is not a finite number"],
    );
    let p = write(
        d.path(),
        "inf.csv",
        "id,x,y,ux,uy\nA,0,0,0,0\nB,1,0,0,0\nC,0,inf,0,0\n",
    );
    rejects_before_output(
        d.path(),
        &[s(&p)],
        &["inf.csv:4:3 (column y): `inf` is not a finite number"],
    );
}

#[test]
fn duplicate_ids_name_both_lines() {
    let d = tempfile::tempdir().expect("tempdir");
    let p = write(
        d.path(),
        "dup.csv",
        "id,x,y,ux,uy\nA,0,0,0,0\nB,1,0,0,0\nA,0,1,0,0\n",
    );
    rejects_before_output(
        d.path(),
        &[s(&p)],
        &["dup.csv:4: duplicate point id `A` (first on line 2)"],
    );
}

#[test]
fn empty_file_header_only_and_ragged_row() {
    let d = tempfile::tempdir().expect("tempdir");
    let p = write(d.path(), "empty.csv", "");
    rejects_before_output(d.path(), &[s(&p)], &["empty.csv: the file is empty"]);
    let p = write(d.path(), "head.csv", "id,x,y,ux,uy\n");
    rejects_before_output(
        d.path(),
        &[s(&p)],
        &["head.csv: no points after the header"],
    );
    let p = write(
        d.path(),
        "ragged.csv",
        "id,x,y,ux,uy\nA,0,0,0,0\nB,1,0,0\nC,0,1,0,0\n",
    );
    rejects_before_output(
        d.path(),
        &[s(&p)],
        &["ragged.csv:3: 4 fields, but the header has 5"],
    );
}

#[test]
fn malformed_json_and_unit_mismatch_give_line_and_column() {
    let d = tempfile::tempdir().expect("tempdir");
    let p = write(
        d.path(),
        "bad.json",
        "{\"points\": [{\"id\": \"A\", \"x\": 0,, }]}",
    );
    rejects_before_output(d.path(), &[s(&p)], &["bad.json:1:32:"]);
    let p = write(
        d.path(),
        "mm.json",
        "{\"length_unit\": \"mm\", \"points\": [{\"id\": \"A\", \"x\": 0, \"y\": 0, \"ux\": 0, \
         \"uy\": 0}, {\"id\": \"B\", \"x\": 1, \"y\": 0, \"ux\": 0, \"uy\": 0}, {\"id\": \"C\", \
         \"x\": 0, \"y\": 1, \"ux\": 0, \"uy\": 0}]}",
    );
    rejects_before_output(
        d.path(),
        &[s(&p), "--length-unit", "m"],
        &["mm.json:1:20: the file declares length_unit `mm` but --length-unit is `m`"],
    );
}

#[test]
fn unknown_column_and_unknown_unit() {
    let d = tempfile::tempdir().expect("tempdir");
    let p = write(
        d.path(),
        "unk.csv",
        "id,x,y,ux,uy,temp\nA,0,0,0,0,1\nB,1,0,0,0,1\nC,0,1,0,0,1\n",
    );
    rejects_before_output(d.path(), &[s(&p)], &["unk.csv:1:6: unknown column `temp`"]);
    let p = write(d.path(), "sq.csv", SQUARE);
    rejects_before_output(
        d.path(),
        &[s(&p), "--length-unit", "km"],
        &[
            "invalid value 'km'",
            "--length-unit",
            "[possible values: m, mm]",
        ],
    );
}

#[test]
fn delaunay_on_a_3d_file_is_refused() {
    let d = tempfile::tempdir().expect("tempdir");
    let p = write(
        d.path(),
        "p3.csv",
        "id,x,y,z,ux,uy,uz\nA,0,0,0,0,0,0\nB,1,0,0,0,0,0\nC,0,1,0,0,0,0\nD,0,0,1,0,0,0\n",
    );
    rejects_before_output(
        d.path(),
        &[s(&p), "--method", "delaunay"],
        &["--method delaunay triangulates 2D points", "3D"],
    );
}

/// An input the estimators reject.
struct Case {
    /// Points file name and CSV text.
    points: (&'static str, &'static str),
    /// Element or groups file (name, text), given after the last flag.
    extra: Option<(&'static str, &'static str)>,
    flags: Vec<&'static str>,
    /// Expected part of the message.
    message: &'static str,
}

fn case(
    points: (&'static str, &'static str),
    extra: Option<(&'static str, &'static str)>,
    flags: Vec<&'static str>,
    message: &'static str,
) -> Case {
    Case {
        points,
        extra,
        flags,
        message,
    }
}

/// The inputs the estimators reject.
fn estimator_cases() -> Vec<Case> {
    let collinear = "id,x,y,ux,uy\nA,0,0,0,0\nB,1,1,0,0\nC,2,2,0,0\nD,3,3,0,0\n";
    vec![
        case(
            ("col.csv", collinear),
            None,
            vec!["--method", "delaunay"],
            "Delaunay triangulation: points are collinear",
        ),
        case(
            ("col.csv", collinear),
            None,
            vec!["--method", "network"],
            "network: points are collinear",
        ),
        case(
            ("two.csv", "id,x,y,ux,uy\nA,0,0,0,0\nB,1,0,0,0\n"),
            None,
            vec!["--method", "delaunay"],
            "need at least 3 points, got 2",
        ),
        case(
            ("sq.csv", SQUARE),
            Some(("el.csv", "element_id,v0,v1,v2\nE1,A,B,Z\n")),
            vec!["--elements"],
            "element `E1` refers to unknown point `Z`",
        ),
        case(
            ("sq.csv", SQUARE),
            Some(("el.csv", "element_id,v0,v1,v2\nE1,A,C,B\n")),
            vec!["--elements"],
            "element `E1`: vertices run clockwise",
        ),
        case(
            (
                "gcol.csv",
                "id,x,y,ux,uy\nA,0,0,0,0\nB,1,1,0,0\nC,2,2,0,0\nD,1,0,0,0\n",
            ),
            Some(("groups.csv", "group,point_id\nG1,A\nG1,B\nG1,C\n")),
            vec!["--groups"],
            "group `G1`: points are collinear",
        ),
        case(
            ("sq.csv", SQUARE),
            None,
            vec!["--method", "neighbourhood", "--k", "9"],
            "invalid parameter `k`: k = 9 exceeds the 4 points in the set",
        ),
        case(
            (
                "scat.csv",
                "id,x,y,ux,uy\nA,0,0,0,0\nB,1.3,0.2,0,0\nC,0.1,1.7,0,0\nD,5.2,3.1,0,0\nE,2.2,7.3,0,0\n",
            ),
            None,
            vec!["--method", "grid"],
            "is not on the grid",
        ),
    ]
}

fn estimator_args(dir: &Path, c: &Case) -> Vec<String> {
    let p = write(dir, c.points.0, c.points.1);
    let mut args = vec![s(&p).to_owned()];
    args.extend(c.flags.iter().map(|f| (*f).to_owned()));
    if let Some((name, text)) = c.extra {
        args.push(s(&write(dir, name, text)).to_owned());
    }
    args
}

#[test]
fn data_the_estimators_reject_exit_2_and_write_nothing() {
    for c in estimator_cases() {
        let d = tempfile::tempdir().expect("tempdir");
        let args = estimator_args(d.path(), &c);
        let args: Vec<&str> = args.iter().map(String::as_str).collect();
        rejects_nothing_written(d.path(), &args, &[c.message]);
    }
}

#[test]
fn output_file_is_not_created_when_the_estimator_rejects_the_data() {
    // `--help` promises: "The file is created only after the input has been read and
    // checked". cli::analyze::run opens the output before pipeline::run, whose
    // checks (triangulation, elements, groups, --k, grid) then fail.
    for c in estimator_cases() {
        let d = tempfile::tempdir().expect("tempdir");
        let args = estimator_args(d.path(), &c);
        let args: Vec<&str> = args.iter().map(String::as_str).collect();
        rejects_before_output(d.path(), &args, &[c.message]);
    }
}

/// Number of points on the convex hull (Andrew's monotone chain, collinear points
/// on an edge excluded; random doubles have none).
fn hull_size(pts: &[[f64; 2]]) -> usize {
    let mut p: Vec<[f64; 2]> = pts.to_vec();
    p.sort_by(|a, b| a[0].total_cmp(&b[0]).then(a[1].total_cmp(&b[1])));
    let cross = |o: [f64; 2], a: [f64; 2], b: [f64; 2]| {
        (a[0] - o[0]) * (b[1] - o[1]) - (a[1] - o[1]) * (b[0] - o[0])
    };
    let mut h: Vec<[f64; 2]> = Vec::new();
    for pass in 0..2 {
        let start = h.len();
        let iter: Box<dyn Iterator<Item = &[f64; 2]>> = if pass == 0 {
            Box::new(p.iter())
        } else {
            Box::new(p.iter().rev())
        };
        for &q in iter {
            while h.len() >= start + 2 && cross(h[h.len() - 2], h[h.len() - 1], q) <= 0.0 {
                h.pop();
            }
            h.push(q);
        }
        h.pop();
    }
    h.len()
}

#[test]
fn a_large_file_runs_and_writes_one_row_per_triangle() {
    // 50 000 points (200 000 take about a minute in a debug build on a shared machine).
    let n = 50_000;
    let d = tempfile::tempdir().expect("tempdir");
    let xs = scatter2(n, [1000.0, 2000.0], [500.0, 200.0], 99);
    let pts: Vec<P2> = xs
        .iter()
        .enumerate()
        .map(|(i, x)| P2 {
            id: format!("P{i}"),
            x: *x,
            u: [1e-4 * (x[0] - 1000.0), -3e-5 * (x[1] - 2000.0)],
        })
        .collect();
    let input = write(d.path(), "big.csv", &csv2(&pts));
    let target = d.path().join("big_out.csv");
    let start = Instant::now();
    let out = kinema(&[
        "analyze",
        s(&input),
        "--method",
        "delaunay",
        "--format",
        "csv",
        "-q",
        "-o",
        s(&target),
    ]);
    let took = start.elapsed();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    eprintln!("{n} points in {took:?}");
    let text = std::fs::read_to_string(&target).expect("output");
    // Euler's formula: a triangulation of n points, h of them on the convex hull,
    // has 2n - 2 - h triangles (de Berg et al., Computational Geometry, 3rd ed.,
    // Thm 9.1). Every triangle is one row, in `elements` or in `rejected`.
    let triangles = 2 * n - 2 - hull_size(&xs);
    let lines = text.lines().count();
    assert_eq!(
        lines,
        triangles + 2 + 1,
        "rows = triangles + two header lines + the empty separator line"
    );
    let t = parse_csv_sections(&text);
    assert_eq!(t.len(), 2);
    assert_eq!(t[0].rows.len() + t[1].rows.len(), triangles);
    assert!(
        t[0].rows.len() > triangles * 9 / 10,
        "most triangles pass the screen"
    );
}
