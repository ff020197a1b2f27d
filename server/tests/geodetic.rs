//! End-to-end checks of WGS84 geodetic (GNSS) input to `kinema analyze`: the
//! conversion to East-North-Up, the strain through the geodetic path, the azimuth
//! column and the errors on bad coordinates.
//!
//! Input files are generated here from ENU offsets with the core's inverse functions
//! (`EnuFrame::enu_to_ecef`, `ecef_to_geodetic`), so the strain put in is known.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use kinema_core::geodesy::{EnuFrame, Geodetic, ecef_to_geodetic};
use serde_json::Value;

/// The origin the test networks are laid out about (an arbitrary mid-latitude spot).
const ORIGIN: (f64, f64, f64) = (47.25, 11.4, 620.0);

fn frame() -> EnuFrame {
    EnuFrame::new(&Geodetic::from_degrees(ORIGIN.0, ORIGIN.1, ORIGIN.2)).expect("valid origin")
}

fn origin_flag() -> String {
    format!("{},{},{}", ORIGIN.0, ORIGIN.1, ORIGIN.2)
}

fn kinema(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_kinema"))
        .args(args)
        .output()
        .expect("the kinema binary runs")
}

fn analyze_json(file: &Path, extra: &[&str]) -> Value {
    let mut args = vec![
        "analyze",
        file.to_str().expect("utf-8 path"),
        "--format",
        "json",
        "--strain-unit",
        "strain",
    ];
    args.extend_from_slice(extra);
    let out = kinema(&args);
    assert!(
        out.status.success(),
        "kinema {args:?} failed:\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).expect("JSON output")
}

/// Degrees with every digit `f64` holds (Rust's shortest round-trip form).
fn geodetic_text(g: &Geodetic) -> String {
    format!("{},{},{}", g.lat.to_degrees(), g.lon.to_degrees(), g.h)
}

/// ENU (m) about [`ORIGIN`] → geodetic, by the core's inverse functions.
fn to_geodetic(f: &EnuFrame, enu: [f64; 3]) -> Geodetic {
    ecef_to_geodetic(f.enu_to_ecef(enu).expect("finite")).expect("far from the centre")
}

/// A jittered 4 × 4 layout of antennas over about 300 m × 300 m, ENU metres, with
/// heights varying by ±25 m (so a 3D fit is not degenerate).
fn layout() -> Vec<[f64; 3]> {
    let mut v = Vec::new();
    for i in 0..4 {
        for j in 0..4 {
            let (fi, fj) = (f64::from(i), f64::from(j));
            v.push([
                -150.0 + 100.0 * fi + 7.0 * (fj * 1.7).sin(),
                -150.0 + 100.0 * fj + 6.0 * (fi * 2.3).cos(),
                25.0 * ((fi + 2.0 * fj) * 0.9).sin(),
            ]);
        }
    }
    v
}

/// Write a geodetic CSV: reference at `x`, current at `current(x)`, both ENU (m).
fn write_file(dir: &Path, name: &str, current: impl Fn([f64; 3]) -> [f64; 3]) -> PathBuf {
    let f = frame();
    let mut text = String::from("id,lat_ref,lon_ref,h_ref,lat_cur,lon_cur,h_cur\n");
    for (k, x) in layout().into_iter().enumerate() {
        let r = to_geodetic(&f, x);
        let c = to_geodetic(&f, current(x));
        text += &format!("G{k:02},{},{}\n", geodetic_text(&r), geodetic_text(&c));
    }
    let p = dir.join(name);
    std::fs::write(&p, text).expect("write input");
    p
}

/// A horizontal gradient whose strain has e1 = 250e-6 at +30° from east
/// (counter-clockwise), e2 = −90e-6, plus a rigid rotation of 40e-6 rad.
fn gradient() -> [[f64; 2]; 2] {
    let (e1, e2, w) = (250e-6, -90e-6, 40e-6);
    let (s, c) = 30f64.to_radians().sin_cos();
    // ε = R diag(e1, e2) Rᵀ with R the rotation by +30°.
    let exx = e1 * c * c + e2 * s * s;
    let eyy = e1 * s * s + e2 * c * c;
    let exy = (e1 - e2) * s * c;
    [[exx, exy - w], [exy + w, eyy]]
}

fn num(row: &Value, key: &str) -> f64 {
    row[key]
        .as_f64()
        .unwrap_or_else(|| panic!("{key} is not a number in {row}"))
}

// Source: the uniform-field law (a displacement field u = G·x is recovered exactly by
// a linear element and by a least-squares affine fit; any elasticity text, e.g.
// Timoshenko & Goodier, Theory of Elasticity, 3rd ed., §2 on homogeneous strain),
// here through the WGS84 geodetic path (EPSG methods 9602 and 9836, IOGP Guidance
// Note 7-2). Principal direction: Mohr-circle formula tan 2θ = 2exy/(exx − eyy)
// (Gere & Goodno, Mechanics of Materials, §7.3), θ = 30° by construction; an azimuth
// clockwise from north is 90° − θ = 60°.
#[test]
fn uniform_horizontal_strain_is_recovered_with_its_azimuth() {
    let dir = tempfile::tempdir().expect("dir");
    let g = gradient();
    let p = write_file(dir.path(), "uniform.csv", |x| {
        [
            x[0] + g[0][0] * x[0] + g[0][1] * x[1],
            x[1] + g[1][0] * x[0] + g[1][1] * x[1],
            x[2],
        ]
    });
    let expect = [
        ("exx_strain", g[0][0]),
        ("eyy_strain", g[1][1]),
        ("exy_strain", (g[0][1] + g[1][0]) / 2.0),
        ("e1_strain", 250e-6),
        ("e2_strain", -90e-6),
    ];
    let origin = origin_flag();
    for method in ["network", "delaunay"] {
        let v = analyze_json(
            &p,
            &[
                "--horizontal",
                "--enu-origin",
                &origin,
                "--method",
                method,
                "--min-angle-deg",
                "1",
            ],
        );
        let section = if method == "network" {
            "network"
        } else {
            "elements"
        };
        let rows = v[section].as_array().expect("rows");
        assert!(rows.len() >= if method == "network" { 1 } else { 9 });
        for row in rows {
            for (key, want) in expect {
                let got = num(row, key);
                assert!((got - want).abs() < 1e-9, "{method} {key}: {got} vs {want}");
            }
            let rot = num(row, "rotation_deg").to_radians();
            assert!((rot - 40e-6).abs() < 1e-9, "{method} rotation {rot}");
            assert!((num(row, "theta1_deg") - 30.0).abs() < 1e-5, "{row}");
            assert!((num(row, "azimuth1_deg") - 60.0).abs() < 1e-5, "{row}");
        }
        let params = &v["parameters"];
        assert_eq!(params["frame"], "ENU");
        assert_eq!(params["enu_origin"], "given (--enu-origin)");
        assert!((params["enu_origin_lat_deg"].as_f64().expect("lat") - ORIGIN.0).abs() < 1e-12);
        assert!((params["enu_origin_lon_deg"].as_f64().expect("lon") - ORIGIN.1).abs() < 1e-12);
        assert!((params["enu_origin_h_m"].as_f64().expect("h") - ORIGIN.2).abs() < 1e-9);
        assert_eq!(v["dimension"], 2);
    }
}

// Source: as above (uniform-field law). The default origin is the mean reference
// position, a few metres from the layout's origin; the frames then differ by a
// rotation of ~1e-6 rad, which leaves the principal values and the trace unchanged
// (invariants) to far below 1e-9.
#[test]
fn default_origin_is_the_mean_reference_position_and_invariants_hold() {
    let dir = tempfile::tempdir().expect("dir");
    let g = gradient();
    let p = write_file(dir.path(), "uniform.csv", |x| {
        [
            x[0] + g[0][0] * x[0] + g[0][1] * x[1],
            x[1] + g[1][0] * x[0] + g[1][1] * x[1],
            x[2],
        ]
    });
    let v = analyze_json(&p, &["--horizontal", "--method", "network"]);
    assert_eq!(
        v["parameters"]["enu_origin"],
        "mean of the reference positions"
    );
    // The mean ENU of the layout, taken back to geodetic, is the stated origin.
    let f = frame();
    let pts = layout();
    let n = pts.len() as f64;
    let mean = [0, 1, 2].map(|k| pts.iter().map(|x| x[k]).sum::<f64>() / n);
    let o = to_geodetic(&f, mean);
    let lat = v["parameters"]["enu_origin_lat_deg"].as_f64().expect("lat");
    let lon = v["parameters"]["enu_origin_lon_deg"].as_f64().expect("lon");
    // 1e-9° is 0.1 mm.
    assert!((lat - o.lat.to_degrees()).abs() < 1e-9, "{lat}");
    assert!((lon - o.lon.to_degrees()).abs() < 1e-9, "{lon}");
    let row = &v["network"][0];
    assert!((num(row, "e1_strain") - 250e-6).abs() < 1e-9);
    assert!((num(row, "e2_strain") + 90e-6).abs() < 1e-9);
    assert!((num(row, "evol_strain") - 160e-6).abs() < 1e-9);
    // Centroid at the origin: the origin is the mean of the reference positions.
    assert!(num(row, "x_m").abs() < 1e-6 && num(row, "y_m").abs() < 1e-6);
}

// Source: rigid-body motion carries no strain (any continuum-mechanics text, e.g.
// Malvern, Introduction to the Mechanics of a Continuous Medium, §4.5); a translation
// in ECEF is a translation in any ENU frame, u = R·t (EPSG method 9836).
#[test]
fn rigid_ecef_translation_gives_zero_strain() {
    let dir = tempfile::tempdir().expect("dir");
    let f = frame();
    let t = [0.031, -0.017, 0.024]; // m, in ECEF
    let pts = layout();
    let mut text = String::from("id,lat_ref,lon_ref,h_ref,lat_cur,lon_cur,h_cur\n");
    for (k, x) in pts.iter().enumerate() {
        let xe = f.enu_to_ecef(*x).expect("finite");
        let r = ecef_to_geodetic(xe).expect("valid");
        let c = ecef_to_geodetic([xe[0] + t[0], xe[1] + t[1], xe[2] + t[2]]).expect("valid");
        text += &format!("G{k:02},{},{}\n", geodetic_text(&r), geodetic_text(&c));
    }
    let p = dir.path().join("rigid.csv");
    std::fs::write(&p, text).expect("write");
    let tv = nalgebra::Vector3::from(t);
    let want = f.rotation * tv;
    let origin = origin_flag();
    let v = analyze_json(&p, &["--method", "network", "--enu-origin", &origin]);
    let row = &v["network"][0];
    for key in [
        "exx_strain",
        "eyy_strain",
        "ezz_strain",
        "exy_strain",
        "eyz_strain",
        "exz_strain",
    ] {
        assert!(num(row, key).abs() < 1e-9, "{key} = {}", num(row, key));
    }
    for (k, key) in ["ux_m", "uy_m", "uz_m"].iter().enumerate() {
        assert!((num(row, key) - want[k]).abs() < 1e-7, "{key}");
    }
    let v = analyze_json(&p, &["--method", "network", "--horizontal"]);
    let row = &v["network"][0];
    for key in ["exx_strain", "eyy_strain", "exy_strain"] {
        assert!(num(row, key).abs() < 1e-9, "horizontal {key}");
    }
}

// Source: IOGP/EPSG Guidance Note 7-2, EPSG method 9602 (geographic → geocentric,
// X = (N + h)cosφ cosλ, Y = (N + h)cosφ sinλ, Z = ((1 − e²)N + h)sinφ) and EPSG method
// 9836 (geocentric → topocentric, rows of R = East, North, Up at the origin), written
// out independently in numpy; WGS84 a = 6378137 m, 1/f = 298.257223563 (NIMA TR8350.2,
// §3.2). For an affine least-squares fit the centroid is the mean ENU of the points
// and the fitted displacement at it the mean displacement, so both must equal the
// numpy means, to 1 mm.
#[test]
fn conversion_agrees_with_numpy() {
    let dir = tempfile::tempdir().expect("dir");
    // A non-uniform movement, so the check does not rest on the uniform-field law.
    let p = write_file(dir.path(), "moved.csv", |x| {
        [
            x[0] + 0.01 + 1e-7 * x[0] * x[1],
            x[1] - 0.02 + 3e-5 * x[2],
            x[2] + 0.005 * (x[0] / 100.0).sin(),
        ]
    });
    let script = r#"
import sys, numpy as np
a = 6378137.0; f = 1.0 / 298.257223563; e2 = f * (2.0 - f)
def ecef(lat, lon, h):
    lat, lon = np.radians(lat), np.radians(lon)
    n = a / np.sqrt(1.0 - e2 * np.sin(lat) ** 2)
    return np.array([(n + h) * np.cos(lat) * np.cos(lon),
                     (n + h) * np.cos(lat) * np.sin(lon),
                     ((1.0 - e2) * n + h) * np.sin(lat)])
lat0, lon0, h0 = (float(v) for v in sys.argv[2].split(","))
p, l = np.radians(lat0), np.radians(lon0)
R = np.array([[-np.sin(l), np.cos(l), 0.0],
              [-np.sin(p) * np.cos(l), -np.sin(p) * np.sin(l), np.cos(p)],
              [np.cos(p) * np.cos(l), np.cos(p) * np.sin(l), np.sin(p)]])
x0 = ecef(lat0, lon0, h0)
d = np.genfromtxt(sys.argv[1], delimiter=",", skip_header=1, usecols=range(1, 7))
ref = np.array([R @ (ecef(*r[0:3]) - x0) for r in d])
cur = np.array([R @ (ecef(*r[3:6]) - x0) for r in d])
print(" ".join(repr(float(v)) for v in list(ref.mean(axis=0)) + list((cur - ref).mean(axis=0))))
"#;
    let origin = origin_flag();
    let out = Command::new(kinema_tests::python())
        .arg("-c")
        .arg(script)
        .arg(&p)
        .arg(&origin)
        .output()
        .expect("python runs");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let want: Vec<f64> = String::from_utf8(out.stdout)
        .expect("utf-8")
        .split_whitespace()
        .map(|s| s.parse().expect("number"))
        .collect();
    assert_eq!(want.len(), 6);
    let v = analyze_json(&p, &["--method", "network", "--enu-origin", &origin]);
    let row = &v["network"][0];
    let got = ["x_m", "y_m", "z_m", "ux_m", "uy_m", "uz_m"].map(|k| num(row, k));
    for k in 0..6 {
        assert!(
            (got[k] - want[k]).abs() < 1e-3,
            "component {k}: kinema {} vs numpy {}",
            got[k],
            want[k]
        );
    }
}

fn bad_file(text: &str) -> (tempfile::TempDir, PathBuf) {
    let dir = tempfile::tempdir().expect("dir");
    let p = dir.path().join("gnss.csv");
    std::fs::write(&p, text).expect("write");
    (dir, p)
}

const HEADER: &str = "id,lat_ref,lon_ref,h_ref,lat_cur,lon_cur,h_cur\n";

#[test]
fn latitude_out_of_range_exits_2_with_line_and_column() {
    let (_d, p) = bad_file(&format!(
        "{HEADER}A,47.25,11.4,620,47.25,11.4,620\nB,91,11.4,620,47.25,11.4,620\n"
    ));
    let out = kinema(&["analyze", p.to_str().expect("utf-8")]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8(out.stderr).expect("utf-8");
    assert!(
        err.contains("gnss.csv:3:2 (column lat_ref): latitude 91° is outside [-90°, 90°]"),
        "{err}"
    );
    assert!(out.stdout.is_empty());
}

#[test]
fn nan_exits_2_with_line_and_column() {
    let (_d, p) = bad_file(&format!(
        "{HEADER}A,47.25,11.4,620,47.25,NaN,620\nB,47.26,11.4,620,47.26,11.4,620\n"
    ));
    let out = kinema(&["analyze", p.to_str().expect("utf-8")]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8(out.stderr).expect("utf-8");
    assert!(
        err.contains("gnss.csv:2:6 (column lon_cur): `NaN` is not a finite number"),
        "{err}"
    );
}

#[test]
fn bad_flags_and_headers_are_refused() {
    let (_d, p) = bad_file(&format!(
        "{HEADER}A,47.25,11.4,620,47.25,11.4,620\nB,47.26,11.4,620,47.26,11.4,620\n"
    ));
    let path = p.to_str().expect("utf-8");
    let out = kinema(&["analyze", path, "--enu-origin", "95,11,0"]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8(out.stderr).expect("utf-8");
    assert!(err.contains("--enu-origin 95,11,0: latitude 95°"), "{err}");
    let out = kinema(&["analyze", path, "--enu-origin", "47,11"]);
    assert_eq!(out.status.code(), Some(2));
    // A plane file with --horizontal is a usage error.
    let (_d2, q) = bad_file("id,x,y,ux,uy\nA,0,0,0,0\nB,1,0,0,0\nC,0,1,0,0\n");
    let out = kinema(&["analyze", q.to_str().expect("utf-8"), "--horizontal"]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8(out.stderr).expect("utf-8");
    assert!(err.contains("apply to a geodetic points file"), "{err}");
    // Two of three sigma columns.
    let (_d3, r) = bad_file(
        "id,lat_ref,lon_ref,h_ref,lat_cur,lon_cur,h_cur,sigma_e,sigma_n\nA,1,1,1,1,1,1,1,1\n",
    );
    let out = kinema(&["analyze", r.to_str().expect("utf-8")]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8(out.stderr).expect("utf-8");
    assert!(err.contains("missing column `sigma_u`"), "{err}");
}

// Source: common practice (longitudes are periodic; 371.4° is 11.4°). The core
// normalises longitudes; a file written with 371.4 gives the same strain as 11.4.
#[test]
fn longitude_is_normalised() {
    let text = |shift: f64| {
        let f = frame();
        let mut s = String::from(HEADER);
        for (k, x) in layout().into_iter().enumerate() {
            let r = to_geodetic(&f, x);
            let c = to_geodetic(&f, [x[0] * (1.0 + 1e-4), x[1], x[2]]);
            s += &format!(
                "G{k:02},{},{},{},{},{},{}\n",
                r.lat.to_degrees(),
                r.lon.to_degrees() + shift,
                r.h,
                c.lat.to_degrees(),
                c.lon.to_degrees() + shift,
                c.h
            );
        }
        s
    };
    let (_a, p) = bad_file(&text(0.0));
    let (_b, q) = bad_file(&text(360.0));
    let a = analyze_json(&p, &["--method", "network", "--horizontal"]);
    let b = analyze_json(&q, &["--method", "network", "--horizontal"]);
    let (ra, rb) = (&a["network"][0], &b["network"][0]);
    assert!((num(ra, "exx_strain") - 1e-4).abs() < 1e-9);
    assert!((num(ra, "exx_strain") - num(rb, "exx_strain")).abs() < 1e-9);
    let lon = b["parameters"]["enu_origin_lon_deg"].as_f64().expect("lon");
    assert!(
        lon > -180.0 && lon <= 180.0 && (lon - 11.4).abs() < 0.01,
        "{lon}"
    );
}

// Source: rotation of a covariance, C' = R·C·Rᵀ (EPSG method 9836 rotation applied to
// second moments; any adjustment text, e.g. Ghilani, Adjustment Computations, 6th ed.,
// ch. 6 on propagation). Antennas within 300 m of the origin: the frames differ by
// < 5e-5 rad, so the stated sigmas come back to within 1e-6 relative, and a fit
// weighted by them has the standard deviations the a-priori propagation gives.
#[test]
fn sigmas_are_read_and_used() {
    let f = frame();
    let mut s =
        String::from("id,lat_ref,lon_ref,h_ref,lat_cur,lon_cur,h_cur,sigma_e,sigma_n,sigma_u\n");
    for (k, x) in layout().into_iter().enumerate() {
        let r = to_geodetic(&f, x);
        // A rigid shift plus a deterministic millimetre-level scatter, so that the
        // a-posteriori variance factor is not zero.
        let kf = k as f64;
        let c = to_geodetic(
            &f,
            [
                x[0] + 0.01 + 0.002 * (kf * 1.3).sin(),
                x[1] + 0.003 * (kf * 2.1).cos(),
                x[2],
            ],
        );
        s += &format!(
            "G{k:02},{},{},0.002,0.003,0.006\n",
            geodetic_text(&r),
            geodetic_text(&c)
        );
    }
    let (_d, p) = bad_file(&s);
    let v = analyze_json(
        &p,
        &["--method", "network", "--horizontal", "--use-precision"],
    );
    let row = &v["network"][0];
    // sd_exx from the stated sigma_e over the layout: with weights 1/σ_e² on every
    // ux, var(G_xx) = s0²·σ_e²·[N⁻¹]_00, N the centred normal matrix of (x, y) and s0
    // the a-posteriori standard deviation of unit weight (the sigma0 column).
    let pts = layout();
    let n = pts.len() as f64;
    let mx = pts.iter().map(|x| x[0]).sum::<f64>() / n;
    let sxx: f64 = pts.iter().map(|x| (x[0] - mx).powi(2)).sum();
    let my = pts.iter().map(|x| x[1]).sum::<f64>() / n;
    let syy: f64 = pts.iter().map(|x| (x[1] - my).powi(2)).sum();
    let sxy: f64 = pts.iter().map(|x| (x[0] - mx) * (x[1] - my)).sum();
    // Inverse of the 2×2 normal block [[sxx, sxy], [sxy, syy]]: (0,0) element.
    let inv00 = syy / (sxx * syy - sxy * sxy);
    let s0 = num(row, "sigma0");
    assert!(s0 > 0.1, "sigma0 {s0}");
    let want = s0 * 0.002 * inv00.sqrt();
    let got = num(row, "sd_exx_strain");
    assert!((got - want).abs() < 1e-3 * want, "sd_exx {got} vs {want}");
}
