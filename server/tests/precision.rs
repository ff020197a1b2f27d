//! End-to-end checks of the precision block of `kinema analyze`: standard deviations
//! propagated from the stated precision, and the test of whether strain is real.

mod support;

use support::{analyze_ok, parse_csv_sections, s, write};

/// A square of four points at (±a, ±a) m with σ per axis (m), displaced by `g` plus a
/// fixed "survey noise" of ±σ/2 (so that the fit has a non-zero a-posteriori factor).
fn square(a: f64, sigma: f64, g: [[f64; 2]; 2]) -> String {
    let mut t = String::from("id,x,y,ux,uy,sigma_x,sigma_y\n");
    let noise = [[0.5, -0.3], [-0.4, 0.2], [0.3, 0.5], [-0.2, -0.4]];
    for (k, (x, y)) in [(-a, -a), (a, -a), (a, a), (-a, a)].iter().enumerate() {
        let ux = g[0][0] * x + g[0][1] * y + noise[k][0] * sigma;
        let uy = g[1][0] * x + g[1][1] * y + noise[k][1] * sigma;
        t.push_str(&format!("P{k},{x},{y},{ux},{uy},{sigma},{sigma}\n"));
    }
    t
}

#[test]
fn network_fit_standard_deviation_matches_the_closed_form() {
    // Least squares u_x = t + G00 (x − x̄) + G01 (y − ȳ) on a square of half-side a with
    // equal weights 1/σ²: the normal matrix of the gradient part is diag(4a², 4a²)/σ², so
    // var(exx) = var(G00) = σ²/(4a²) with the a-priori factor (Ghilani & Wolf,
    // Adjustment Computations, propagation of variances through the normal equations).
    let dir = tempfile::tempdir().expect("dir");
    let (a, sigma) = (10.0, 1e-3);
    let f = write(
        dir.path(),
        "sq.csv",
        &square(a, sigma, [[1e-4, 0.0], [0.0, -5e-5]]),
    );
    let out = analyze_ok(&[
        s(&f),
        "--method",
        "network",
        "--use-precision",
        "--trust-apriori",
        "--format",
        "csv",
        "--strain-unit",
        "strain",
    ]);
    let t = &parse_csv_sections(&out)[0];
    let want = sigma / (2.0 * a);
    let got = t.num(0, "sd_exx_strain");
    assert!(
        (got - want).abs() < 1e-12 * want.max(1.0),
        "{got} vs {want}"
    );
    assert!((t.num(0, "sd_eyy_strain") - want).abs() < 1e-12);
    // exy = (G01 + G10)/2 of independent equal-variance terms: var = 2·σ²/(4a²)/4.
    let want_exy = (2.0 * want * want / 4.0).sqrt();
    assert!((t.num(0, "sd_exy_strain") - want_exy).abs() < 1e-12);
    // chi-square with 3 degrees of freedom for the strain components alone: with
    // independent exx, eyy, exy of these variances, T = Σ (e/sd)²; exx ≈ 100 µε and
    // eyy ≈ −50 µε against sd 50 µε give T ≈ 5 < χ²(3; 0.95) = 7.815 (chi-square table,
    // any statistics text; value from memory).
    assert_eq!(t.text(0, "strain_test"), "chi2(3)");
    let z = |k: &str, sd: f64| t.num(0, k) / sd;
    let want_t = z("exx_strain", want).powi(2)
        + z("eyy_strain", want).powi(2)
        + z("exy_strain", want_exy).powi(2);
    assert!((t.num(0, "strain_test_statistic") - want_t).abs() < 1e-9 * want_t);
    assert!(want_t < 7.815);
    assert_eq!(t.text(0, "strain_significant"), "false");
}

#[test]
fn element_standard_deviation_follows_the_shape_functions() {
    // Constant-strain triangle (0,0), (L,0), (0,L): ∂N/∂x = (−1/L, 1/L, 0), so
    // var(exx) = σ² Σ (∂N_k/∂x)² = 2σ²/L² (linear shape functions, e.g. Zienkiewicz &
    // Taylor, The Finite Element Method, vol. 1; propagation of variances).
    let dir = tempfile::tempdir().expect("dir");
    let (l, sigma) = (10.0, 1e-3);
    let pts = write(
        dir.path(),
        "t.csv",
        &format!(
            "id,x,y,ux,uy,sigma_x,sigma_y\nA,0,0,0,0,{sigma},{sigma}\nB,{l},0,0.002,0,{sigma},{sigma}\nC,0,{l},0,0,{sigma},{sigma}\n"
        ),
    );
    let el = write(dir.path(), "e.csv", "element_id,v0,v1,v2\nE1,A,B,C\n");
    let out = analyze_ok(&[
        s(&pts),
        "--method",
        "elements",
        "--elements",
        s(&el),
        "--format",
        "csv",
        "--strain-unit",
        "strain",
    ]);
    let t = &parse_csv_sections(&out)[0];
    let want = (2.0f64).sqrt() * sigma / l;
    assert!(
        (t.num(0, "sd_exx_strain") - want).abs() < 1e-12,
        "{}",
        t.num(0, "sd_exx_strain")
    );
    // exx = 2e-4 against sd 1.41e-4; the triangle has no redundancy, so the test uses the
    // a-priori factor: chi2 with 3 degrees of freedom.
    assert_eq!(t.text(0, "strain_test"), "chi2(3)");
    assert!((t.num(0, "exx_strain") - 2e-4).abs() < 1e-15);
}

#[test]
fn a_large_strain_is_significant_and_no_precision_leaves_the_block_empty() {
    let dir = tempfile::tempdir().expect("dir");
    let f = write(
        dir.path(),
        "sq.csv",
        &square(10.0, 1e-4, [[1e-3, 2e-4], [0.0, 5e-4]]),
    );
    let out = analyze_ok(&[
        s(&f),
        "--method",
        "network",
        "--use-precision",
        "--trust-apriori",
        "--format",
        "csv",
    ]);
    let t = &parse_csv_sections(&out)[0];
    assert_eq!(t.text(0, "strain_significant"), "true");
    assert!(t.num(0, "strain_p_value") < 1e-6);
    // Without stated precision an exact element has no meaningful covariance.
    let pts = write(
        dir.path(),
        "t.csv",
        "id,x,y,ux,uy\nA,0,0,0,0\nB,10,0,0.002,0\nC,0,10,0,0\n",
    );
    let el = write(dir.path(), "e.csv", "element_id,v0,v1,v2\nE1,A,B,C\n");
    let out = analyze_ok(&[
        s(&pts),
        "--method",
        "elements",
        "--elements",
        s(&el),
        "--format",
        "csv",
    ]);
    let t = &parse_csv_sections(&out)[0];
    assert_eq!(t.text(0, "sd_exx_microstrain"), "");
    assert_eq!(t.text(0, "strain_test"), "");
}

#[test]
fn minimal_detectable_strain_matches_scipy_noncentrality() {
    // Baarda's minimal detectable strain in the least favourable direction is
    // √(λ₀ q_max), q_max the largest eigenvalue of the strain covariance; on the square,
    // q_max = var(exx) = σ²/(4a²). λ₀(α = 0.05, power 0.8, 3 dof) comes from
    // scipy.stats.ncx2 and a root solve (scipy.optimize.brentq), independent of Kinema.
    let dir = tempfile::tempdir().expect("dir");
    let (a, sigma) = (10.0, 1e-3);
    let f = write(
        dir.path(),
        "sq.csv",
        &square(a, sigma, [[1e-4, 0.0], [0.0, -5e-5]]),
    );
    let out = analyze_ok(&[
        s(&f),
        "--method",
        "network",
        "--use-precision",
        "--trust-apriori",
        "--format",
        "csv",
        "--strain-unit",
        "strain",
    ]);
    let t = &parse_csv_sections(&out)[0];
    let mds = t.num(0, "mds_strain");
    let script = "from scipy.stats import chi2, ncx2\n\
                  from scipy.optimize import brentq\n\
                  c = chi2.isf(0.05, 3)\n\
                  print(repr(brentq(lambda l: ncx2.sf(c, 3, l) - 0.8, 1e-6, 100.0, xtol=1e-14)))\n";
    let py = std::process::Command::new(kinema_tests::python())
        .args(["-c", script])
        .output()
        .expect("python runs");
    assert!(
        py.status.success(),
        "{}",
        String::from_utf8_lossy(&py.stderr)
    );
    let lambda0: f64 = String::from_utf8_lossy(&py.stdout)
        .trim()
        .parse()
        .expect("a number");
    let want = (lambda0 * sigma * sigma / (4.0 * a * a)).sqrt();
    assert!(
        (mds - want).abs() < 1e-7 * want,
        "{mds} vs {want} (λ₀ = {lambda0})"
    );
}

#[test]
fn a_perfect_fit_gets_no_verdict() {
    // An exact affine field on seven points: the residuals are rounding noise, so the
    // a-posteriori factor says nothing about the survey (common practice: a test needs
    // real residuals). No standard deviation, minimal detectable strain or test.
    let dir = tempfile::tempdir().expect("dir");
    let mut t = String::from("id,x,y,ux,uy\n");
    for (k, (x, y)) in [
        (0.0, 0.0),
        (10.0, 0.0),
        (0.0, 10.0),
        (10.0, 10.0),
        (5.0, 3.0),
        (2.0, 8.0),
        (7.0, 6.0),
    ]
    .iter()
    .enumerate()
    {
        let ux = 1e-4 * x + 3e-5 * y + 0.002;
        let uy = -2e-5 * x + 5e-5 * y - 0.001;
        t.push_str(&format!("P{k},{x},{y},{ux},{uy}\n"));
    }
    let f = write(dir.path(), "exact.csv", &t);
    let out = analyze_ok(&[s(&f), "--method", "network", "--format", "json"]);
    let v: serde_json::Value = serde_json::from_str(&out).expect("json");
    let row = &v["network"][0];
    assert!(row["sd_exx_microstrain"].is_null(), "{row}");
    assert!(row["strain_test"].is_null(), "{row}");
    let notes = v["summary"]["notes"].to_string();
    assert!(notes.contains("perfect fit"), "{notes}");
}
