//! End-to-end checks of `kinema analyze --series` (strain time series), run through the
//! `kinema` binary.
//!
//! Every expected value is computed here from a closed-form strain field and a textbook
//! formula, independently of the code under test; the source is named beside each check.

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

fn s(p: &std::path::Path) -> &str {
    p.to_str().expect("UTF-8 path")
}

/// Run with `--format json`, expect success, return the document.
fn json(args: &[&str]) -> Value {
    let mut v = vec!["analyze"];
    v.extend_from_slice(args);
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
    let mut v = vec!["analyze"];
    v.extend_from_slice(args);
    let out = kinema(&v);
    assert_eq!(
        out.status.code(),
        Some(2),
        "kinema {v:?}: stdout {} stderr {}",
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

fn rows<'a>(doc: &'a Value, section: &str) -> &'a Vec<Value> {
    doc[section]
        .as_array()
        .unwrap_or_else(|| panic!("section {section} missing"))
}

/// Four points of an invented 2D network (metres) and two counter-clockwise triangles;
/// `D` belongs to `E2` only.
const NET: [(&str, [f64; 2]); 4] = [
    ("A", [0.0, 0.0]),
    ("B", [12.0, 0.5]),
    ("C", [1.0, 9.0]),
    ("D", [13.0, 10.0]),
];
const ELEMENTS: &str = "element_id,v0,v1,v2\nE1,A,B,C\nE2,B,D,C\n";

/// Epochs: label, RFC 3339 time, days after the baseline (written out by hand; the
/// second is given with a +01:00 offset), temperature °C.
const EPOCHS: [(&str, &str, f64, f64); 5] = [
    ("S0", "2026-03-01T10:00:00Z", 0.0, 10.0),
    ("S1", "2026-03-11T11:00:00+01:00", 10.0, 14.0),
    ("S2", "2026-03-26T22:00:00Z", 25.5, 21.0),
    ("S3", "2026-04-10T10:00:00Z", 40.0, 3.0),
    ("S4", "2026-06-09T16:00:00Z", 100.25, -6.5),
];

/// An epochs CSV with positions `x + u(x, day, T)`; `skip` leaves out one (epoch, point).
fn epochs_csv(u: impl Fn([f64; 2], f64, f64) -> [f64; 2], skip: Option<(&str, &str)>) -> String {
    let mut t = String::from("epoch,time,id,x,y,temperature_c\n");
    for (label, time, day, temp) in EPOCHS {
        for (id, x) in NET {
            if skip == Some((label, id)) {
                continue;
            }
            let d = u(x, day, temp);
            t.push_str(&format!(
                "{label},{time},{id},{:?},{:?},{temp:?}\n",
                x[0] + d[0],
                x[1] + d[1]
            ));
        }
    }
    t
}

/// Displacement gradient rate per day (dimensionless per day) of the linear test field.
const A: [[f64; 2]; 2] = [[2.0e-6, 0.7e-6], [-0.3e-6, -1.1e-6]];

fn linear(x: [f64; 2], day: f64, _t: f64) -> [f64; 2] {
    [
        day * (A[0][0] * x[0] + A[0][1] * x[1]),
        day * (A[1][0] * x[0] + A[1][1] * x[1]),
    ]
}

#[test]
fn linear_growth_gives_exact_rates_and_increments() {
    let dir = tempfile::tempdir().expect("dir");
    let e = write(&dir, "epochs.csv", &epochs_csv(linear, None));
    let el = write(&dir, "el.csv", ELEMENTS);
    let doc = json(&[
        s(&e),
        "--series",
        "--baseline",
        "S0",
        "--elements",
        s(&el),
        "--strain-unit",
        "strain",
    ]);
    // Small strain of u = (A t)·x: ε = t (A + Aᵀ)/2 (Timoshenko & Goodier, Theory of
    // Elasticity, 3rd ed., §2, strain-displacement relations); a least-squares line
    // through points that lie exactly on a line returns that line's slope.
    let rate = [
        ("exx", A[0][0]),
        ("eyy", A[1][1]),
        ("exy", 0.5 * (A[0][1] + A[1][0])),
    ];
    let r = rows(&doc, "rates");
    assert_eq!(r.len(), 2 * 3, "two elements, three components");
    for row in r {
        let comp = row["component"].as_str().expect("component");
        let want = rate.iter().find(|(n, _)| *n == comp).expect("known").1;
        close(num(row, "rate_strain_per_day"), want, 1e-15, comp);
        // Julian year = 365.25 days (IAU definition of the Julian year).
        close(
            num(row, "rate_strain_per_year"),
            365.25 * want,
            365.25e-15,
            comp,
        );
        assert_eq!(row["n_epochs"], 5);
        assert_eq!(row["weighted"], false);
        // Exact data: no scatter about the line.
        assert!(num(row, "sd_rate_strain_per_day") < 1e-15, "{row}");
    }
    let inc = rows(&doc, "increments");
    assert_eq!(inc.len(), 2 * 4);
    for row in inc {
        let dt = num(row, "dt_days");
        let from = EPOCHS.iter().find(|e| row["from"] == e.0).expect("from");
        let to = EPOCHS.iter().find(|e| row["to"] == e.0).expect("to");
        close(dt, to.2 - from.2, 1e-9, "dt_days");
        for (comp, r) in rate {
            close(num(row, &format!("{comp}_strain")), r * dt, 1e-13, comp);
        }
        // Engineering shear gxy = 2 exy.
        close(num(row, "gxy_strain"), 2.0 * rate[2].1 * dt, 1e-13, "gxy");
        // Rotation ω = (∂uy/∂x − ∂ux/∂y)/2 (same source), in degrees.
        close(
            num(row, "rotation_deg"),
            (0.5 * (A[1][0] - A[0][1]) * dt).to_degrees(),
            1e-11,
            "rotation",
        );
    }
    let cum = rows(&doc, "cumulative");
    assert_eq!(cum.len(), 2 * 5);
    let s1 = cum
        .iter()
        .find(|r| r["region"] == "E1" && r["epoch"] == "S1")
        .expect("E1 at S1");
    // RFC 3339: 11:00+01:00 is 10:00 UTC.
    assert_eq!(s1["time"], "2026-03-11T10:00:00Z");
    close(num(s1, "days_from_baseline"), 10.0, 1e-9, "days");
    close(num(s1, "exx_strain"), 10.0 * A[0][0], 1e-14, "exx at S1");
    assert_eq!(doc["parameters"]["baseline"], "S0");
    assert_eq!(doc["parameters"]["epochs"], 5);
    assert_eq!(doc["method"], "elements");
    assert!(rows(&doc, "excluded").is_empty());
}

#[test]
fn a_missing_point_excludes_only_its_regions() {
    let dir = tempfile::tempdir().expect("dir");
    let e = write(&dir, "epochs.csv", &epochs_csv(linear, Some(("S2", "D"))));
    let el = write(&dir, "el.csv", ELEMENTS);
    let doc = json(&[
        s(&e),
        "--series",
        "--baseline",
        "S0",
        "--method",
        "elements",
        "--elements",
        s(&el),
    ]);
    let ex = rows(&doc, "excluded");
    assert_eq!(ex.len(), 1, "{ex:?}");
    assert_eq!(ex[0]["region"], "E2");
    assert_eq!(ex[0]["epoch"], "S2");
    assert_eq!(ex[0]["missing"], serde_json::json!(["D"]));
    let cum = rows(&doc, "cumulative");
    let at = |region: &str, epoch: &str| {
        cum.iter()
            .any(|r| r["region"] == region && r["epoch"] == epoch)
    };
    assert!(at("E1", "S2"), "E1 does not contain D");
    assert!(!at("E2", "S2"), "E2 contains D");
    let n = |region: &str| {
        rows(&doc, "rates")
            .iter()
            .find(|r| r["region"] == region)
            .map(|r| r["n_epochs"].clone())
            .expect("rate row")
    };
    assert_eq!(n("E1"), 5);
    assert_eq!(n("E2"), 4);
    // The increment of E2 skips S2: S1 → S3 over 30 days.
    let inc = rows(&doc, "increments");
    assert!(
        inc.iter()
            .any(|r| r["region"] == "E2" && r["from"] == "S1" && r["to"] == "S3")
    );
    let notes = doc["summary"]["notes"].to_string();
    assert!(notes.contains("1 region-epoch(s) excluded"), "{notes}");
}

#[test]
fn free_thermal_expansion_compensates_to_zero() {
    // A free isotropic solid heated by ΔT strains by α ΔT in every direction, with no
    // shear (Timoshenko & Goodier, Theory of Elasticity, 3rd ed., thermal stress
    // chapter: ε_ij = α ΔT δ_ij).
    let alpha = 1.2e-5;
    let t0 = EPOCHS[0].3;
    let free = move |x: [f64; 2], _day: f64, t: f64| {
        let e = alpha * (t - t0);
        [e * x[0], e * x[1]]
    };
    let dir = tempfile::tempdir().expect("dir");
    let e = write(&dir, "epochs.csv", &epochs_csv(free, None));
    let el = write(&dir, "el.csv", ELEMENTS);
    for how in [
        ["--thermal-alpha", "1.2e-5"],
        ["--material", "steel-en1993"],
    ] {
        let doc = json(&[
            s(&e),
            "--series",
            "--baseline",
            "S0",
            "--elements",
            s(&el),
            "--strain-unit",
            "strain",
            how[0],
            how[1],
        ]);
        // EN 1993-1-1 §3.2.6: α = 12e-6 per K for structural steel.
        assert_eq!(doc["parameters"]["thermal_alpha_per_k"], 1.2e-5);
        for row in rows(&doc, "cumulative") {
            let t = EPOCHS
                .iter()
                .find(|e| row["epoch"] == e.0)
                .expect("epoch")
                .3;
            close(
                num(row, "thermal_strain_strain"),
                alpha * (t - t0),
                1e-18,
                "thermal",
            );
            close(num(row, "exx_strain"), alpha * (t - t0), 1e-14, "exx");
            close(
                num(row, "exx_compensated_strain"),
                0.0,
                1e-14,
                "exx compensated",
            );
            close(
                num(row, "eyy_compensated_strain"),
                0.0,
                1e-14,
                "eyy compensated",
            );
            close(num(row, "exy_strain"), 0.0, 1e-14, "no shear");
            assert_eq!(num(row, "temperature_degc"), t);
        }
        for row in rows(&doc, "rates") {
            if row["compensated"] == true {
                close(
                    num(row, "rate_strain_per_day"),
                    0.0,
                    1e-16,
                    "compensated rate",
                );
            }
        }
        assert_eq!(
            rows(&doc, "rates")
                .iter()
                .filter(|r| r["compensated"] == true)
                .count(),
            6
        );
    }
}

#[test]
fn json_epochs_in_millimetres_read_like_csv() {
    let dir = tempfile::tempdir().expect("dir");
    let mut eps = Vec::new();
    for (label, time, day, _) in EPOCHS {
        let pts: Vec<Value> = NET
            .iter()
            .map(|(id, x)| {
                let d = linear(*x, day, 0.0);
                serde_json::json!({"id": id, "x": (x[0] + d[0]) * 1000.0, "y": (x[1] + d[1]) * 1000.0})
            })
            .collect();
        eps.push(serde_json::json!({"label": label, "time": time, "points": pts}));
    }
    let text = serde_json::json!({"length_unit": "mm", "epochs": eps}).to_string();
    let e = write(&dir, "epochs.json", &text);
    let el = write(&dir, "el.csv", ELEMENTS);
    let doc = json(&[
        s(&e),
        "--series",
        "--baseline",
        "S2",
        "--elements",
        s(&el),
        "--length-unit",
        "mm",
        "--strain-unit",
        "strain",
    ]);
    // A baseline in the middle: epochs before it have negative days, and the reference
    // geometry is the S2 positions x2 = (I + A t2) x0. Then x(t) − x2 = A (t − t2) (I +
    // A t2)⁻¹ x2, so the gradient is still linear in t with slope A (I + A t2)⁻¹ per day.
    let t2 = 25.5;
    let m = [
        [1.0 + A[0][0] * t2, A[0][1] * t2],
        [A[1][0] * t2, 1.0 + A[1][1] * t2],
    ];
    let det = m[0][0] * m[1][1] - m[0][1] * m[1][0];
    // exx slope = (A · M⁻¹)[0][0] with M⁻¹ = [[m11, −m01], [−m10, m00]] / det.
    let exx_rate = (A[0][0] * m[1][1] - A[0][1] * m[1][0]) / det;
    assert!(
        (exx_rate - A[0][0]).abs() > 1e-11,
        "the frame matters at this size"
    );
    let before = rows(&doc, "cumulative")
        .iter()
        .find(|r| r["region"] == "E1" && r["epoch"] == "S0")
        .expect("S0")
        .clone();
    close(num(&before, "days_from_baseline"), -25.5, 1e-9, "days");
    for row in rows(&doc, "rates") {
        if row["component"] == "exx" {
            close(num(row, "rate_strain_per_day"), exx_rate, 1e-15, "exx rate");
        }
    }
}

#[test]
fn bad_input_exits_2_naming_the_value() {
    let dir = tempfile::tempdir().expect("dir");
    let el = write(&dir, "el.csv", ELEMENTS);
    let good = epochs_csv(linear, None);
    let run = |name: &str, text: &str, extra: &[&str]| {
        let e = write(&dir, name, text);
        let mut a = vec![
            s(&e).to_owned(),
            "--series".into(),
            "--elements".into(),
            s(&el).to_owned(),
        ];
        if !extra.contains(&"--baseline") {
            a.extend(["--baseline".into(), "S0".into()]);
        }
        a.extend(extra.iter().map(|x| (*x).to_owned()));
        let refs: Vec<&str> = a.iter().map(String::as_str).collect();
        fails(&refs)
    };
    // Epochs out of order: S1 listed before S0 (the reader does not sort).
    let mut lines: Vec<&str> = good.lines().collect();
    let body: Vec<&str> = lines.drain(1..).collect();
    let swapped = format!(
        "{}\n{}\n{}\n",
        lines[0],
        body[4..8].join("\n"),
        [&body[0..4], &body[8..]].concat().join("\n")
    );
    let err = run("order.csv", &swapped, &[]);
    assert!(err.contains("order.csv:6:2 (column time)"), "{err}");
    assert!(err.contains("does not come after epoch `S1`"), "{err}");

    let err = run("base.csv", &good, &["--baseline", "S9"]);
    assert!(
        err.contains("baseline epoch `S9` is not in the series"),
        "{err}"
    );
    assert!(err.contains("S0, S1, S2, S3, S4"), "{err}");

    let bad_time = good.replacen("2026-03-26T22:00:00Z", "2026-03-26 22:00", 1);
    let err = run("time.csv", &bad_time, &[]);
    assert!(
        err.contains("time.csv:10:2 (column time): `2026-03-26 22:00`"),
        "{err}"
    );

    let bad_temp = good
        .replacen(",21.0\n", ",21.5\n", 2)
        .replacen(",21.5\n", ",21.0\n", 1);
    let err = run("temp.csv", &bad_temp, &[]);
    assert!(
        err.contains("temp.csv:11:6 (column temperature_c)"),
        "{err}"
    );
    assert!(err.contains("21.5"), "{err}");

    // NaN in place of the x of point B at S3 (line 15).
    let nan: String = good
        .lines()
        .map(|l| {
            let mut f: Vec<&str> = l.split(',').collect();
            if f[0] == "S3" && f[2] == "B" {
                f[3] = "NaN";
            }
            f.join(",") + "\n"
        })
        .collect();
    let err = run("nan.csv", &nan, &[]);
    assert!(
        err.contains("nan.csv:15:4 (column x): `NaN` is not a finite number"),
        "{err}"
    );

    let unknown = write(&dir, "el9.csv", "element_id,v0,v1,v2\nE1,A,B,Z9\n");
    let e = write(&dir, "ok.csv", &good);
    let err = fails(&[
        s(&e),
        "--series",
        "--baseline",
        "S0",
        "--elements",
        s(&unknown),
    ]);
    assert!(err.contains("Z9"), "{err}");
    assert!(err.contains("E1"), "{err}");

    // Flags: a series needs fixed regions and a baseline; series flags need --series;
    // compensation needs a temperature at every epoch.
    let err = fails(&[s(&e), "--series", "--elements", s(&el)]);
    assert!(err.contains("--baseline LABEL"), "{err}");
    let err = fails(&[
        s(&e),
        "--series",
        "--baseline",
        "S0",
        "--method",
        "delaunay",
    ]);
    assert!(err.contains("fixed regions"), "{err}");
    let err = fails(&[s(&e), "--baseline", "S0"]);
    assert!(err.contains("only with --series"), "{err}");
    let no_temp = good.replace(",10.0\n", ",\n");
    let err = run("notemp.csv", &no_temp, &["--thermal-alpha", "1e-5"]);
    assert!(err.contains("epoch `S0` has no temperature"), "{err}");
}

/// Deterministic standard normal numbers: splitmix64 (Steele, Lea & Flood, "Fast
/// splittable pseudorandom number generators", OOPSLA 2014) and the Box–Muller
/// transform (Box & Muller, Ann. Math. Statist. 29, 1958).
struct Normal(u64);

impl Normal {
    fn uniform(&mut self) -> f64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^= z >> 31;
        ((z >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }
    fn next(&mut self) -> f64 {
        let (a, b) = (self.uniform(), self.uniform());
        (-2.0 * a.ln()).sqrt() * (std::f64::consts::TAU * b).cos()
    }
}

/// Shape-function gradients `(b_k, c_k) = (∂N_k/∂x, ∂N_k/∂y)` of a linear triangle:
/// `b_i = (y_j − y_k)/(2A)`, `c_i = (x_k − x_j)/(2A)` for cyclic `(i, j, k)`.
// Source: Zienkiewicz & Taylor, The Finite Element Method, vol. 1, the three-node
// (constant strain) triangle.
fn cst(x: [[f64; 2]; 3]) -> [[f64; 2]; 3] {
    let two_a =
        (x[1][0] - x[0][0]) * (x[2][1] - x[0][1]) - (x[2][0] - x[0][0]) * (x[1][1] - x[0][1]);
    [0usize, 1, 2].map(|i| {
        let (j, k) = ((i + 1) % 3, (i + 2) % 3);
        [(x[j][1] - x[k][1]) / two_a, (x[k][0] - x[j][0]) / two_a]
    })
}

/// Stated precision per epoch (metres, both axes), different at every epoch so that
/// the weights differ.
const SIGMA: [f64; 5] = [0.001, 0.002, 0.0005, 0.003, 0.0015];

#[test]
fn weighted_rate_matches_the_closed_form_with_stated_sigmas() {
    let mut rng = Normal(7);
    // Positions: the linear field plus a deterministic perturbation of the size of the
    // stated sigma, so that the line does not fit exactly.
    let mut pos = Vec::new();
    let mut t = String::from("epoch,time,id,x,y,sigma_x,sigma_y\n");
    for (k, (label, time, day, _)) in EPOCHS.iter().enumerate() {
        let mut here = Vec::new();
        for (id, x) in NET {
            let d = linear(x, *day, 0.0);
            let p = [
                x[0] + d[0] + SIGMA[k] * rng.next(),
                x[1] + d[1] + SIGMA[k] * rng.next(),
            ];
            t.push_str(&format!(
                "{label},{time},{id},{:?},{:?},{:?},{:?}\n",
                p[0], p[1], SIGMA[k], SIGMA[k]
            ));
            here.push(p);
        }
        pos.push(here);
    }
    let dir = tempfile::tempdir().expect("dir");
    let e = write(&dir, "epochs.csv", &t);
    let el = write(&dir, "el.csv", "element_id,v0,v1,v2\nE1,A,B,C\n");
    let doc = json(&[
        s(&e),
        "--series",
        "--baseline",
        "S0",
        "--elements",
        s(&el),
        "--strain-unit",
        "strain",
    ]);
    // Element strain on the baseline geometry: e = Σ b_k u_k (Zienkiewicz & Taylor, as
    // above); var(exx) = Σ σ_k² b_k², var(eyy) = Σ σ_k² c_k², var(exy) = Σ σ_k² (b_k² +
    // c_k²)/4 for independent vertices with σ_k² = σ_baseline² + σ_epoch² per axis
    // (linear propagation of variance).
    let v = [0usize, 1, 2];
    let base: [[f64; 2]; 3] = v.map(|i| pos[0][i]);
    let g = cst(base);
    let mut want: Vec<(f64, [f64; 3], [f64; 3])> = Vec::new();
    for k in 1..EPOCHS.len() {
        let u: Vec<[f64; 2]> = v
            .iter()
            .map(|&i| [pos[k][i][0] - pos[0][i][0], pos[k][i][1] - pos[0][i][1]])
            .collect();
        let exx: f64 = (0..3).map(|q| g[q][0] * u[q][0]).sum();
        let eyy: f64 = (0..3).map(|q| g[q][1] * u[q][1]).sum();
        let exy: f64 = (0..3)
            .map(|q| 0.5 * (g[q][1] * u[q][0] + g[q][0] * u[q][1]))
            .sum();
        let s2 = SIGMA[0].powi(2) + SIGMA[k].powi(2);
        let vxx: f64 = (0..3).map(|q| s2 * g[q][0].powi(2)).sum();
        let vyy: f64 = (0..3).map(|q| s2 * g[q][1].powi(2)).sum();
        let vxy: f64 = (0..3)
            .map(|q| s2 * (g[q][0].powi(2) + g[q][1].powi(2)) / 4.0)
            .sum();
        want.push((
            EPOCHS[k].2,
            [exx, eyy, exy],
            [vxx.sqrt(), vyy.sqrt(), vxy.sqrt()],
        ));
    }
    let cum = rows(&doc, "cumulative");
    for (k, (_, e, sd)) in want.iter().enumerate() {
        let row = cum
            .iter()
            .find(|r| r["epoch"] == EPOCHS[k + 1].0)
            .expect("epoch row");
        for (c, name) in ["exx", "eyy", "exy"].iter().enumerate() {
            close(num(row, &format!("{name}_strain")), e[c], 1e-12, name);
            close(
                num(row, &format!("sd_{name}_strain")),
                sd[c],
                1e-9 * sd[c],
                &format!("sd_{name}"),
            );
        }
    }
    let b0 = cum.iter().find(|r| r["epoch"] == "S0").expect("baseline");
    assert_eq!(
        num(b0, "sd_exx_strain"),
        0.0,
        "baseline sd is 0 by construction"
    );
    // Weighted least squares with w = 1/σ², the baseline left out, intercept free:
    // b = Σw(t−t̄)(y−ȳ)/Σw(t−t̄)², var b = σ̂₀²/Σw(t−t̄)², σ̂₀² = Σw r²/(n−2).
    // Source: Draper & Smith, Applied Regression Analysis, 3rd ed., weighted least
    // squares (§9.2 from memory).
    for (c, name) in ["exx", "eyy", "exy"].iter().enumerate() {
        let w: Vec<f64> = want.iter().map(|x| 1.0 / x.2[c].powi(2)).collect();
        let sw: f64 = w.iter().sum();
        let tm = want.iter().zip(&w).map(|(x, w)| w * x.0).sum::<f64>() / sw;
        let ym = want.iter().zip(&w).map(|(x, w)| w * x.1[c]).sum::<f64>() / sw;
        let stt: f64 = want
            .iter()
            .zip(&w)
            .map(|(x, w)| w * (x.0 - tm).powi(2))
            .sum();
        let sty: f64 = want
            .iter()
            .zip(&w)
            .map(|(x, w)| w * (x.0 - tm) * (x.1[c] - ym))
            .sum();
        let b = sty / stt;
        let s0: f64 = want
            .iter()
            .zip(&w)
            .map(|(x, w)| w * (x.1[c] - ym - b * (x.0 - tm)).powi(2))
            .sum::<f64>()
            / (want.len() - 2) as f64;
        let row = rows(&doc, "rates")
            .iter()
            .find(|r| r["component"] == *name)
            .expect("rate row");
        assert_eq!(row["weighted"], true, "{row}");
        assert_eq!(row["n_epochs"], 4, "baseline left out");
        close(num(row, "rate_strain_per_day"), b, 1e-9 * b.abs(), name);
        let sd = (s0 / stt).sqrt();
        close(num(row, "sd_rate_strain_per_day"), sd, 1e-8 * sd, name);
    }
}

/// `n` disjoint equilateral-ish triangles 10 m apart with side 8 m, and their elements.
fn triangles(n: usize) -> (Vec<(String, [f64; 2])>, String) {
    let mut pts = Vec::new();
    let mut el = String::from("element_id,v0,v1,v2\n");
    for i in 0..n {
        let o = [10.0 * (i % 10) as f64, 10.0 * (i / 10) as f64];
        let ids = [format!("P{i}a"), format!("P{i}b"), format!("P{i}c")];
        pts.push((ids[0].clone(), o));
        pts.push((ids[1].clone(), [o[0] + 8.0, o[1]]));
        pts.push((ids[2].clone(), [o[0] + 4.0, o[1] + 7.0]));
        el.push_str(&format!("T{i},{},{},{}\n", ids[0], ids[1], ids[2]));
    }
    (pts, el)
}

/// Two epochs (10 days apart) of the triangles with noise of σ = 2 mm per axis and a
/// strain `exx` added at the second epoch; the `increments` rows.
fn noise_increments(seed: u64, n: usize, exx: f64) -> Vec<Value> {
    let sigma = 0.002;
    let (pts, el) = triangles(n);
    let mut rng = Normal(seed);
    let mut t = String::from("epoch,time,id,x,y,sigma_x,sigma_y\n");
    for (label, time, e) in [
        ("N0", "2026-05-01T00:00:00Z", 0.0),
        ("N1", "2026-05-11T00:00:00Z", exx),
    ] {
        for (id, x) in &pts {
            t.push_str(&format!(
                "{label},{time},{id},{:?},{:?},{sigma},{sigma}\n",
                x[0] * (1.0 + e) + sigma * rng.next(),
                x[1] + sigma * rng.next()
            ));
        }
    }
    let dir = tempfile::tempdir().expect("dir");
    let e = write(&dir, "epochs.csv", &t);
    let el = write(&dir, "el.csv", &el);
    let doc = json(&[s(&e), "--series", "--baseline", "N0", "--elements", s(&el)]);
    rows(&doc, "increments").clone()
}

#[test]
fn a_noise_increment_is_significant_at_the_rate_alpha_and_a_real_one_always() {
    // Under H0 the test rejects with probability alpha = 0.05 (default --alpha); the
    // count over N independent triangles is Binomial(N, 0.05) (the χ² statistic of the
    // a-priori test is exactly χ²(3) for normal noise: Koch, Parameter Estimation and
    // Hypothesis Testing in Linear Models, the general linear hypothesis). 4 seeds × 100
    // triangles: mean 20, sd sqrt(400·0.05·0.95) = 4.36; accept mean ± 4 sd.
    let mut rejected = 0;
    let mut total = 0;
    for seed in 1..=4 {
        for row in noise_increments(seed, 100, 0.0) {
            assert_eq!(row["strain_test"], "chi2(3)", "{row}");
            let p = num(&row, "strain_p_value");
            assert!((0.0..=1.0).contains(&p));
            assert_eq!(row["strain_significant"], p < 0.05);
            rejected += usize::from(p < 0.05);
            total += 1;
        }
    }
    assert_eq!(total, 400);
    eprintln!("noise increments rejected: {rejected} of {total}");
    assert!((3..=37).contains(&rejected), "{rejected} of 400 rejected");
    // A real increment: exx = 1e-2 stretches the 8 m side by 80 mm, 40 times the
    // stated 2 mm; the change is found every time.
    for row in noise_increments(99, 20, 1.0e-2) {
        assert_eq!(row["strain_significant"], true, "{row}");
        assert!(num(&row, "strain_p_value") < 1e-6, "{row}");
    }
}

#[test]
fn precision_columns_are_empty_without_sigma() {
    let dir = tempfile::tempdir().expect("dir");
    let e = write(&dir, "epochs.csv", &epochs_csv(linear, None));
    let el = write(&dir, "el.csv", ELEMENTS);
    let doc = json(&[s(&e), "--series", "--baseline", "S0", "--elements", s(&el)]);
    for row in rows(&doc, "cumulative") {
        for c in [
            "sd_exx_microstrain",
            "sd_eyy_microstrain",
            "sd_exy_microstrain",
        ] {
            assert!(row[c].is_null(), "{c} in {row}");
        }
    }
    for row in rows(&doc, "increments") {
        for c in [
            "strain_test",
            "strain_test_statistic",
            "strain_p_value",
            "strain_significant",
        ] {
            assert!(row[c].is_null(), "{c} in {row}");
        }
    }
    for row in rows(&doc, "rates") {
        assert_eq!(row["weighted"], false, "{row}");
        assert_eq!(row["n_epochs"], 5, "baseline included when unweighted");
    }
}
