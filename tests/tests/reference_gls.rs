//! Cross-check of the coupled (generalised) least-squares gradient fit with full
//! per-point covariances against numpy.
//!
//! Source: general least squares with a full weight matrix (Ghilani & Wolf, *Adjustment
//! Computations*): unknowns `β = (t, vec G)`, design rows `A_k = [I_D, I_D ⊗ (x_k − c)ᵀ]`,
//! weight `W = blockdiag(K_k·C_k⁻¹)`. numpy solves it with `numpy.linalg.lstsq` on the
//! whitened system `R·A β = R·u` (`RᵀR = W`, from `numpy.linalg.cholesky`), forms
//! `Cov(β̂) = σ̂₀²·N⁻¹(AᵀK²PA)N⁻¹` (sandwich / Huber–White form of a weighted estimator,
//! White 1980; `σ̂₀²·N⁻¹` without a kernel), `σ̂₀² = vᵀPv / r_eff` and
//! `r_eff = tr((I−H)ᵀP(I−H)P⁻¹)`, `H = A N⁻¹ AᵀW`, with dense `nD×nD` matrices —
//! independently of kinema's `O(n)` formulas.
//!
//! numpy centres at the plain mean `c`; kinema's weighted centroid
//! `x̄ = Σ w̄x / Σ w̄` with `w̄_k = K_k·tr(C_k⁻¹)/D` is computed in numpy too, and `t` is
//! compared after moving numpy's intercept to it.

// Index loops over parallel arrays read most plainly in these checks.
#![allow(clippy::needless_range_loop)]

use kinema_core::estimate::RegionKind;
use kinema_core::estimate::lsq::{DistanceWeight, FitOptions, fit_points};
use kinema_core::{Point, PointSet};
use serde_json::{Value, json};

const PY: &str = r#"
import json, sys
import numpy as np
d = json.load(sys.stdin)
X = np.array(d["x"]); U = np.array(d["u"]); C = np.array(d["cov"])
n, D = X.shape
scale = d["gauss_scale"]
if scale is None:
    K = np.ones(n)
else:
    ctr = np.array(d["centre"])
    K = np.exp(-np.sum((X - ctr) ** 2, axis=1) / (2.0 * scale ** 2))
    K = K / K.max()
Pk = np.array([np.linalg.inv(c) for c in C])
wbar = K * np.array([np.trace(p) for p in Pk]) / D
xw = (wbar[:, None] * X).sum(axis=0) / wbar.sum()
c = X.mean(axis=0)
m = D + D * D
A = np.zeros((n * D, m))
for k in range(n):
    A[k * D:(k + 1) * D, :D] = np.eye(D)
    A[k * D:(k + 1) * D, D:] = np.kron(np.eye(D), (X[k] - c)[None, :])
P = np.zeros((n * D, n * D)); Kd = np.zeros((n * D, n * D))
for k in range(n):
    P[k * D:(k + 1) * D, k * D:(k + 1) * D] = Pk[k]
    Kd[k * D:(k + 1) * D, k * D:(k + 1) * D] = K[k] * np.eye(D)
W = Kd @ P
R = np.linalg.cholesky(W).T
u = U.reshape(-1)
beta = np.linalg.lstsq(R @ A, R @ u, rcond=None)[0]
v = u - A @ beta
vtpv = float(v @ P @ v)
N = A.T @ W @ A
Ninv = np.linalg.inv(N)
B = A.T @ Kd @ Kd @ P @ A
H = A @ Ninv @ A.T @ W
IH = np.eye(n * D) - H
reff = float(np.trace(IH.T @ P @ IH @ np.linalg.inv(P)))
r = n * D - m
s0 = vtpv / reff
cov = s0 * (Ninv @ B @ Ninv)
G = beta[D:].reshape(D, D)
t = beta[:D] + G @ (xw - c)
print(json.dumps({"G": G.tolist(), "t": t.tolist(), "s0": s0, "reff": reff, "r": r,
                  "cov": cov[D:, D:].tolist(), "v": v.reshape(n, D).tolist(),
                  "xbar": xw.tolist()}))
"#;

/// The seeded generator and the numpy runner shared by the reference tests.
type Rng = kinema_tests::SplitMix64;

fn numpy(input: &Value) -> Value {
    kinema_tests::python_json(PY, input)
}

fn close(got: f64, want: f64, rel: f64, abs: f64, what: &str) {
    assert!(
        (got - want).abs() <= rel * want.abs() + abs,
        "{what}: kinema {got:e}, numpy {want:e}"
    );
}

/// A random SPD covariance (m²): standard deviations 0.5–5 mm, correlations up to ±0.9.
fn random_cov<const D: usize>(rng: &mut Rng) -> [[f64; D]; D] {
    let mut l = [[0.0; D]; D];
    for i in 0..D {
        for j in 0..=i {
            l[i][j] = if i == j {
                rng.range(0.5e-3, 5e-3)
            } else {
                rng.range(-3e-3, 3e-3)
            };
        }
    }
    let mut c = [[0.0; D]; D];
    for i in 0..D {
        for j in 0..D {
            c[i][j] = (0..D).map(|k| l[i][k] * l[j][k]).sum();
        }
    }
    c
}

/// Fit `n` random points with correlated covariances (some with only sigma), optionally
/// Gaussian-weighted, and compare everything with numpy.
fn check<const D: usize>(seed: u64, n: usize, gauss: Option<f64>) {
    let mut rng = kinema_tests::SplitMix64(seed);
    let offset = [2.5e5, 6.1e6, 310.0];
    let g = [
        [3e-4, -1e-4, 2e-4],
        [5e-5, -2e-4, 1e-4],
        [-3e-4, 1e-4, 4e-4],
    ];
    let mut covs = Vec::new();
    let pts: Vec<Point<D>> = (0..n)
        .map(|k| {
            let mut x = [0.0; D];
            let mut u = [0.0; D];
            for a in 0..D {
                x[a] = offset[a] + rng.range(-40.0, 40.0);
            }
            for a in 0..D {
                u[a] = 0.01 * (a as f64 + 1.0) + rng.range(-8e-3, 8e-3);
                for b in 0..D {
                    u[a] += g[a][b] * (x[b] - offset[b]);
                }
            }
            let p = Point::new(format!("R{k}"), x, u);
            if k % 3 == 2 {
                let s: [f64; D] = std::array::from_fn(|_| rng.range(5e-4, 5e-3));
                let mut c = [[0.0; D]; D];
                for a in 0..D {
                    c[a][a] = s[a] * s[a];
                }
                covs.push(c);
                p.with_sigma(s)
            } else {
                let c = random_cov::<D>(&mut rng);
                covs.push(c);
                p.with_cov(c)
            }
        })
        .collect();
    let set = PointSet::new(pts).expect("valid points");
    let members: Vec<usize> = (0..n).collect();
    let centre: [f64; D] = std::array::from_fn(|a| offset[a] + 5.0);
    let opts = FitOptions {
        distance_weight: gauss.map_or(DistanceWeight::None, |scale_m| DistanceWeight::Gaussian {
            scale_m,
        }),
        ..FitOptions::default()
    };
    let est = fit_points(
        &set,
        &members,
        "REF",
        RegionKind::Group,
        Some(centre),
        &opts,
    )
    .expect("fit");
    assert_eq!(
        est.members, members,
        "every point has a non-negligible weight"
    );
    let fit = est.fit.as_ref().expect("stats");
    let input = json!({
        "x": set.points().iter().map(|p| p.x.to_vec()).collect::<Vec<_>>(),
        "u": set.points().iter().map(|p| p.u.to_vec()).collect::<Vec<_>>(),
        "cov": covs.iter().map(|c| c.iter().map(|r| r.to_vec()).collect::<Vec<_>>()).collect::<Vec<_>>(),
        "gauss_scale": gauss,
        "centre": centre.to_vec(),
    });
    let r = numpy(&input);
    let num = |v: &Value| v.as_f64().expect("number");
    assert_eq!(fit.redundancy as f64, num(&r["r"]), "redundancy");
    close(
        fit.effective_redundancy,
        num(&r["reff"]),
        1e-9,
        1e-9,
        "effective redundancy",
    );
    for a in 0..D {
        close(
            est.centroid[a],
            num(&r["xbar"][a]),
            1e-14,
            0.0,
            &format!("x̄[{a}]"),
        );
    }
    let t = est.translation.expect("t");
    for i in 0..D {
        for j in 0..D {
            close(
                est.gradient[(i, j)],
                num(&r["G"][i][j]),
                1e-8,
                1e-14,
                &format!("G[{i}][{j}]"),
            );
        }
        close(t[i], num(&r["t"][i]), 1e-8, 1e-13, &format!("t[{i}]"));
    }
    close(
        fit.variance_factor.expect("redundant"),
        num(&r["s0"]),
        1e-8,
        0.0,
        "variance factor",
    );
    let mut off_block = 0.0_f64;
    for a in 0..D * D {
        for b in 0..D * D {
            let want = num(&r["cov"][a][b]);
            if a / D != b / D {
                off_block = off_block.max(want.abs());
            }
            close(
                fit.cov_gradient[(a, b)],
                want,
                1e-7,
                1e-22,
                &format!("cov[{a}][{b}]"),
            );
        }
    }
    // The correlations couple the rows of G: numpy's covariance is not block diagonal,
    // so a fit that treated the components separately would fail above.
    assert!(off_block > 1e-3 * num(&r["cov"][0][0]), "coupling expected");
    for (k, v) in fit.residuals.iter().enumerate() {
        for a in 0..D {
            close(
                v[a],
                num(&r["v"][k][a]),
                1e-6,
                1e-13,
                &format!("v[{k}][{a}]"),
            );
        }
    }
}

#[test]
fn coupled_fit_matches_numpy_2d() {
    check::<2>(101, 7, None);
    check::<2>(102, 30, None);
    check::<2>(103, 30, Some(25.0));
}

#[test]
fn coupled_fit_matches_numpy_3d() {
    check::<3>(201, 9, None);
    check::<3>(202, 40, None);
    check::<3>(203, 40, Some(30.0));
}
