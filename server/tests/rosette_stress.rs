//! End-to-end checks of `kinema analyze --method rosette` and of the stress columns
//! (`--material`), run through the `kinema` binary.
//!
//! Every expected value is computed here from a textbook formula, independently of
//! the code under test; the source is named beside each check.

use std::path::PathBuf;
use std::process::{Command, Output};

use serde_json::Value;

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

/// Run with `--format json`, expect success, return the document.
fn json(args: &[&str]) -> Value {
    let mut v = args.to_vec();
    v.extend(["--format", "json"]);
    let out = kinema(&v);
    assert!(
        out.status.success(),
        "kinema {v:?} failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).expect("valid JSON")
}

/// Run, expect exit code 2, return stderr.
fn fails(args: &[&str]) -> String {
    let out = kinema(args);
    assert_eq!(
        out.status.code(),
        Some(2),
        "kinema {args:?}: stdout {} stderr {}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stderr).expect("utf-8")
}

fn num(row: &Value, key: &str) -> f64 {
    row[key]
        .as_f64()
        .unwrap_or_else(|| panic!("{key} is not a number in {row}"))
}

fn close(got: f64, want: f64, tol: f64, what: &str) {
    assert!(
        (got - want).abs() <= tol,
        "{what}: got {got}, want {want} (tolerance {tol})"
    );
}

/// Normal strain a gauge at `deg` reads for (exx, eyy, tensor exy).
/// Source: Gere & Goodno, Mechanics of Materials, §7.7 (strain transformation,
/// ε(θ) = εx cos²θ + εy sin²θ + γxy sinθ cosθ with γxy = 2·exy).
fn gauge_reading(exx: f64, eyy: f64, exy: f64, deg: f64) -> f64 {
    let t = deg.to_radians();
    exx * t.cos().powi(2) + eyy * t.sin().powi(2) + 2.0 * exy * t.sin() * t.cos()
}

/// Principal strains and the direction of e1 (degrees) from (exx, eyy, tensor exy).
/// Source: Gere & Goodno, Mechanics of Materials, §7.7: ε1,2 = (εx+εy)/2 ±
/// √(((εx−εy)/2)² + (γxy/2)²), tan 2θp = γxy/(εx − εy).
fn principal(exx: f64, eyy: f64, exy: f64) -> (f64, f64, f64) {
    let c = 0.5 * (exx + eyy);
    let r = (0.5 * (exx - eyy)).hypot(exy);
    (
        c + r,
        c - r,
        0.5 * (2.0 * exy).atan2(exx - eyy).to_degrees(),
    )
}

fn rosette_csv(rows: &[(&str, &str, f64, f64)]) -> String {
    let mut s = String::from("rosette,gauge,angle_deg,reading\n");
    for (r, g, a, v) in rows {
        s.push_str(&format!("{r},{g},{a},{v}\n"));
    }
    s
}

fn first_row(doc: &Value) -> &Value {
    &doc["rosettes"][0]
}

#[test]
fn rectangular_rosette_gives_the_textbook_principal_strains() {
    // Readings a = 400, b = 300, c = −100 microstrain at 0°, 45°, 90°.
    // Source: Gere & Goodno, Mechanics of Materials, §7.7 (45° strain rosette):
    // εx = εa, εy = εc, γxy = 2εb − εa − εc.
    let (a, b, c) = (400.0, 300.0, -100.0);
    let (exx, eyy, gxy) = (a, c, 2.0 * b - a - c);
    let (e1, e2, theta) = principal(exx, eyy, gxy / 2.0);
    let dir = tempfile::tempdir().expect("dir");
    let p = write(
        &dir,
        "r.csv",
        &rosette_csv(&[
            ("R1", "a", 0.0, a),
            ("R1", "b", 45.0, b),
            ("R1", "c", 90.0, c),
        ]),
    );
    let doc = json(&["analyze", p.to_str().expect("path"), "--method", "rosette"]);
    assert_eq!(doc["method"], "rosette");
    let row = first_row(&doc);
    close(num(row, "exx_microstrain"), exx, 1e-9, "exx");
    close(num(row, "eyy_microstrain"), eyy, 1e-9, "eyy");
    close(num(row, "gxy_microstrain"), gxy, 1e-9, "gxy");
    close(num(row, "e1_microstrain"), e1, 1e-9, "e1");
    close(num(row, "e2_microstrain"), e2, 1e-9, "e2");
    close(num(row, "theta1_deg"), theta, 1e-9, "theta1");
    close(
        num(row, "max_shear_engineering_microstrain"),
        e1 - e2,
        1e-9,
        "γmax = ε1 − ε2",
    );
    assert_eq!(row["kind"], "exact");
    assert_eq!(row["redundancy"], 0);
    assert!(row["sigma_reading_microstrain"].is_null());
    close(num(row, "condition"), 2.0, 1e-12, "rectangular condition");
}

#[test]
fn delta_rosette_recovers_a_forward_modelled_state() {
    // Forward model a known state into 0°/60°/120° readings, invert, compare.
    // Source: Gere & Goodno, Mechanics of Materials, §7.7 (transformation and
    // principal strains); delta closed form εy = (2εb + 2εc − εa)/3,
    // γxy = 2(εb − εc)/√3 (Dally & Riley, Experimental Stress Analysis, 4th ed.,
    // rosette analysis).
    let (exx, eyy, exy) = (200.0, -50.0, 80.0);
    let r: Vec<f64> = [0.0, 60.0, 120.0]
        .iter()
        .map(|&d| gauge_reading(exx, eyy, exy, d))
        .collect();
    close(
        (2.0 * r[1] + 2.0 * r[2] - r[0]) / 3.0,
        eyy,
        1e-9,
        "delta closed form εy",
    );
    close(
        2.0 * (r[1] - r[2]) / 3.0_f64.sqrt(),
        2.0 * exy,
        1e-9,
        "delta closed form γxy",
    );
    let (e1, e2, theta) = principal(exx, eyy, exy);
    let dir = tempfile::tempdir().expect("dir");
    let p = write(
        &dir,
        "d.csv",
        &rosette_csv(&[
            ("D1", "a", 0.0, r[0]),
            ("D1", "b", 60.0, r[1]),
            ("D1", "c", 120.0, r[2]),
        ]),
    );
    let doc = json(&["analyze", p.to_str().expect("path"), "--method", "rosette"]);
    let row = first_row(&doc);
    close(num(row, "exx_microstrain"), exx, 1e-9, "exx");
    close(num(row, "eyy_microstrain"), eyy, 1e-9, "eyy");
    close(num(row, "exy_microstrain"), exy, 1e-9, "exy");
    close(num(row, "e1_microstrain"), e1, 1e-9, "e1");
    close(num(row, "e2_microstrain"), e2, 1e-9, "e2");
    close(num(row, "theta1_deg"), theta, 1e-9, "theta1");
    close(
        num(row, "condition"),
        2.0_f64.sqrt(),
        1e-12,
        "delta condition",
    );
}

#[test]
fn four_gauge_rosette_is_a_least_squares_fit_with_redundancy_one() {
    // Gauges at 0°, 45°, 90°, 135° obey one condition: ε(0°) + ε(90°) = ε(45°) + ε(135°)
    // (first strain invariant; Gere & Goodno §7.7). With misclosure w of that condition,
    // the least-squares residuals are ±w/4 on all four gauges, so vᵀv = w²/4 and the
    // a-posteriori standard deviation of one reading is √(vᵀv/1) = |w|/2.
    // Source: adjustment by condition equations, Ghilani & Wolf, Adjustment
    // Computations, 5th ed., conditional adjustment (chapter number from memory).
    let (exx, eyy, exy) = (120.0, -30.0, 45.0);
    let mut r: Vec<f64> = [0.0, 45.0, 90.0, 135.0]
        .iter()
        .map(|&d| gauge_reading(exx, eyy, exy, d))
        .collect();
    let bump = 3.0;
    r[0] += bump;
    let w = r[0] + r[2] - r[1] - r[3];
    let dir = tempfile::tempdir().expect("dir");
    let p = write(
        &dir,
        "q.csv",
        &rosette_csv(&[
            ("Q1", "a", 0.0, r[0]),
            ("Q1", "b", 45.0, r[1]),
            ("Q1", "c", 90.0, r[2]),
            ("Q1", "d", 135.0, r[3]),
        ]),
    );
    let doc = json(&["analyze", p.to_str().expect("path"), "--method", "rosette"]);
    let row = first_row(&doc);
    assert_eq!(row["kind"], "least_squares");
    assert_eq!(row["n_gauges"], 4);
    assert_eq!(row["redundancy"], 1);
    close(
        num(row, "sigma_reading_microstrain"),
        w.abs() / 2.0,
        1e-9,
        "sigma_reading",
    );
    close(
        num(row, "max_abs_residual_microstrain"),
        w.abs() / 4.0,
        1e-9,
        "residual",
    );
    // The adjusted gauge a is r0 − w/4, and εx is the adjusted 0° reading.
    close(num(row, "exx_microstrain"), r[0] - w / 4.0, 1e-9, "exx");
    assert!(num(row, "sd_exx_microstrain") > 0.0);
}

/// Solve one rectangular rosette (readings in microstrain) with extra flags; return
/// (exx, eyy) in microstrain and the corrections applied.
fn rect_with(readings: [f64; 3], zero: Option<[f64; 3]>, flags: &[&str]) -> (f64, f64, Value) {
    let dir = tempfile::tempdir().expect("dir");
    let mut s = String::from("rosette,gauge,angle_deg,reading,zero\n");
    for (k, (g, a)) in [("a", 0.0), ("b", 45.0), ("c", 90.0)].iter().enumerate() {
        let z = zero.map_or(String::new(), |z| z[k].to_string());
        s.push_str(&format!("R1,{g},{a},{},{z}\n", readings[k]));
    }
    let p = write(&dir, "c.csv", &s);
    let mut args = vec!["analyze", p.to_str().expect("path"), "--method", "rosette"];
    args.extend_from_slice(flags);
    let doc = json(&args);
    let row = first_row(&doc).clone();
    (
        num(&row, "exx_microstrain"),
        num(&row, "eyy_microstrain"),
        row["corrections_applied"].clone(),
    )
}

#[test]
fn each_correction_changes_the_result_as_its_formula_says() {
    let r = [500.0, 210.0, -150.0];

    // Zero readings: the baseline is subtracted gauge by gauge (common practice).
    let (exx, eyy, applied) = rect_with(r, Some([20.0, -5.0, 8.0]), &[]);
    close(exx, 480.0, 1e-9, "zero: exx");
    close(eyy, -158.0, 1e-9, "zero: eyy");
    assert_eq!(applied, serde_json::json!(["zero_reading"]));

    // Gauge factor: indicated strain at instrument setting K0 on a gauge of factor K is
    // ε = ε_ind·K0/K (the bridge output is proportional to K·ε; common practice, e.g.
    // Dally & Riley, Experimental Stress Analysis, 4th ed., on gauge factor).
    let (exx, eyy, applied) = rect_with(
        r,
        None,
        &["--gauge-factor", "2.12", "--instrument-gauge-factor", "2.0"],
    );
    close(exx, 500.0 * 2.0 / 2.12, 1e-9, "gauge factor: exx");
    close(eyy, -150.0 * 2.0 / 2.12, 1e-9, "gauge factor: eyy");
    assert_eq!(applied, serde_json::json!(["gauge_factor"]));

    // Thermal output: the apparent strain P(T) − P(T0), P(T) = c0 + c1·T + c2·T²,
    // is subtracted from every gauge (Dally & Riley, 4th ed., temperature-induced
    // apparent strain).
    let (c0, c1, c2, t, t0) = (-30.0, 2.5, -0.04, 35.0, 20.0);
    let p = |x: f64| c0 + c1 * x + c2 * x * x;
    let apparent = p(t) - p(t0);
    let (exx, eyy, applied) = rect_with(
        r,
        None,
        &[
            "--thermal-coefficients=-30,2.5,-0.04",
            "--temperature",
            "35",
            "--reference-temperature",
            "20",
        ],
    );
    close(exx, 500.0 - apparent, 1e-9, "thermal: exx");
    close(eyy, -150.0 - apparent, 1e-9, "thermal: eyy");
    assert_eq!(applied, serde_json::json!(["thermal_output"]));

    // Transverse sensitivity, rectangular rosette, orthogonal pair a (0°) and c (90°):
    // εx = (1 − ν0·Kt)(ε'a − Kt·ε'c)/(1 − Kt²), εy = (1 − ν0·Kt)(ε'c − Kt·ε'a)/(1 − Kt²).
    // Source: Dally & Riley, Experimental Stress Analysis, 4th ed., transverse
    // sensitivity corrections for rosettes.
    let (kt, nu0) = (0.03, 0.285);
    let f = (1.0 - nu0 * kt) / (1.0 - kt * kt);
    let (exx, eyy, applied) = rect_with(
        r,
        None,
        &[
            "--transverse-sensitivity",
            "0.03",
            "--transverse-nu0",
            "0.285",
        ],
    );
    close(exx, f * (500.0 - kt * -150.0), 1e-9, "transverse: exx");
    close(eyy, f * (-150.0 - kt * 500.0), 1e-9, "transverse: eyy");
    assert_eq!(applied, serde_json::json!(["transverse_sensitivity"]));
}

#[test]
fn plane_stress_of_uniaxial_strain_and_von_mises_of_uniaxial_stress() {
    let e = 210.0e3; // MPa, EN 1993-1-1 §3.2.6
    let nu = 0.3;
    let dir = tempfile::tempdir().expect("dir");
    // Uniaxial strain εxx = 400 µε, εyy = 0, γxy = 0: readings 400, 200, 0 (45° gauge
    // reads (εx + εy)/2 + γxy/2 = 200).
    // Uniaxial stress σ = −120 MPa along x: εxx = σ/E, εyy = −ν·σ/E (Hooke's law).
    let sigma = -120.0;
    let ux = sigma / e * 1e6;
    let uy = -nu * sigma / e * 1e6;
    let p = write(
        &dir,
        "s.csv",
        &rosette_csv(&[
            ("U1", "a", 0.0, 400.0),
            ("U1", "b", 45.0, 200.0),
            ("U1", "c", 90.0, 0.0),
            ("U2", "a", 0.0, ux),
            ("U2", "b", 45.0, 0.5 * (ux + uy)),
            ("U2", "c", 90.0, uy),
        ]),
    );
    let doc = json(&[
        "analyze",
        p.to_str().expect("path"),
        "--method",
        "rosette",
        "--material",
        "steel-en1993",
        "--stress-state",
        "plane-stress",
    ]);
    assert_eq!(doc["parameters"]["material"], "steel-en1993");
    assert_eq!(doc["parameters"]["youngs_modulus_gpa"], 210.0);
    assert!(
        doc["parameters"]["material_source"]
            .as_str()
            .is_some_and(|s| s.contains("EN 1993-1-1")),
        "{}",
        doc["parameters"]
    );
    let caution = "Assumes a homogeneous, isotropic, linear elastic material";
    assert!(
        doc["summary"]["notes"].as_array().is_some_and(|n| n
            .iter()
            .any(|s| s.as_str().is_some_and(|s| s.contains(caution)))),
        "{}",
        doc["summary"]
    );
    // Source: Timoshenko & Goodier, Theory of Elasticity, 3rd ed., §§5–7 (plane
    // stress): σx = E/(1−ν²)(εx + ν·εy), σy = E/(1−ν²)(εy + ν·εx),
    // εz = −ν/(1−ν)(εx + εy).
    let r = &doc["rosettes"][0];
    let (ex, ey) = (400.0e-6, 0.0);
    close(
        num(r, "sxx_MPa"),
        e / (1.0 - nu * nu) * (ex + nu * ey),
        1e-9,
        "σx",
    );
    close(
        num(r, "syy_MPa"),
        e / (1.0 - nu * nu) * (ey + nu * ex),
        1e-9,
        "σy",
    );
    close(num(r, "sxy_MPa"), 0.0, 1e-9, "τxy");
    close(
        num(r, "ezz_microstrain"),
        -nu / (1.0 - nu) * (ex + ey) * 1e6,
        1e-9,
        "εz",
    );
    // Von Mises of uniaxial stress is |σ| (Source: von Mises criterion,
    // σv = √(σ1² − σ1σ2 + σ2²) in plane stress; Gere & Goodno, Mechanics of Materials).
    let r = &doc["rosettes"][1];
    close(num(r, "sxx_MPa"), sigma, 1e-9, "uniaxial σ");
    close(num(r, "syy_MPa"), 0.0, 1e-9, "uniaxial σy");
    close(num(r, "von_mises_MPa"), sigma.abs(), 1e-9, "von Mises");
    close(num(r, "s2_MPa"), sigma, 1e-9, "σ2 (compression)");
}

#[test]
fn stress_columns_on_point_methods_2d_plane_strain_and_3d() {
    // A uniform gradient is recovered exactly by the network fit, so the stress is
    // that of the known strain.
    let dir = tempfile::tempdir().expect("dir");
    let g2 = [[3.0e-4, 1.0e-4], [-0.4e-4, -1.0e-4]];
    let mut s = String::from("id,x,y,ux,uy\n");
    for (i, (x, y)) in [
        (0.0, 0.0),
        (10.0, 0.0),
        (0.0, 10.0),
        (10.0, 10.0),
        (4.0, 7.0),
    ]
    .iter()
    .enumerate()
    {
        let ux = g2[0][0] * x + g2[0][1] * y;
        let uy = g2[1][0] * x + g2[1][1] * y;
        s.push_str(&format!("P{i},{x},{y},{ux},{uy}\n"));
    }
    let p = write(&dir, "p2.csv", &s);
    let doc = json(&[
        "analyze",
        p.to_str().expect("path"),
        "--method",
        "network",
        "--youngs-modulus-gpa",
        "200",
        "--poisson-ratio",
        "0.25",
        "--stress-state",
        "plane-strain",
    ]);
    assert_eq!(doc["parameters"]["material"], "custom");
    // Source: Timoshenko & Goodier, Theory of Elasticity, 3rd ed., §§5–7 (plane
    // strain): σ = λ(εx + εy)·I + 2μ·ε, σz = ν(σx + σy), λ = Eν/((1+ν)(1−2ν)),
    // μ = E/(2(1+ν)).
    let (e, nu) = (200.0e3, 0.25);
    let lambda = e * nu / ((1.0 + nu) * (1.0 - 2.0 * nu));
    let mu = e / (2.0 * (1.0 + nu));
    let (ex, ey, exy) = (g2[0][0], g2[1][1], 0.5 * (g2[0][1] + g2[1][0]));
    let sx = lambda * (ex + ey) + 2.0 * mu * ex;
    let sy = lambda * (ex + ey) + 2.0 * mu * ey;
    let r = &doc["network"][0];
    close(num(r, "sxx_MPa"), sx, 1e-6, "σx");
    close(num(r, "syy_MPa"), sy, 1e-6, "σy");
    close(num(r, "sxy_MPa"), 2.0 * mu * exy, 1e-6, "τxy");
    close(num(r, "szz_MPa"), nu * (sx + sy), 1e-6, "σz");

    let mut s = String::from("id,x,y,z,ux,uy,uz\n");
    let g3 = [
        [2.0e-4, 0.5e-4, 0.0],
        [0.5e-4, -1.0e-4, 0.2e-4],
        [0.0, 0.2e-4, 0.8e-4],
    ];
    let pts = [
        (0.0, 0.0, 0.0),
        (5.0, 0.0, 0.0),
        (0.0, 5.0, 0.0),
        (0.0, 0.0, 5.0),
        (5.0, 5.0, 5.0),
        (2.0, 3.0, 1.0),
    ];
    for (i, &(x, y, z)) in pts.iter().enumerate() {
        let u: Vec<f64> = g3.iter().map(|r| r[0] * x + r[1] * y + r[2] * z).collect();
        s.push_str(&format!("P{i},{x},{y},{z},{},{},{}\n", u[0], u[1], u[2]));
    }
    let p = write(&dir, "p3.csv", &s);
    let doc = json(&[
        "analyze",
        p.to_str().expect("path"),
        "--method",
        "network",
        "--material",
        "aluminium-en1999",
    ]);
    // Source: Timoshenko & Goodier, Theory of Elasticity, 3rd ed., §6 (generalised
    // Hooke's law): σ = λ·tr(ε)·I + 2μ·ε; E = 70 000 N/mm², ν = 0.3 (EN 1999-1-1 §3.2.5).
    let (e, nu) = (70.0e3, 0.3);
    let lambda = e * nu / ((1.0 + nu) * (1.0 - 2.0 * nu));
    let mu = e / (2.0 * (1.0 + nu));
    let tr = g3[0][0] + g3[1][1] + g3[2][2];
    let r = &doc["network"][0];
    close(
        num(r, "szz_MPa"),
        lambda * tr + 2.0 * mu * g3[2][2],
        1e-6,
        "σz",
    );
    close(num(r, "syz_MPa"), 2.0 * mu * g3[1][2], 1e-6, "τyz");
    assert!(num(r, "s1_MPa") >= num(r, "s2_MPa") && num(r, "s2_MPa") >= num(r, "s3_MPa"));
    assert_eq!(doc["parameters"]["stress_state"], "3d");
}

#[test]
fn bad_input_exits_2_and_singular_layouts_are_rejected() {
    let dir = tempfile::tempdir().expect("dir");
    let good = write(
        &dir,
        "g.csv",
        &rosette_csv(&[
            ("R1", "a", 0.0, 100.0),
            ("R1", "b", 45.0, 50.0),
            ("R1", "c", 90.0, 10.0),
        ]),
    );
    let good = good.to_str().expect("path");

    // A malformed row names its line and column.
    let bad = write(
        &dir,
        "bad.csv",
        "rosette,gauge,angle_deg,reading\nR1,a,0,100\nR1,b,45,1O0\nR1,c,90,3\n",
    );
    let err = fails(&[
        "analyze",
        bad.to_str().expect("path"),
        "--method",
        "rosette",
    ]);
    assert!(
        err.contains("bad.csv:3:4 (column reading): `1O0` is not a number"),
        "{err}"
    );

    // Coinciding angles (0° and 180° are one direction): rejected, the run goes on.
    let same = write(
        &dir,
        "same.csv",
        &rosette_csv(&[
            ("R1", "a", 0.0, 100.0),
            ("R1", "b", 45.0, 50.0),
            ("R1", "c", 90.0, 10.0),
            ("R2", "a", 0.0, 100.0),
            ("R2", "b", 180.0, 50.0),
            ("R2", "c", 90.0, 10.0),
        ]),
    );
    let doc = json(&[
        "analyze",
        same.to_str().expect("path"),
        "--method",
        "rosette",
    ]);
    assert_eq!(doc["rosettes"].as_array().map(Vec::len), Some(1));
    assert_eq!(doc["rejected"][0]["label"], "R2");
    let reason = doc["rejected"][0]["reason"].as_str().expect("reason");
    assert!(
        reason.contains("near-singular") && reason.contains("a, b"),
        "{reason}"
    );
    assert_eq!(
        doc["summary"]["rejected_by_reason"]["near-singular layout"],
        1
    );

    // Unknown material: exit 2, listing the known IDs.
    let err = fails(&[
        "analyze",
        good,
        "--method",
        "rosette",
        "--material",
        "oak",
        "--stress-state",
        "plane-stress",
    ]);
    assert!(
        err.contains("unknown material `oak`") && err.contains("steel-en1993"),
        "{err}"
    );

    // A 2D analysis with a material needs --stress-state.
    let err = fails(&[
        "analyze",
        good,
        "--method",
        "rosette",
        "--material",
        "steel-en1993",
    ]);
    assert!(err.contains("--stress-state"), "{err}");

    // Corrections need their partner flag; rosette flags need --method rosette.
    let err = fails(&[
        "analyze",
        good,
        "--method",
        "rosette",
        "--transverse-sensitivity",
        "0.02",
    ]);
    assert!(err.contains("--transverse-nu0"), "{err}");
    let err = fails(&[
        "analyze",
        good,
        "--method",
        "rosette",
        "--gauge-factor",
        "2.1",
    ]);
    assert!(err.contains("give both"), "{err}");
    let err = fails(&[
        "analyze",
        good,
        "--method",
        "network",
        "--gauge-factor",
        "2.1",
    ]);
    assert!(err.contains("only by --method rosette"), "{err}");
}
