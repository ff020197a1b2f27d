//! Reference check of the strain tests' distribution functions against scipy.stats,
//! over a grid of degrees of freedom, statistics, levels and powers:
//! - p-values (χ² and F upper tails, also through `test_zero_strain`) against
//!   `scipy.stats.chi2.sf` / `scipy.stats.f.sf`;
//! - critical values against `scipy.stats.chi2.isf` / `scipy.stats.f.isf`;
//! - the non-central χ² CDF against `scipy.stats.ncx2.cdf`;
//! - Baarda's λ₀(α, β, m) against a `scipy.optimize.brentq` root of
//!   `ncx2.sf(chi2.isf(α, m), m, λ) = β`.
//!
//! Source of truth: scipy (general-purpose reference library, run from the test's Python
//! venv). A missing interpreter or scipy is a loud failure.

// Index loops over parallel arrays read most plainly in these checks.
#![allow(clippy::needless_range_loop)]

use kinema_core::kinematics::nalgebra::DMatrix;
use kinema_core::significance::{
    DeformationParameters, VarianceFactor, chi2_critical, chi2_sf, f_critical, f_sf,
    noncentral_chi2_cdf, noncentrality, test_zero_strain,
};
use serde::{Deserialize, Serialize};
use std::process::Command;

#[derive(Serialize)]
struct Input {
    /// (x, m)
    chi2: Vec<[f64; 2]>,
    /// (x, m, r)
    f: Vec<[f64; 3]>,
    /// (alpha, m)
    chi2_isf: Vec<[f64; 2]>,
    /// (alpha, m, r)
    f_isf: Vec<[f64; 3]>,
    /// (x, m, lambda)
    ncx2: Vec<[f64; 3]>,
    /// (alpha, beta, m)
    lambda0: Vec<[f64; 3]>,
}

#[derive(Deserialize)]
struct Output {
    chi2: Vec<f64>,
    f: Vec<f64>,
    chi2_isf: Vec<f64>,
    f_isf: Vec<f64>,
    ncx2: Vec<f64>,
    lambda0: Vec<f64>,
}

const SCRIPT: &str = r#"
import json, sys
from scipy import stats, optimize
with open(sys.argv[1]) as fh:
    d = json.load(fh)
def lam0(a, b, m):
    c = stats.chi2.isf(a, m)
    return optimize.brentq(lambda l: stats.ncx2.sf(c, m, l) - b, 1e-9, 1e4, xtol=1e-13, rtol=1e-14)
out = {
    "chi2": [float(stats.chi2.sf(x, m)) for x, m in d["chi2"]],
    "f": [float(stats.f.sf(x, m, r)) for x, m, r in d["f"]],
    "chi2_isf": [float(stats.chi2.isf(a, m)) for a, m in d["chi2_isf"]],
    "f_isf": [float(stats.f.isf(a, m, r)) for a, m, r in d["f_isf"]],
    "ncx2": [float(stats.ncx2.cdf(x, m, l)) for x, m, l in d["ncx2"]],
    "lambda0": [float(lam0(a, b, m)) for a, b, m in d["lambda0"]],
}
with open(sys.argv[2], "w") as fh:
    json.dump(out, fh)
"#;

fn run_scipy(input: &Input, tag: &str) -> Output {
    let dir = std::env::temp_dir().join(format!("kinema-stats-{tag}-{}", std::process::id()));
    std::fs::create_dir_all(&dir).expect("create temp dir");
    let inp = dir.join("grid.json");
    let out = dir.join("scipy.json");
    std::fs::write(&inp, serde_json::to_vec(input).expect("serialise")).expect("write input");
    let py = kinema_tests::python();
    let res = Command::new(&py)
        .arg("-c")
        .arg(SCRIPT)
        .arg(&inp)
        .arg(&out)
        .output()
        .unwrap_or_else(|e| panic!("cannot run {}: {e}", py.display()));
    assert!(
        res.status.success(),
        "scipy reference failed (is scipy installed in {}?):\n{}",
        py.display(),
        String::from_utf8_lossy(&res.stderr)
    );
    let text = std::fs::read(&out).expect("read scipy output");
    let parsed: Output = serde_json::from_slice(&text).expect("parse scipy output");
    let _ = std::fs::remove_dir_all(&dir);
    parsed
}

/// Tail probabilities: relative 1e-9, or absolute 1e-15 for tiny tails.
fn close_p(got: f64, want: f64) -> bool {
    (got - want).abs() <= 1e-9 * want.abs() + 1e-15
}

#[test]
fn distributions_match_scipy() {
    let dofs = [1.0, 2.0, 3.0, 6.0, 10.0];
    let xs = [0.05, 0.5, 1.0, 3.0, 7.8, 15.0, 40.0, 90.0];
    let chi2: Vec<[f64; 2]> = dofs.iter().flat_map(|&m| xs.map(|x| [x, m])).collect();
    let mut f = Vec::new();
    let mut f_isf = Vec::new();
    for m in [1.0, 3.0, 6.0] {
        for r in [1.0, 2.0, 5.0, 10.0, 30.0, 200.0] {
            for x in [0.2, 1.0, 2.5, 6.0, 20.0, 120.0] {
                f.push([x, m, r]);
            }
            for a in [0.001, 0.01, 0.05, 0.2] {
                f_isf.push([a, m, r]);
            }
        }
    }
    let alphas = [0.001, 0.01, 0.05, 0.2];
    let chi2_isf: Vec<[f64; 2]> = dofs.iter().flat_map(|&m| alphas.map(|a| [a, m])).collect();
    let mut ncx2 = Vec::new();
    for m in [1.0, 3.0, 6.0] {
        for lam in [0.0, 0.5, 5.0, 17.0, 60.0, 400.0] {
            let mean: f64 = m + lam;
            let sd = (2.0 * (m + 2.0 * lam)).sqrt();
            for z in [-2.0, -0.5, 0.0, 1.0, 3.0] {
                let x = (mean + z * sd).max(0.05);
                ncx2.push([x, m, lam]);
            }
        }
    }
    let mut lambda0 = Vec::new();
    for a in [0.001, 0.01, 0.05] {
        for b in [0.5, 0.8, 0.9] {
            for m in [1.0, 3.0, 6.0] {
                lambda0.push([a, b, m]);
            }
        }
    }
    let input = Input {
        chi2,
        f,
        chi2_isf,
        f_isf,
        ncx2,
        lambda0,
    };
    let r = run_scipy(&input, "grid");

    for (k, &[x, m]) in input.chi2.iter().enumerate() {
        let got = chi2_sf(x, m).expect("valid");
        assert!(
            close_p(got, r.chi2[k]),
            "chi2.sf({x}, {m}): {got:e} vs scipy {:e}",
            r.chi2[k]
        );
    }
    for (k, &[x, m, dof2]) in input.f.iter().enumerate() {
        let got = f_sf(x, m, dof2).expect("valid");
        assert!(
            close_p(got, r.f[k]),
            "f.sf({x}, {m}, {dof2}): {got:e} vs scipy {:e}",
            r.f[k]
        );
    }
    for (k, &[a, m]) in input.chi2_isf.iter().enumerate() {
        let got = chi2_critical(a, m).expect("valid");
        let want = r.chi2_isf[k];
        assert!(
            (got - want).abs() <= 1e-9 * want,
            "chi2.isf({a}, {m}): {got} vs scipy {want}"
        );
    }
    for (k, &[a, m, dof2]) in input.f_isf.iter().enumerate() {
        let got = f_critical(a, m, dof2).expect("valid");
        let want = r.f_isf[k];
        assert!(
            (got - want).abs() <= 1e-8 * want,
            "f.isf({a}, {m}, {dof2}): {got} vs scipy {want}"
        );
    }
    for (k, &[x, m, lam]) in input.ncx2.iter().enumerate() {
        let got = noncentral_chi2_cdf(x, m, lam).expect("valid");
        let want = r.ncx2[k];
        assert!(
            (got - want).abs() <= 1e-9,
            "ncx2.cdf({x}, {m}, {lam}): {got:e} vs scipy {want:e}"
        );
    }
    for (k, &[a, b, m]) in input.lambda0.iter().enumerate() {
        let got = noncentrality(a, b, m as usize).expect("valid");
        let want = r.lambda0[k];
        assert!(
            (got - want).abs() <= 1e-7 * want,
            "λ₀({a}, {b}, {m}): {got} vs scipy {want}"
        );
    }
}

/// End to end: the p-value of `test_zero_strain` for a unit cofactor and a chosen
/// statistic equals scipy's tail at that statistic.
#[test]
fn test_p_values_match_scipy() {
    let mut chi2 = Vec::new();
    let mut f = Vec::new();
    let mut ours_chi2 = Vec::new();
    let mut ours_f = Vec::new();
    for m in [3usize, 6] {
        let labels: Vec<&'static str> = if m == 3 {
            vec!["exx", "eyy", "exy"]
        } else {
            vec!["exx", "eyy", "ezz", "exy", "eyz", "exz"]
        };
        for t in [0.5, 2.0, 7.0, 12.0, 25.0] {
            // ε̂ = √(t/m)·(1, …, 1) with Q = I: T = t.
            let e = (t / m as f64).sqrt();
            let base = DeformationParameters {
                labels: labels.clone(),
                strain: vec![e; m],
                cofactor: DMatrix::identity(m, m),
                factor: VarianceFactor::Apriori { sigma0_sq: 1.0 },
            };
            let res = test_zero_strain(&base, 0.05).expect("valid");
            chi2.push([res.statistic, m as f64]);
            ours_chi2.push(res.p_value);
            for r in [2usize, 8, 40] {
                let p = DeformationParameters {
                    factor: VarianceFactor::Estimated {
                        sigma0_sq: 1.3,
                        redundancy: r,
                    },
                    ..base.clone()
                };
                let res = test_zero_strain(&p, 0.05).expect("valid");
                f.push([res.statistic, m as f64, r as f64]);
                ours_f.push(res.p_value);
            }
        }
    }
    let input = Input {
        chi2,
        f,
        chi2_isf: vec![],
        f_isf: vec![],
        ncx2: vec![],
        lambda0: vec![],
    };
    let r = run_scipy(&input, "tests");
    for k in 0..ours_chi2.len() {
        assert!(
            close_p(ours_chi2[k], r.chi2[k]),
            "chi2 #{k}: {} vs {}",
            ours_chi2[k],
            r.chi2[k]
        );
    }
    for k in 0..ours_f.len() {
        assert!(
            close_p(ours_f[k], r.f[k]),
            "F #{k}: {} vs {}",
            ours_f[k],
            r.f[k]
        );
    }
}
