//! Least-squares fits with full per-point covariances (the coupled, generalised solution).
//!
//! Sources:
//! - general least squares with a full weight matrix `P = C⁻¹`, `β̂ = (AᵀPA)⁻¹AᵀPu`,
//!   `Cov(β̂) = σ₀²(AᵀPA)⁻¹`, `σ̂₀² = vᵀPv/r` unbiased for `σ₀²`: Ghilani & Wolf,
//!   *Adjustment Computations* (general least-squares adjustment, reference variance);
//! - sandwich (Huber–White) covariance of a weighted estimator with a localising kernel:
//!   White (1980), *Econometrica* 48, "A heteroskedasticity-consistent covariance matrix
//!   estimator" (the form `N⁻¹BN⁻¹`);
//! - correlated normal noise as `L z` with `C = L Lᵀ` (Cholesky) and `z` standard normal:
//!   any multivariate statistics text; the sample variance of `M` draws has relative
//!   standard error `√(2/M)`;
//! - constant-strain element, linear shape functions: Zienkiewicz & Taylor, *The Finite
//!   Element Method*, vol. 1 (for an exactly determined fit the GLS covariance
//!   `(AᵀPA)⁻¹ = A⁻¹CA⁻ᵀ` equals linear propagation through the shape functions).

// Index loops over parallel arrays read most plainly in these checks.
#![allow(clippy::needless_range_loop)]

use kinema_core::CoreError;
use kinema_core::estimate::lsq::{DistanceWeight, FitOptions, fit_points};
use kinema_core::estimate::{GradientEstimate, RegionKind};
use kinema_core::kinematics::nalgebra::{DMatrix, SMatrix};
use kinema_core::uncertainty::element::element_gradient_covariance_from_points;
use kinema_core::uncertainty::element_gradient_covariance;
use kinema_core::{Point, PointSet};

/// SplitMix64 (Steele, Lea & Flood, OOPSLA 2014) with Box–Muller normals.
struct Rng {
    state: u64,
    spare: Option<f64>,
}

impl Rng {
    fn new(seed: u64) -> Self {
        Self {
            state: seed,
            spare: None,
        }
    }
    fn next_u64(&mut self) -> u64 {
        self.state = self.state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.state;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    /// Uniform in (0, 1].
    fn unit(&mut self) -> f64 {
        ((self.next_u64() >> 11) as f64 + 1.0) / (1u64 << 53) as f64
    }
    fn range(&mut self, a: f64, b: f64) -> f64 {
        a + (b - a) * self.unit()
    }
    fn normal(&mut self) -> f64 {
        if let Some(s) = self.spare.take() {
            return s;
        }
        let (u1, u2) = (self.unit(), self.unit());
        let r = (-2.0 * u1.ln()).sqrt();
        let a = std::f64::consts::TAU * u2;
        self.spare = Some(r * a.sin());
        r * a.cos()
    }
}

/// A random symmetric positive-definite covariance (m²) with standard deviations of
/// 0.5–3 mm and correlations up to ±0.8.
fn random_cov<const D: usize>(rng: &mut Rng) -> [[f64; D]; D] {
    let sd: Vec<f64> = (0..D).map(|_| rng.range(0.5e-3, 3e-3)).collect();
    // Correlation matrix from a random lower-triangular factor with unit-norm rows.
    let mut l = [[0.0; D]; D];
    for i in 0..D {
        let mut norm = 0.0;
        for j in 0..=i {
            l[i][j] = if i == j { 1.0 } else { rng.range(-1.0, 1.0) };
            norm += l[i][j] * l[i][j];
        }
        for j in 0..=i {
            l[i][j] /= norm.sqrt();
        }
    }
    let mut c = [[0.0; D]; D];
    for i in 0..D {
        for j in 0..D {
            let r: f64 = (0..D).map(|k| l[i][k] * l[j][k]).sum();
            c[i][j] = sd[i] * sd[j] * r;
        }
    }
    c
}

/// Lower Cholesky factor of a small SPD matrix.
fn cholesky<const D: usize>(c: &[[f64; D]; D]) -> [[f64; D]; D] {
    let m = DMatrix::<f64>::from_fn(D, D, |i, j| c[i][j]);
    let l = m
        .cholesky()
        .expect("test covariance is positive definite")
        .l();
    let mut out = [[0.0; D]; D];
    for i in 0..D {
        for j in 0..D {
            out[i][j] = l[(i, j)];
        }
    }
    out
}

fn random_x<const D: usize>(rng: &mut Rng, n: usize) -> Vec<[f64; D]> {
    (0..n)
        .map(|_| {
            let mut x = [0.0; D];
            for k in 0..D {
                // Survey-like coordinates with a large offset.
                x[k] = 5.0e5 + rng.range(-40.0, 40.0);
            }
            x
        })
        .collect()
}

fn fit<const D: usize>(set: &PointSet<D>, dw: DistanceWeight) -> GradientEstimate<D> {
    let members: Vec<usize> = (0..set.len()).collect();
    let centre = set.centroid();
    fit_points(
        set,
        &members,
        "g",
        RegionKind::Group,
        Some(centre),
        &FitOptions {
            distance_weight: dw,
            ..FitOptions::default()
        },
    )
    .expect("fit succeeds")
}

fn close(a: f64, b: f64, rel: f64, abs: f64) -> bool {
    (a - b).abs() <= rel * a.abs().max(b.abs()) + abs
}

/// A uniform field `u = t₀ + G₀(x − x₀)` is reproduced exactly, whatever the (correlated)
/// weights: the model contains it (Ghilani & Wolf: the residuals of an error-free
/// consistent system are zero).
fn uniform_case<const D: usize>(seed: u64, dw: DistanceWeight) {
    let mut rng = Rng::new(seed);
    let xs = random_x::<D>(&mut rng, 9);
    let mut g0 = [[0.0; D]; D];
    for row in g0.iter_mut() {
        for v in row.iter_mut() {
            *v = rng.range(-2e-4, 2e-4);
        }
    }
    let t0: Vec<f64> = (0..D).map(|_| rng.range(-0.01, 0.01)).collect();
    let pts: Vec<Point<D>> = xs
        .iter()
        .enumerate()
        .map(|(k, x)| {
            let mut u = [0.0; D];
            for i in 0..D {
                u[i] = t0[i];
                for j in 0..D {
                    u[i] += g0[i][j] * (x[j] - 5.0e5);
                }
            }
            let p = Point::new(format!("P{k}"), *x, u);
            // Every other point with only sigma: both forms in one coupled fit.
            if k % 2 == 0 {
                p.with_cov(random_cov::<D>(&mut rng))
            } else {
                p.with_sigma([1e-3; D])
            }
        })
        .collect();
    let set = PointSet::new(pts).expect("valid points");
    let est = fit(&set, dw);
    for i in 0..D {
        for j in 0..D {
            assert!(
                close(est.gradient[(i, j)], g0[i][j], 1e-9, 1e-14),
                "G[{i}][{j}] = {:e}, want {:e}",
                est.gradient[(i, j)],
                g0[i][j]
            );
        }
    }
    let fs = est.fit.expect("fit stats");
    for v in &fs.residuals {
        assert!(v.iter().all(|r| r.abs() < 1e-12), "residual {v:?}");
    }
    assert_eq!(fs.redundancy, 9 * D - D - D * D);
    // The covariance of vec(G) is full (not block diagonal) for correlated points.
    let off = (0..D).any(|j| fs.cov_gradient[(j, D + j)].abs() > 0.0);
    assert!(off, "cross-row covariance expected with correlated points");
}

#[test]
fn uniform_field_is_recovered_exactly_with_correlated_covariances() {
    uniform_case::<2>(11, DistanceWeight::None);
    uniform_case::<3>(12, DistanceWeight::None);
    uniform_case::<2>(13, DistanceWeight::Gaussian { scale_m: 30.0 });
    uniform_case::<3>(14, DistanceWeight::Gaussian { scale_m: 30.0 });
}

/// The same noisy points with `sigma`, and with `cov = diag(σ²)`: the coupled solution
/// must give what the per-component solution gives (both are the same estimator).
fn diagonal_equals_sigma<const D: usize>(seed: u64, dw: DistanceWeight) {
    let mut rng = Rng::new(seed);
    let xs = random_x::<D>(&mut rng, 14);
    let mut with_sigma = Vec::new();
    let mut with_cov = Vec::new();
    for (k, x) in xs.iter().enumerate() {
        let mut u = [0.0; D];
        let mut s = [0.0; D];
        let mut c = [[0.0; D]; D];
        for i in 0..D {
            s[i] = rng.range(0.5e-3, 3e-3);
            c[i][i] = s[i] * s[i];
            u[i] = 1e-4 * (x[(i + 1) % D] - 5.0e5) + s[i] * rng.normal();
        }
        with_sigma.push(Point::new(format!("P{k}"), *x, u).with_sigma(s));
        with_cov.push(Point::new(format!("P{k}"), *x, u).with_cov(c));
    }
    let a = fit(&PointSet::new(with_sigma).expect("valid"), dw);
    let b = fit(&PointSet::new(with_cov).expect("valid"), dw);
    let tol = 1e-12;
    assert_eq!(a.members, b.members);
    for k in 0..D {
        assert!(close(a.centroid[k], b.centroid[k], tol, 0.0), "centroid");
        let (ta, tb) = (a.translation.expect("t")[k], b.translation.expect("t")[k]);
        assert!(close(ta, tb, tol, 1e-15), "t[{k}] {ta:e} vs {tb:e}");
    }
    for i in 0..D {
        for j in 0..D {
            let (ga, gb) = (a.gradient[(i, j)], b.gradient[(i, j)]);
            assert!(close(ga, gb, tol, 1e-16), "G[{i}][{j}] {ga:e} vs {gb:e}");
        }
    }
    let (fa, fb) = (a.fit.expect("stats"), b.fit.expect("stats"));
    assert_eq!(fa.redundancy, fb.redundancy);
    assert_eq!(fa.exact, fb.exact);
    assert!(close(
        fa.effective_redundancy,
        fb.effective_redundancy,
        tol,
        0.0
    ));
    let (va, vb) = (
        fa.variance_factor.expect("σ̂₀²"),
        fb.variance_factor.expect("σ̂₀²"),
    );
    assert!(close(va, vb, tol, 0.0), "σ̂₀² {va} vs {vb}");
    for (ra, rb) in fa.residuals.iter().zip(&fb.residuals) {
        for k in 0..D {
            assert!(
                close(ra[k], rb[k], 1e-9, 1e-16),
                "residual {ra:?} vs {rb:?}"
            );
        }
    }
    let scale = fa.cov_gradient.amax();
    for r in 0..D * D {
        for c in 0..D * D {
            let (x, y) = (fa.cov_gradient[(r, c)], fb.cov_gradient[(r, c)]);
            assert!(
                close(x, y, tol, tol * scale),
                "cov[{r}][{c}] {x:e} vs {y:e}"
            );
        }
    }
}

#[test]
fn diagonal_full_covariance_equals_the_sigma_path() {
    diagonal_equals_sigma::<2>(21, DistanceWeight::None);
    diagonal_equals_sigma::<3>(22, DistanceWeight::None);
    diagonal_equals_sigma::<2>(23, DistanceWeight::Gaussian { scale_m: 25.0 });
    diagonal_equals_sigma::<3>(24, DistanceWeight::QuadraticDecay { radius_m: 45.0 });
}

/// Monte Carlo: noise drawn from each point's `C_k` (as `L_k z`), `M` trials on fixed
/// geometry. The sample covariance of `vec(G)` must match the first-order covariance
/// `σ₀²·(…)` the fit reports (divided by its σ̂₀², i.e. with σ₀² = 1), `G` must be
/// unbiased, and the mean of σ̂₀² must be 1 (the reference variance is unbiased,
/// Ghilani & Wolf). A fit that ignored the correlations would miss the covariance.
fn monte_carlo<const D: usize>(seed: u64, dw: DistanceWeight) {
    const M: usize = 4000;
    let mut rng = Rng::new(seed);
    let n = 12;
    let xs = random_x::<D>(&mut rng, n);
    let covs: Vec<[[f64; D]; D]> = (0..n).map(|_| random_cov::<D>(&mut rng)).collect();
    let chol: Vec<[[f64; D]; D]> = covs.iter().map(cholesky).collect();
    let mut g0 = [[0.0; D]; D];
    for i in 0..D {
        for j in 0..D {
            g0[i][j] = if i == j { 2e-4 } else { -5e-5 };
        }
    }
    let nn = D * D;
    let mut sum = vec![0.0; nn];
    let mut sum2 = DMatrix::<f64>::zeros(nn, nn);
    let mut s0_sum = 0.0;
    let mut theory: Option<DMatrix<f64>> = None;
    for _ in 0..M {
        let pts: Vec<Point<D>> = (0..n)
            .map(|k| {
                let z: Vec<f64> = (0..D).map(|_| rng.normal()).collect();
                let mut u = [0.0; D];
                for i in 0..D {
                    for j in 0..D {
                        u[i] += g0[i][j] * (xs[k][j] - 5.0e5) + chol[k][i][j] * z[j];
                    }
                }
                Point::new(format!("P{k}"), xs[k], u).with_cov(covs[k])
            })
            .collect();
        let est = fit(&PointSet::new(pts).expect("valid"), dw);
        let fs = est.fit.expect("stats");
        let s0 = fs.variance_factor.expect("σ̂₀²");
        s0_sum += s0;
        // The first-order covariance does not depend on the noise: same every trial.
        let t = fs.cov_gradient.clone() / s0;
        if let Some(prev) = &theory {
            assert!((prev - &t).amax() <= 1e-9 * prev.amax(), "theory changes");
        } else {
            theory = Some(t);
        }
        let g: Vec<f64> = (0..nn).map(|a| est.gradient[(a / D, a % D)]).collect();
        for a in 0..nn {
            sum[a] += g[a];
            for b in 0..nn {
                sum2[(a, b)] += g[a] * g[b];
            }
        }
    }
    let theory = theory.expect("at least one trial");
    let mf = M as f64;
    let mean: Vec<f64> = sum.iter().map(|s| s / mf).collect();
    for a in 0..nn {
        let sd = theory[(a, a)].sqrt();
        // Mean within 4 standard errors.
        assert!(
            (mean[a] - g0[a / D][a % D]).abs() < 4.0 * sd / mf.sqrt(),
            "vec G[{a}] mean {:e}, want {:e} (sd {sd:e})",
            mean[a],
            g0[a / D][a % D]
        );
        for b in 0..nn {
            let sample = (sum2[(a, b)] - mf * mean[a] * mean[b]) / (mf - 1.0);
            let want = theory[(a, b)];
            let unit = (theory[(a, a)] * theory[(b, b)]).sqrt();
            // Relative standard error of a sample (co)variance ≈ √(2/M) ≈ 2.2 %: 4.5 of them.
            assert!(
                (sample - want).abs() < 0.1 * unit,
                "cov(vec G)[{a}][{b}]: Monte Carlo {sample:e}, first order {want:e}"
            );
        }
    }
    let mean_s0 = s0_sum / mf;
    // sd of σ̂₀² is about √(2/r_eff); of its mean over M trials √(2/(r_eff·M)) ≤ 0.006.
    assert!(
        (mean_s0 - 1.0).abs() < 0.03,
        "mean σ̂₀² = {mean_s0}, want 1 ({D}D, {dw:?})"
    );
}

#[test]
fn monte_carlo_with_correlated_noise_confirms_covariance_and_variance_factor() {
    monte_carlo::<2>(31, DistanceWeight::None);
    monte_carlo::<3>(32, DistanceWeight::None);
    monte_carlo::<2>(33, DistanceWeight::Gaussian { scale_m: 30.0 });
}

/// For `D+1` points the fit is exact and its covariance (σ₀² = 1) is `A⁻¹CA⁻ᵀ`, the
/// linear propagation through the shape functions of the element on the same vertices.
#[test]
fn exact_fit_covariance_equals_element_propagation() {
    let mut rng = Rng::new(41);
    let xs = [[0.0, 0.0], [10.0, 1.0], [3.0, 8.0]];
    let pts: Vec<Point<2>> = xs
        .iter()
        .enumerate()
        .map(|(k, x)| Point::new(format!("V{k}"), *x, [1e-3, -2e-3]).with_cov(random_cov(&mut rng)))
        .collect();
    let set = PointSet::new(pts).expect("valid");
    let est = fit(&set, DistanceWeight::None);
    let fs = est.fit.expect("stats");
    assert!(fs.exact);
    let prop = element_gradient_covariance_from_points(&set, &[0, 1, 2])
        .expect("element covariance")
        .expect("every vertex states a covariance");
    // Same as the explicit form with the vertex covariances.
    let vc: Vec<SMatrix<f64, 2, 2>> = set
        .points()
        .iter()
        .map(|p| p.covariance().expect("cov"))
        .collect();
    let direct = element_gradient_covariance(&xs, &vc).expect("direct");
    let scale = prop.amax();
    assert!((&prop - &direct).amax() <= 1e-15 * scale);
    assert!(
        (&prop - &fs.cov_gradient).amax() <= 1e-9 * scale,
        "element {prop} vs exact fit {}",
        fs.cov_gradient
    );
    // No precision on one vertex: nothing to propagate.
    let mut bare = set.into_inner();
    bare[1].cov = None;
    let bare = PointSet::new(bare).expect("valid");
    assert_eq!(
        element_gradient_covariance_from_points(&bare, &[0, 1, 2]),
        Ok(None)
    );
    assert!(matches!(
        element_gradient_covariance_from_points(&bare, &[0, 1]),
        Err(CoreError::TooFewPoints { .. })
    ));
    assert!(matches!(
        element_gradient_covariance_from_points(&bare, &[0, 1, 1]),
        Err(CoreError::InvalidParameter {
            name: "members",
            ..
        })
    ));
}

#[test]
fn covariance_accessor_gives_both_forms() {
    let p = Point::new("A", [0.0, 0.0], [0.0, 0.0]).with_sigma([2e-3, 3e-3]);
    let c = p.covariance().expect("from sigma");
    assert_eq!(c, SMatrix::<f64, 2, 2>::new(4e-6, 0.0, 0.0, 9e-6));
    let q = Point::new("B", [0.0, 0.0], [0.0, 0.0]).with_cov([[4e-6, 1e-6], [1e-6, 9e-6]]);
    // Row-major: cov[0][1] is entry (0, 1).
    assert_eq!(
        q.covariance().expect("full"),
        SMatrix::<f64, 2, 2>::new(4e-6, 1e-6, 1e-6, 9e-6)
    );
    assert_eq!(Point::new("C", [0.0; 3], [0.0; 3]).covariance(), None);
}

#[test]
fn bad_covariances_are_typed_errors_naming_the_point() {
    let base = || Point::new("Q7", [1.0, 2.0], [0.0, 0.0]);
    let ok = Point::new("Q1", [0.0, 0.0], [0.0, 0.0]);
    let check = |p: Point<2>| PointSet::new(vec![ok.clone(), p]);
    // Not symmetric.
    match check(base().with_cov([[1e-6, 2e-7], [3e-7, 1e-6]])) {
        Err(CoreError::InvalidCovariance { name, reason }) => {
            assert!(name.contains("Q7"), "{name}");
            assert!(reason.contains("not symmetric"), "{reason}");
        }
        other => panic!("expected InvalidCovariance, got {other:?}"),
    }
    // Indefinite (eigenvalues 3e-6 and −1e-6).
    match check(base().with_cov([[1e-6, 2e-6], [2e-6, 1e-6]])) {
        Err(CoreError::InvalidCovariance { name, .. }) => assert!(name.contains("Q7")),
        other => panic!("expected InvalidCovariance, got {other:?}"),
    }
    // Positive semi-definite but singular (perfectly correlated).
    match check(base().with_cov([[1e-6, 1e-6], [1e-6, 1e-6]])) {
        Err(CoreError::SingularCovariance { name, .. }) => assert!(name.contains("Q7")),
        other => panic!("expected SingularCovariance, got {other:?}"),
    }
    // Zero matrix.
    assert!(matches!(
        check(base().with_cov([[0.0; 2]; 2])),
        Err(CoreError::SingularCovariance { .. })
    ));
    // NaN.
    assert_eq!(
        check(base().with_cov([[1e-6, f64::NAN], [f64::NAN, 1e-6]])),
        Err(CoreError::NonFinite {
            id: "Q7".into(),
            field: "cov"
        })
    );
    // Both sigma and cov.
    match check(
        base()
            .with_sigma([1e-3, 1e-3])
            .with_cov([[1e-6, 0.0], [0.0, 1e-6]]),
    ) {
        Err(CoreError::InvalidParameter {
            name: "cov",
            reason,
        }) => {
            assert!(reason.contains("Q7"), "{reason}")
        }
        other => panic!("expected InvalidParameter(cov), got {other:?}"),
    }
    // A valid correlated covariance passes.
    assert!(check(base().with_cov([[1e-6, 5e-7], [5e-7, 1e-6]])).is_ok());
}

#[test]
fn a_member_without_precision_beside_a_covariance_is_an_error() {
    let mut pts: Vec<Point<2>> = [[0.0, 0.0], [5.0, 0.0], [0.0, 5.0], [5.0, 5.0]]
        .iter()
        .enumerate()
        .map(|(k, x)| {
            Point::new(format!("P{k}"), *x, [0.0, 0.0]).with_cov([[1e-6, 2e-7], [2e-7, 1e-6]])
        })
        .collect();
    pts[2].cov = None;
    let set = PointSet::new(pts).expect("valid");
    let r = fit_points(
        &set,
        &[0, 1, 2, 3],
        "g",
        RegionKind::Group,
        None,
        &FitOptions::default(),
    );
    match r {
        Err(CoreError::InvalidParameter {
            name: "sigma",
            reason,
        }) => assert!(reason.contains("P2"), "{reason}"),
        other => panic!("expected InvalidParameter(sigma), got {other:?}"),
    }
    // With precision weighting off the same set fits with unit weights.
    let off = FitOptions {
        use_precision: false,
        ..FitOptions::default()
    };
    assert!(fit_points(&set, &[0, 1, 2, 3], "g", RegionKind::Group, None, &off).is_ok());
}
