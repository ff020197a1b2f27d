//! Every estimator of `kinema analyze`, end to end through the file formats and units.
//!
//! The law checked: a displacement field `u = t + G·x` with constant `G` has the same
//! strain everywhere, so every region of every method must return exactly the
//! imposed small strain `ε = (G + Gᵀ)/2` and rotation `ω = (G[1][0] − G[0][1])/2`,
//! and a rigid translation (`G = 0`) must give zero strain and zero rotation.
//! Source: the definition of the small-strain tensor and the constant-strain
//! (uniform-field) property of linear displacement fields, e.g. Timoshenko &
//! Goodier, Theory of Elasticity, 3rd ed., §§2-4 (section numbers from memory:
//! strain components from displacements) — linear interpolation, least squares and
//! central differences all reproduce a linear field exactly.
//!
//! Tolerances: the inputs are written as round-trip doubles; coordinates lie about
//! 1000 m from the origin and regions are metres wide, so rounding of `u` is
//! amplified by about 1e3 before it becomes strain: 1e-6 microstrain (1e-12 strain)
//! leaves ample room and is still far below any strain a survey can resolve.

mod support;

use serde_json::Value;
use support::{
    P2, P3, Table, affine2, affine3, analyze_ok, close, csv2, csv3, json2, parse_csv_sections, s,
    scatter2, write,
};

/// Tolerance on strains, microstrain.
const TOL_UE: f64 = 1e-6;
/// Tolerance on rotations and principal directions, degrees (1e-12 rad ≈ 6e-11°,
/// but a direction is conditioned by e1 - e2, here ≥ 100 microstrain).
const TOL_DEG: f64 = 1e-6;

/// The imposed 2D field: tensor strains and rotation (dimensionless / rad).
#[derive(Debug, Clone, Copy)]
struct Field2 {
    exx: f64,
    eyy: f64,
    exy: f64,
    omega: f64,
    t: [f64; 2],
}

impl Field2 {
    fn uniform() -> Self {
        Self {
            exx: 200e-6,
            eyy: -80e-6,
            exy: 50e-6,
            omega: 30e-6,
            t: [0.012, -0.007],
        }
    }
    fn translation() -> Self {
        Self {
            exx: 0.0,
            eyy: 0.0,
            exy: 0.0,
            omega: 0.0,
            t: [0.031, 0.017],
        }
    }
    fn gradient(&self) -> [[f64; 2]; 2] {
        [
            [self.exx, self.exy - self.omega],
            [self.exy + self.omega, self.eyy],
        ]
    }
    /// Points displaced by this field, metres.
    fn points(&self, xs: &[[f64; 2]]) -> Vec<P2> {
        affine2(xs, self.t, self.gradient())
    }
}

/// The same points with every length multiplied by 1000 (metres → millimetres).
fn to_mm(points: &[P2]) -> Vec<P2> {
    points
        .iter()
        .map(|p| P2 {
            id: p.id.clone(),
            x: p.x.map(|v| v * 1000.0),
            u: p.u.map(|v| v * 1000.0),
        })
        .collect()
}

/// Check every row of a 2D main section against `f`; strains in microstrain.
fn check_rows2(what: &str, t: &Table, f: &Field2) {
    assert!(!t.rows.is_empty(), "{what}: no rows");
    let ue = 1e6;
    // Principal strains of the imposed tensor (Mohr's circle).
    let c = (f.exx + f.eyy) / 2.0;
    let r = (((f.exx - f.eyy) / 2.0).powi(2) + f.exy * f.exy).sqrt();
    for i in 0..t.rows.len() {
        let w = |k: &str| format!("{what} row {i} ({}) {k}", t.text(i, "label"));
        close(&w("exx"), t.num(i, "exx_microstrain"), f.exx * ue, TOL_UE);
        close(&w("eyy"), t.num(i, "eyy_microstrain"), f.eyy * ue, TOL_UE);
        close(&w("exy"), t.num(i, "exy_microstrain"), f.exy * ue, TOL_UE);
        close(
            &w("gxy"),
            t.num(i, "gxy_microstrain"),
            2.0 * f.exy * ue,
            TOL_UE,
        );
        close(
            &w("rotation"),
            t.num(i, "rotation_deg"),
            f.omega.to_degrees(),
            TOL_DEG,
        );
        close(&w("e1"), t.num(i, "e1_microstrain"), (c + r) * ue, TOL_UE);
        close(&w("e2"), t.num(i, "e2_microstrain"), (c - r) * ue, TOL_UE);
        close(
            &w("evol"),
            t.num(i, "evol_microstrain"),
            2.0 * c * ue,
            TOL_UE,
        );
        close(
            &w("max shear engineering"),
            t.num(i, "max_shear_engineering_microstrain"),
            2.0 * r * ue,
            TOL_UE,
        );
        if r > 0.0 {
            let theta = 0.5 * (2.0 * f.exy).atan2(f.exx - f.eyy);
            close(
                &w("theta1"),
                t.num(i, "theta1_deg"),
                theta.to_degrees(),
                TOL_DEG,
            );
        } else {
            assert_eq!(t.text(i, "isotropic"), "true", "{}", w("isotropic"));
            assert_eq!(t.text(i, "theta1_deg"), "", "{}", w("theta1 empty"));
        }
        assert_eq!(t.text(i, "small_strain_ok"), "true", "{}", w("adequacy"));
    }
}

/// The main section and the rejected section of a CSV output.
fn csv_tables(text: &str) -> (Table, Table) {
    let mut t = parse_csv_sections(text);
    assert_eq!(t.len(), 2, "main and rejected sections:\n{text}");
    let rej = t.pop().expect("rejected");
    assert_eq!(rej.keys, ["label", "members", "reason"]);
    (t.pop().expect("main"), rej)
}

/// A JSON section as a [`Table`], keys from the document's own `columns` member;
/// numbers as their JSON text, `null` as an empty field, lists joined by spaces.
fn json_table(doc: &Value, section: &str) -> Table {
    let keys: Vec<String> = doc["columns"][section]
        .as_array()
        .unwrap_or_else(|| panic!("no columns for `{section}`"))
        .iter()
        .map(|c| c["key"].as_str().expect("key").to_owned())
        .collect();
    let rows = doc[section]
        .as_array()
        .unwrap_or_else(|| panic!("no section `{section}`"))
        .iter()
        .map(|row| {
            keys.iter()
                .map(|k| match &row[k.as_str()] {
                    Value::Null => String::new(),
                    Value::String(t) => t.clone(),
                    Value::Array(a) => a
                        .iter()
                        .map(|v| v.as_str().expect("id").to_owned())
                        .collect::<Vec<_>>()
                        .join(" "),
                    other => other.to_string(),
                })
                .collect()
        })
        .collect();
    Table { keys, rows }
}

/// Parse a JSON output and check the labelling every document must carry.
fn json_doc(text: &str, length_unit: &str) -> Value {
    let v: Value = serde_json::from_str(text).expect("valid JSON output");
    assert_eq!(v["length_unit"], length_unit);
    assert_eq!(v["strain_unit"], "microstrain");
    let shear = v["shear_convention"].as_str().expect("shear_convention");
    assert!(
        shear.contains("tensor") && shear.contains("gxy = 2*exy"),
        "{shear}"
    );
    let caution = v["caution"].as_str().expect("caution");
    assert!(caution.contains("not a structural assessment"), "{caution}");
    v
}

/// 120 scattered points 1000 m / 2000 m from the origin in a 40 m × 15 m box.
fn scatter() -> Vec<[f64; 2]> {
    scatter2(120, [1000.0, 2000.0], [40.0, 15.0], 5)
}

/// Run one 2D method on `points` (metres) for CSV input and CSV output, in m and
/// in mm, and check every row; returns the row count of the m run.
fn run_csv2(method_args: &[&str], section_rows: impl Fn(&Table), f: &Field2) -> usize {
    let dir = tempfile::tempdir().expect("tempdir");
    let xs = scatter();
    let pts = f.points(&xs);
    let mut counts = Vec::new();
    for (unit, pts) in [("m", pts.clone()), ("mm", to_mm(&pts))] {
        let input = write(dir.path(), &format!("pts_{unit}.csv"), &csv2(&pts));
        let mut args = vec![s(&input), "--format", "csv", "--length-unit", unit];
        args.extend_from_slice(method_args);
        let (main, _rej) = csv_tables(&analyze_ok(&args));
        check_rows2(&format!("{method_args:?} in {unit}"), &main, f);
        section_rows(&main);
        counts.push(main.rows.len());
    }
    assert_eq!(counts[0], counts[1], "same regions in m and in mm");
    counts[0]
}

#[test]
fn delaunay_recovers_a_uniform_field_and_a_translation_in_m_and_mm() {
    for f in [Field2::uniform(), Field2::translation()] {
        let n = run_csv2(&["--method", "delaunay"], |_| {}, &f);
        assert!(n > 100, "{n} triangles pass the default screen");
    }
}

#[test]
fn a_field_in_mm_gives_the_same_microstrain_and_lengths_in_mm() {
    // The unit law: strain is a ratio of lengths, so scaling every length by 1000
    // leaves it unchanged; the centroid is written in the declared unit.
    let dir = tempfile::tempdir().expect("tempdir");
    let pts = Field2::uniform().points(&scatter());
    let m = write(dir.path(), "m.csv", &csv2(&pts));
    let mm = write(dir.path(), "mm.csv", &csv2(&to_mm(&pts)));
    let run = |p: &std::path::Path, unit: &str| {
        csv_tables(&analyze_ok(&[
            s(p),
            "--method",
            "network",
            "--format",
            "csv",
            "--length-unit",
            unit,
        ]))
        .0
    };
    let (a, b) = (run(&m, "m"), run(&mm, "mm"));
    assert_eq!(a.rows.len(), 1);
    assert_eq!(b.rows.len(), 1);
    for k in [
        "exx_microstrain",
        "eyy_microstrain",
        "exy_microstrain",
        "e1_microstrain",
        "theta1_deg",
    ] {
        close(k, b.num(0, k), a.num(0, k), TOL_UE);
    }
    close("x in mm", b.num(0, "x_mm"), 1000.0 * a.num(0, "x_m"), 1e-6);
    close("y in mm", b.num(0, "y_mm"), 1000.0 * a.num(0, "y_m"), 1e-6);
    // Fitted centroid displacement, in the declared unit.
    close(
        "ux in mm",
        b.num(0, "ux_mm"),
        1000.0 * a.num(0, "ux_m"),
        1e-6,
    );
}

#[test]
fn neighbourhood_k_and_radius_recover_a_uniform_field_and_a_translation() {
    for f in [Field2::uniform(), Field2::translation()] {
        let n = run_csv2(
            &["--method", "neighbourhood", "--k", "8"],
            |t| {
                for i in 0..t.rows.len() {
                    assert_eq!(t.text(i, "n_points"), "8");
                }
            },
            &f,
        );
        assert_eq!(n, 120, "one neighbourhood per point");
    }
    // --radius is in the declared unit: 8 m, or 8000 mm.
    for f in [Field2::uniform(), Field2::translation()] {
        let dir = tempfile::tempdir().expect("tempdir");
        let pts = f.points(&scatter());
        let mut counts = Vec::new();
        for (unit, pts, r) in [("m", pts.clone(), "8"), ("mm", to_mm(&pts), "8000")] {
            let input = write(dir.path(), "pts.csv", &csv2(&pts));
            let (main, rej) = csv_tables(&analyze_ok(&[
                s(&input),
                "--method",
                "neighbourhood",
                "--radius",
                r,
                "--length-unit",
                unit,
                "--format",
                "csv",
            ]));
            check_rows2(&format!("radius {r} {unit}"), &main, &f);
            assert_eq!(main.rows.len() + rej.rows.len(), 120);
            counts.push((main.rows.len(), main.maps()[0]["n_points"].to_owned()));
        }
        assert_eq!(counts[0], counts[1], "same neighbourhoods in m and in mm");
    }
}

#[test]
fn network_recovers_a_uniform_field_from_json_input_in_m_and_mm() {
    for f in [Field2::uniform(), Field2::translation()] {
        let dir = tempfile::tempdir().expect("tempdir");
        let pts = f.points(&scatter());
        for (unit, pts) in [("m", pts.clone()), ("mm", to_mm(&pts))] {
            let input = write(dir.path(), "pts.json", &json2(&pts, Some(unit)));
            let v = json_doc(
                &analyze_ok(&[
                    s(&input),
                    "--method",
                    "network",
                    "--length-unit",
                    unit,
                    "--format",
                    "json",
                ]),
                unit,
            );
            assert_eq!(v["method"], "network");
            assert_eq!(v["points"], 120);
            let t = json_table(&v, "network");
            assert_eq!(t.rows.len(), 1);
            check_rows2(&format!("network {unit}"), &t, &f);
            assert_eq!(t.text(0, "n_points"), "120");
            assert!(v["rejected"].as_array().expect("rejected").is_empty());
        }
    }
}

#[test]
fn groups_recover_a_uniform_field_from_a_groups_file() {
    for f in [Field2::uniform(), Field2::translation()] {
        let dir = tempfile::tempdir().expect("tempdir");
        let pts = f.points(&scatter());
        let input = write(dir.path(), "pts.csv", &csv2(&pts));
        let mut g = String::from("group,point_id\n");
        for (name, members) in [("NORTH", 0..6), ("SOUTH", 6..15), ("EAST", 40..44)] {
            for i in members {
                g.push_str(&format!("{name},P{i}\n"));
            }
        }
        let groups = write(dir.path(), "groups.csv", &g);
        let v = json_doc(
            &analyze_ok(&[s(&input), "--groups", s(&groups), "--format", "json"]),
            "m",
        );
        assert_eq!(v["method"], "groups", "--groups implies the method");
        let t = json_table(&v, "groups");
        let labels: Vec<&str> = (0..t.rows.len()).map(|i| t.text(i, "label")).collect();
        assert_eq!(labels, ["NORTH", "SOUTH", "EAST"]);
        check_rows2("groups", &t, &f);
        assert_eq!(t.text(1, "n_points"), "9");
        assert_eq!(t.text(1, "members"), "P6 P7 P8 P9 P10 P11 P12 P13 P14");
    }
}

#[test]
fn elements_recover_a_uniform_field_in_2d() {
    // A 3 x 3 patch of points, 8 counter-clockwise triangles, in JSON output.
    for f in [Field2::uniform(), Field2::translation()] {
        let dir = tempfile::tempdir().expect("tempdir");
        let xs: Vec<[f64; 2]> = (0..9)
            .map(|k| [1000.0 + 2.0 * (k % 3) as f64, 2000.0 + 1.5 * (k / 3) as f64])
            .collect();
        let pts = f.points(&xs);
        let input = write(dir.path(), "pts.csv", &csv2(&pts));
        let mut e = String::from("element_id,v0,v1,v2\n");
        for (j, i) in [(0, 0), (0, 1), (1, 0), (1, 1)] {
            let a = 3 * j + i;
            e.push_str(&format!("E{a}a,P{a},P{},P{}\n", a + 1, a + 4));
            e.push_str(&format!("E{a}b,P{a},P{},P{}\n", a + 4, a + 3));
        }
        let elements = write(dir.path(), "elements.csv", &e);
        let v = json_doc(
            &analyze_ok(&[s(&input), "--elements", s(&elements), "--format", "json"]),
            "m",
        );
        assert_eq!(v["method"], "elements");
        let t = json_table(&v, "elements");
        assert_eq!(t.rows.len(), 8);
        check_rows2("elements 2D", &t, &f);
        // Right isosceles triangles: smallest angle atan(1.5/2) = 36.87°.
        close(
            "min angle",
            t.num(0, "min_angle_deg"),
            (1.5f64 / 2.0).atan().to_degrees(),
            1e-9,
        );
    }
}

/// The imposed 3D field (dimensionless / rad): tensor strains, rotation vector.
fn gradient3() -> ([[f64; 3]; 3], [f64; 6], [f64; 3]) {
    let e = [150e-6, -60e-6, 90e-6, 20e-6, -35e-6, 45e-6]; // exx eyy ezz exy eyz exz
    let w = [10e-6, -25e-6, 40e-6]; // wx wy wz
    // G = ε + W with W = [[0, -wz, wy], [wz, 0, -wx], [-wy, wx, 0]].
    let g = [
        [e[0], e[3] - w[2], e[5] + w[1]],
        [e[3] + w[2], e[1], e[4] - w[0]],
        [e[5] - w[1], e[4] + w[0], e[2]],
    ];
    (g, e, w)
}

fn check_rows3(what: &str, t: &Table, e: &[f64; 6], w: &[f64; 3]) {
    assert!(!t.rows.is_empty(), "{what}: no rows");
    let keys = [
        "exx_microstrain",
        "eyy_microstrain",
        "ezz_microstrain",
        "exy_microstrain",
        "eyz_microstrain",
        "exz_microstrain",
    ];
    for i in 0..t.rows.len() {
        for (k, v) in keys.iter().zip(e) {
            close(&format!("{what} row {i} {k}"), t.num(i, k), v * 1e6, TOL_UE);
        }
        for (k, v) in ["gxy_microstrain", "gyz_microstrain", "gxz_microstrain"]
            .iter()
            .zip(&e[3..])
        {
            close(
                &format!("{what} row {i} {k}"),
                t.num(i, k),
                2.0 * v * 1e6,
                TOL_UE,
            );
        }
        for (k, v) in ["wx_deg", "wy_deg", "wz_deg"].iter().zip(w) {
            close(
                &format!("{what} row {i} {k}"),
                t.num(i, k),
                v.to_degrees(),
                TOL_DEG,
            );
        }
        close(
            &format!("{what} row {i} evol"),
            t.num(i, "evol_microstrain"),
            (e[0] + e[1] + e[2]) * 1e6,
            TOL_UE,
        );
    }
}

fn orient(x: &[[f64; 3]], v: [usize; 4]) -> [usize; 4] {
    let d = |a: usize, b: usize| [0, 1, 2].map(|k| x[b][k] - x[a][k]);
    let (p, q, r) = (d(v[0], v[1]), d(v[0], v[2]), d(v[0], v[3]));
    let det = p[0] * (q[1] * r[2] - q[2] * r[1]) - p[1] * (q[0] * r[2] - q[2] * r[0])
        + p[2] * (q[0] * r[1] - q[1] * r[0]);
    if det > 0.0 {
        v
    } else {
        [v[0], v[2], v[1], v[3]]
    }
}

#[test]
fn tetrahedra_and_3d_network_recover_a_uniform_field() {
    let (g, e, w) = gradient3();
    let zero = ([[0.0; 3]; 3], [0.0; 6], [0.0; 3]);
    for (g, e, w) in [(g, e, w), zero] {
        let dir = tempfile::tempdir().expect("tempdir");
        // Cube 3 m x 2 m x 1.5 m at (1000, 2000, 50), corners k = i + 2j + 4l.
        let xs: Vec<[f64; 3]> = (0..8)
            .map(|k| {
                [
                    1000.0 + 3.0 * (k & 1) as f64,
                    2000.0 + 2.0 * ((k >> 1) & 1) as f64,
                    50.0 + 1.5 * ((k >> 2) & 1) as f64,
                ]
            })
            .collect();
        let pts: Vec<P3> = affine3(&xs, [0.004, -0.002, 0.009], g);
        let input = write(dir.path(), "pts.csv", &csv3(&pts));
        // Kuhn's split of the cube into six tetrahedra along the diagonal 0-7.
        let mut el = String::from("element_id,v0,v1,v2,v3\n");
        for (n, path) in [[1, 3], [1, 5], [2, 3], [2, 6], [4, 5], [4, 6]]
            .iter()
            .enumerate()
        {
            let v = orient(&xs, [0, path[0], path[1], 7]);
            el.push_str(&format!("K{n},P{},P{},P{},P{}\n", v[0], v[1], v[2], v[3]));
        }
        let elements = write(dir.path(), "tets.csv", &el);
        let (t, rej) = csv_tables(&analyze_ok(&[
            s(&input),
            "--elements",
            s(&elements),
            "--format",
            "csv",
        ]));
        assert!(rej.rows.is_empty(), "{:?}", rej.rows);
        assert_eq!(t.rows.len(), 6);
        check_rows3("tetrahedra", &t, &e, &w);
        let (t, _) = csv_tables(&analyze_ok(&[
            s(&input),
            "--method",
            "network",
            "--format",
            "csv",
        ]));
        assert_eq!(t.rows.len(), 1);
        check_rows3("3D network", &t, &e, &w);
    }
}

#[test]
fn grid_recovers_a_uniform_field_with_missing_nodes() {
    for f in [Field2::uniform(), Field2::translation()] {
        let dir = tempfile::tempdir().expect("tempdir");
        // 7 x 5 lattice at 2 m x 1.5 m; three nodes have no point.
        let missing = [(3, 2), (0, 4), (6, 1)];
        let xs: Vec<[f64; 2]> = (0..5)
            .flat_map(|j| (0..7).map(move |i| (i, j)))
            .filter(|n| !missing.contains(n))
            .map(|(i, j)| [1000.0 + 2.0 * i as f64, 2000.0 + 1.5 * j as f64])
            .collect();
        let pts = f.points(&xs);
        for (unit, pts) in [("m", pts.clone()), ("mm", to_mm(&pts))] {
            let input = write(dir.path(), "grid.csv", &csv2(&pts));
            let (t, rej) = csv_tables(&analyze_ok(&[
                s(&input),
                "--method",
                "grid",
                "--length-unit",
                unit,
                "--format",
                "csv",
            ]));
            check_rows2(&format!("grid {unit}"), &t, &f);
            assert!(
                t.rows.len() + rej.rows.len() >= 32 && t.rows.len() >= 25,
                "{} nodes, {} rejected",
                t.rows.len(),
                rej.rows.len()
            );
        }
    }
}

#[test]
fn uniaxial_stretch_along_30_degrees_has_e1_along_30_degrees() {
    // Source: strain transformation for a uniaxial stretch ε along θ = 30°:
    // exx = ε cos²θ, eyy = ε sin²θ, gxy = 2 ε sinθ cosθ, so e1 = ε, e2 = 0 and
    // theta1 = θ (Gere & Goodno, Mechanics of Materials, ch. 7, plane strain).
    let eps = 500e-6;
    let th = 30f64.to_radians();
    let f = Field2 {
        exx: eps * th.cos().powi(2),
        eyy: eps * th.sin().powi(2),
        exy: eps * th.sin() * th.cos(),
        omega: 0.0,
        t: [0.0, 0.0],
    };
    let dir = tempfile::tempdir().expect("tempdir");
    let input = write(dir.path(), "pts.csv", &csv2(&f.points(&scatter())));
    for method in ["network", "delaunay"] {
        let v = json_doc(
            &analyze_ok(&[s(&input), "--method", method, "--format", "json"]),
            "m",
        );
        let section = if method == "network" {
            "network"
        } else {
            "elements"
        };
        let t = json_table(&v, section);
        check_rows2(method, &t, &f);
        for i in 0..t.rows.len() {
            close("e1 = ε", t.num(i, "e1_microstrain"), 500.0, TOL_UE);
            close("e2 = 0", t.num(i, "e2_microstrain"), 0.0, TOL_UE);
            close("theta1 = 30°", t.num(i, "theta1_deg"), 30.0, TOL_DEG);
            close(
                "gxy = 2 ε sin30 cos30",
                t.num(i, "gxy_microstrain"),
                1e6 * 2.0 * eps * 0.5 * 3f64.sqrt() / 2.0,
                TOL_UE,
            );
        }
    }
}

/// Points rotated rigidly by `theta` (exact rotation matrix) about (1000, 2000).
fn rigid_rotation(theta: f64) -> Vec<P2> {
    let (sn, cs) = theta.sin_cos();
    scatter()
        .iter()
        .enumerate()
        .map(|(i, x)| {
            let (dx, dy) = (x[0] - 1000.0, x[1] - 2000.0);
            P2 {
                id: format!("P{i}"),
                x: *x,
                u: [cs * dx - sn * dy - dx, sn * dx + cs * dy - dy],
            }
        })
        .collect()
}

#[test]
fn a_rigid_rotation_of_0_3_degrees_is_flagged_and_10_microradians_is_not() {
    let dir = tempfile::tempdir().expect("tempdir");
    // 0.3°: ε = (cos θ − 1)·I = −13.7 microstrain of spurious strain, above the
    // 1 microstrain resolution; the Green-Lagrange strain of a rigid rotation is
    // exactly zero (E = (FᵀF − I)/2 with F = R). Source: small-strain vs finite
    // strain of a rigid rotation, Timoshenko & Goodier, Theory of Elasticity, 3rd
    // ed., §2 (from memory for the section number).
    let theta = 0.3f64.to_radians();
    let input = write(dir.path(), "rot.csv", &csv2(&rigid_rotation(theta)));
    for method in ["network", "delaunay"] {
        let v = json_doc(
            &analyze_ok(&[s(&input), "--method", method, "--format", "json"]),
            "m",
        );
        let section = if method == "network" {
            "network"
        } else {
            "elements"
        };
        let t = json_table(&v, section);
        assert!(!t.rows.is_empty());
        for i in 0..t.rows.len() {
            assert_eq!(t.text(i, "small_strain_ok"), "false", "{method} row {i}");
            let note = t.text(i, "adequacy_note");
            assert!(note.contains("rotation too large"), "{note}");
            // Small rotation ω = sin θ for an exact rotation matrix.
            close(
                "rotation",
                t.num(i, "rotation_deg"),
                theta.sin().to_degrees(),
                TOL_DEG,
            );
            let spurious = (theta.cos() - 1.0) * 1e6;
            close("exx", t.num(i, "exx_microstrain"), spurious, TOL_UE);
            close("eyy", t.num(i, "eyy_microstrain"), spurious, TOL_UE);
            close("exy", t.num(i, "exy_microstrain"), 0.0, TOL_UE);
            for k in [
                "gl_exx_microstrain",
                "gl_eyy_microstrain",
                "gl_exy_microstrain",
            ] {
                close(k, t.num(i, k), 0.0, TOL_UE);
            }
        }
        let notes = v["summary"]["notes"].as_array().expect("notes");
        assert!(
            notes.iter().any(|n| n
                .as_str()
                .is_some_and(|n| n.contains("small-strain theory is not adequate"))),
            "{notes:?}"
        );
    }
    // 10 µrad: spurious strain θ²/2 = 5e-11, far below the resolution.
    let theta = 10e-6;
    let input = write(dir.path(), "tiny.csv", &csv2(&rigid_rotation(theta)));
    let v = json_doc(
        &analyze_ok(&[s(&input), "--method", "network", "--format", "json"]),
        "m",
    );
    let t = json_table(&v, "network");
    assert_eq!(t.text(0, "small_strain_ok"), "true");
    assert_eq!(t.text(0, "adequacy_note"), "");
    close(
        "rotation",
        t.num(0, "rotation_deg"),
        theta.sin().to_degrees(),
        1e-9,
    );
    assert!(
        v["summary"]["notes"]
            .as_array()
            .expect("notes")
            .iter()
            .all(|n| !n.as_str().unwrap_or("").contains("not adequate"))
    );
}

#[test]
fn table_output_states_units_conventions_and_the_caution() {
    let dir = tempfile::tempdir().expect("tempdir");
    let pts = to_mm(&Field2::uniform().points(&scatter()));
    let input = write(dir.path(), "pts.csv", &csv2(&pts));
    let t = analyze_ok(&[s(&input), "--method", "network", "--length-unit", "mm"]);
    assert!(
        t.contains("length unit: mm (coordinates, displacements, distances)"),
        "{t}"
    );
    assert!(t.contains("strain unit: microstrain"), "{t}");
    assert!(
        t.contains("shear:       exy, eyz, exz are tensor shear strains"),
        "{t}"
    );
    assert!(
        t.contains("angles:      degrees, counter-clockwise from +x"),
        "{t}"
    );
    assert!(
        t.lines().any(|l| l.trim_start().starts_with("exy")
            && l.contains("[microstrain]")
            && l.contains("tensor shear strain exy = gxy/2")),
        "{t}"
    );
    assert!(
        t.lines()
            .any(|l| l.trim_start().starts_with("x ") && l.contains("[mm]")),
        "{t}"
    );
    assert!(t.contains("accepted: 1, rejected: 0"), "{t}");
    let last = t.lines().last().expect("lines");
    assert_eq!(
        last,
        "Kinematic estimates from measured displacements, not a structural assessment; \
         defer to local codes and licensed practice."
    );
    // exx = 200 microstrain, printed to 0.1 microstrain.
    let row = t
        .lines()
        .find(|l| l.starts_with("network "))
        .expect("the network row");
    assert!(row.contains(" 200.0 ") && row.contains(" -80.0 "), "{row}");
}
