//! Cross-check of the weighted least-squares gradient fit against numpy.
//!
//! Source: `numpy.linalg.lstsq` on the weighted design matrix `√W·A`, `A = [1, x − c]`,
//! `W = K·P` (kernel times precision weights `1/σ²`). Without a kernel the covariance is
//! the textbook `(AᵀPA)⁻¹·σ̂₀²`, `σ̂₀² = vᵀPv / r` (Ghilani & Wolf, *Adjustment
//! Computations*); with a Gaussian kernel it is the sandwich (Huber–White) covariance of
//! a weighted estimator, `σ̂₀²·N⁻¹(AᵀK²PA)N⁻¹`, `N = AᵀWA`, and `σ̂₀² = vᵀPv / r_eff`
//! with `r_eff = tr((I−H)ᵀP(I−H)P⁻¹)`, `H = A N⁻¹ AᵀW`, formed here with dense `n×n`
//! matrices (independently of kinema's `O(n)` trace formula).
//!
//! numpy centres at the plain mean `c`; the weighted centroid `x̄ = Σw̄x/Σw̄`
//! (`w̄` = kernel weight times the mean of the per-axis `1/σ²`) is computed in numpy too
//! and compared with kinema's. `G` and its covariance do not depend on the centre, and
//! `t` is compared after moving numpy's intercept to numpy's centroid.

use kinema_core::estimate::RegionKind;
use kinema_core::estimate::lsq::{DistanceWeight, FitOptions, fit_points};
use kinema_core::{Point, PointSet};
use serde_json::{Value, json};

const PY: &str = r#"
import json, sys
import numpy as np
d = json.load(sys.stdin)
X = np.array(d["x"]); U = np.array(d["u"]); S = np.array(d["sigma"])
scale = d["gauss_scale"]
if scale is None:
    K = np.ones(len(X))
else:
    ctr = np.array(d["centre"])
    K = np.exp(-np.sum((X - ctr) ** 2, axis=1) / (2.0 * scale ** 2))
    K = K / K.max()
keep = K >= 1e-12
X, U, S, K = X[keep], U[keep], S[keep], K[keep]
n, D = X.shape
P_all = 1.0 / S ** 2
wbar = K * P_all.mean(axis=1)
xw = (wbar[:, None] * X).sum(axis=0) / wbar.sum()
c = X.mean(axis=0)
A = np.hstack([np.ones((n, 1)), X - c])
G = np.zeros((D, D)); t = np.zeros(D); V = np.zeros((n, D))
blocks = []; vtpv = 0.0; reff = 0.0
for i in range(D):
    p = P_all[:, i]
    w = K * p
    sw = np.sqrt(w)
    beta = np.linalg.lstsq(A * sw[:, None], U[:, i] * sw, rcond=None)[0]
    v = U[:, i] - A @ beta
    V[:, i] = v
    vtpv += float(np.sum(p * v * v))
    G[i] = beta[1:]
    t[i] = beta[0] + beta[1:] @ (xw - c)
    Ninv = np.linalg.inv(A.T @ (A * w[:, None]))
    B = A.T @ (A * (K * K * p)[:, None])
    blocks.append((Ninv @ B @ Ninv)[1:, 1:])
    H = A @ Ninv @ (A.T * w[None, :])
    IH = np.eye(n) - H
    reff += float(np.trace(IH.T @ np.diag(p) @ IH @ np.diag(1.0 / p)))
r = n * D - D * (D + 1)
s0 = vtpv / reff
cov = np.zeros((D * D, D * D))
for i in range(D):
    cov[i * D:(i + 1) * D, i * D:(i + 1) * D] = blocks[i] * s0
print(json.dumps({"G": G.tolist(), "t": t.tolist(), "s0": s0, "cov": cov.tolist(),
                  "v": V.tolist(), "xbar": xw.tolist(), "r": r, "reff": reff,
                  "kept": np.nonzero(keep)[0].tolist()}))
"#;

/// The numpy runner shared by the reference tests.
fn numpy(input: &Value) -> Value {
    kinema_tests::python_json(PY, input)
}

fn close(got: f64, want: f64, rel: f64, abs: f64, what: &str) {
    assert!(
        (got - want).abs() <= rel * want.abs() + abs,
        "{what}: kinema {got:e}, numpy {want:e}"
    );
}

/// Fit `n` random points (optionally Gaussian-weighted about `centre`, scale `gauss` m)
/// and compare everything with numpy. Returns the number of points used.
fn check<const D: usize>(seed: u64, n: usize, gauss: Option<f64>) -> usize {
    let mut rng = kinema_tests::SplitMix64(seed);
    let offset = [2.5e5, 6.1e6, 310.0];
    let g = [
        [3e-4, -1e-4, 2e-4],
        [5e-5, -2e-4, 1e-4],
        [-3e-4, 1e-4, 4e-4],
    ];
    let pts: Vec<Point<D>> = (0..n)
        .map(|k| {
            let mut x = [0.0; D];
            let mut u = [0.0; D];
            let mut s = [0.0; D];
            for a in 0..D {
                x[a] = offset[a] + rng.range(-40.0, 40.0);
            }
            for a in 0..D {
                s[a] = rng.range(5e-4, 5e-3);
                u[a] = 0.01 * (a as f64 + 1.0) + rng.range(-3.0, 3.0) * s[a];
                for b in 0..D {
                    u[a] += g[a][b] * (x[b] - offset[b]);
                }
            }
            Point::new(format!("R{k}"), x, u).with_sigma(s)
        })
        .collect();
    let set = PointSet::new(pts).expect("valid points");
    let members: Vec<usize> = (0..n).collect();
    let mut centre = [0.0; D];
    for a in 0..D {
        centre[a] = offset[a] + 5.0;
    }
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
    let fit = est.fit.as_ref().expect("stats");
    let input = json!({
        "x": set.points().iter().map(|p| p.x.to_vec()).collect::<Vec<_>>(),
        "u": set.points().iter().map(|p| p.u.to_vec()).collect::<Vec<_>>(),
        "sigma": set.points().iter().map(|p| p.sigma.expect("sigma").to_vec()).collect::<Vec<_>>(),
        "gauss_scale": gauss,
        "centre": centre.to_vec(),
    });
    let r = numpy(&input);
    let num = |v: &Value| v.as_f64().expect("number");
    let kept: Vec<usize> = r["kept"]
        .as_array()
        .expect("kept")
        .iter()
        .map(|v| v.as_u64().expect("index") as usize)
        .collect();
    assert_eq!(est.members, kept, "points used");
    assert_eq!(fit.redundancy as f64, num(&r["r"]), "redundancy");
    close(
        fit.effective_redundancy,
        num(&r["reff"]),
        1e-9,
        1e-9,
        "effective redundancy",
    );
    if gauss.is_none() {
        // Without a kernel r_eff is the integer redundancy exactly.
        assert_eq!(fit.effective_redundancy, fit.redundancy as f64);
    }
    for a in 0..D {
        // Survey offsets of 6·10⁶ m: numpy sums the raw coordinates, so allow a few
        // units in the last place (1e-14 relative, 6e-8 m).
        close(
            est.centroid[a],
            num(&r["xbar"][a]),
            1e-14,
            0.0,
            &format!("x̄[{a}]"),
        );
    }
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
        let t = est.translation.expect("t");
        close(t[i], num(&r["t"][i]), 1e-8, 1e-13, &format!("t[{i}]"));
    }
    close(
        fit.variance_factor.expect("redundant"),
        num(&r["s0"]),
        1e-8,
        0.0,
        "variance factor",
    );
    for a in 0..D * D {
        for b in 0..D * D {
            close(
                fit.cov_gradient[(a, b)],
                num(&r["cov"][a][b]),
                1e-7,
                1e-22,
                &format!("cov[{a}][{b}]"),
            );
        }
    }
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
    est.members.len()
}

#[test]
fn weighted_fit_matches_numpy_lstsq_2d() {
    assert_eq!(check::<2>(11, 9, None), 9);
    assert_eq!(check::<2>(12, 25, None), 25);
}

#[test]
fn weighted_fit_matches_numpy_lstsq_3d() {
    assert_eq!(check::<3>(13, 8, None), 8);
    assert_eq!(check::<3>(14, 30, None), 30);
}

#[test]
fn gaussian_weighted_fit_matches_numpy_sandwich() {
    // Scale 15 m over a 80 m cloud: kernel weights from 1 down to ~1e-10, all kept.
    assert_eq!(check::<2>(21, 30, Some(15.0)), 30);
    assert_eq!(check::<3>(22, 40, Some(15.0)), 40);
    // Scale 3 m: most points fall below 1e-12 of the largest weight and drop out.
    let used = check::<2>(23, 200, Some(3.0));
    assert!((4..100).contains(&used), "{used} of 200 points used");
}
