//! Least-squares, neighbourhood, whole-network and grid estimators of the displacement
//! gradient, checked against closed-form fields and textbook results.
#![allow(clippy::needless_range_loop)] // index loops mirror the tensor formulas

mod fit_support;

use fit_support::{Rng, max_gradient_error, uniform_set, uniform_u};
use kinema_core::estimate::grid::{GridField2, grid_gradients};
use kinema_core::estimate::lsq::{DistanceWeight, FitOptions, Group, fit_groups, fit_points};
use kinema_core::estimate::neighbourhood::{
    Centres, MAX_GRID_NODES, Selection, fit_neighbourhoods, fit_neighbourhoods_with,
};
use kinema_core::estimate::network::{RigidRotation, fit_network};
use kinema_core::estimate::{GradientEstimate, RegionKind};
use kinema_core::{CoreError, Point, PointSet};
use proptest::prelude::*;

/// Survey-size coordinate offset (easting/northing of a projected grid), metres.
const OFFSET: f64 = 1.0e5;

fn weightings() -> Vec<DistanceWeight> {
    vec![
        DistanceWeight::None,
        DistanceWeight::Gaussian { scale_m: 25.0 },
        DistanceWeight::QuadraticDecay { radius_m: 500.0 },
    ]
}

fn opts(dw: DistanceWeight) -> FitOptions {
    FitOptions {
        distance_weight: dw,
        ..FitOptions::default()
    }
}

fn cloud<const D: usize>(rng: &mut Rng, n: usize, half: f64, base: [f64; D]) -> Vec<[f64; D]> {
    (0..n)
        .map(|_| {
            let mut x = base;
            for v in x.iter_mut() {
                *v += rng.range(-half, half);
            }
            x
        })
        .collect()
}

fn sigmas<const D: usize>(rng: &mut Rng, n: usize) -> Vec<[f64; D]> {
    (0..n)
        .map(|_| {
            let mut s = [0.0; D];
            for v in s.iter_mut() {
                *v = rng.range(1e-4, 1e-2);
            }
            s
        })
        .collect()
}

fn random_g<const D: usize>(rng: &mut Rng, scale: f64) -> [[f64; D]; D] {
    let mut g = [[0.0; D]; D];
    for row in g.iter_mut() {
        for v in row.iter_mut() {
            *v = rng.range(-scale, scale);
        }
    }
    g
}

fn random_t<const D: usize>(rng: &mut Rng) -> [f64; D] {
    let mut t = [0.0; D];
    for v in t.iter_mut() {
        *v = rng.range(-0.05, 0.05);
    }
    t
}

/// Check a fitted estimate against the uniform field `u = t + G(x − x_ref)`.
fn assert_uniform<const D: usize>(
    est: &GradientEstimate<D>,
    g: &[[f64; D]; D],
    t: &[f64; D],
    x_ref: &[f64; D],
) {
    let eg = max_gradient_error(&est.gradient, g);
    assert!(eg < 1e-11, "{}: gradient error {eg:e}", est.label);
    // t is the field at the centroid.
    let want_t = uniform_u(g, t, x_ref, &est.centroid);
    let got_t = est.translation.expect("fits give t");
    for k in 0..D {
        assert!(
            (got_t[k] - want_t[k]).abs() < 1e-10,
            "{}: t[{k}] {} vs {}",
            est.label,
            got_t[k],
            want_t[k]
        );
    }
    if let Some(fit) = &est.fit {
        assert_eq!(fit.residuals.len(), est.members.len());
        for v in &fit.residuals {
            for c in v {
                assert!(c.abs() < 1e-10, "{}: residual {c:e}", est.label);
            }
        }
    }
}

// Law checked by every proptest below: an affine displacement field u = t + G·x is
// reproduced exactly by any consistent first-order estimator (uniform-strain patch test;
// e.g. Zienkiewicz & Taylor, The Finite Element Method, vol. 1, "patch test").

fn lsq_uniform_case<const D: usize>(seed: u64, n: usize, with_sigma: bool) {
    let mut rng = Rng::new(seed);
    let base = [OFFSET + rng.range(0.0, 1e4); D];
    let xs = cloud(&mut rng, n, 50.0, base);
    let sg = sigmas::<D>(&mut rng, n);
    let g = random_g::<D>(&mut rng, 1e-2);
    let t = random_t::<D>(&mut rng);
    let set = uniform_set(&xs, with_sigma.then_some(&sg[..]), &g, &t, &base);
    let members: Vec<usize> = (0..n).collect();
    for (dw, use_precision) in weightings()
        .into_iter()
        .flat_map(|d| [(d, true), (d, false)])
    {
        let o = FitOptions {
            use_precision,
            ..opts(dw)
        };
        let est = fit_points(&set, &members, "G1", RegionKind::Group, None, &o)
            .expect("random cloud fits");
        assert_eq!(est.kind, RegionKind::Group);
        assert_eq!(est.members.len(), n);
        assert_uniform(&est, &g, &t, &base);
        let fit = est.fit.as_ref().expect("stats");
        assert_eq!(fit.redundancy, n * D - D * (D + 1));
        assert_eq!(fit.exact, n == D + 1);
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]

    #[test]
    fn lsq_recovers_uniform_field_2d(seed in any::<u64>(), n in 3usize..30, s in any::<bool>()) {
        lsq_uniform_case::<2>(seed, n, s);
    }

    #[test]
    fn lsq_recovers_uniform_field_3d(seed in any::<u64>(), n in 4usize..30, s in any::<bool>()) {
        lsq_uniform_case::<3>(seed, n, s);
    }

    #[test]
    fn neighbourhoods_recover_uniform_field_2d(seed in any::<u64>(), n in 20usize..60, k in 3usize..12) {
        neighbourhood_case::<2>(seed, n, k);
    }

    #[test]
    fn neighbourhoods_recover_uniform_field_3d(seed in any::<u64>(), n in 20usize..60, k in 4usize..12) {
        neighbourhood_case::<3>(seed, n, k);
    }

    #[test]
    fn network_recovers_uniform_field_and_splits_it(seed in any::<u64>(), n in 4usize..40) {
        network_case::<2>(seed, n);
        network_case::<3>(seed, n + 1);
    }

    #[test]
    fn grid_recovers_uniform_field_with_missing_cells(
        seed in any::<u64>(), nx in 3usize..12, ny in 3usize..12,
        missing in prop_oneof![Just(0.0), 0.0f64..0.3],
    ) {
        grid_uniform_case(seed, nx, ny, missing);
    }
}

fn neighbourhood_case<const D: usize>(seed: u64, n: usize, k: usize) {
    let mut rng = Rng::new(seed);
    let base = [OFFSET; D];
    let xs = cloud(&mut rng, n, 50.0, base);
    let sg = sigmas::<D>(&mut rng, n);
    let g = random_g::<D>(&mut rng, 1e-2);
    let t = random_t::<D>(&mut rng);
    let set = uniform_set(&xs, Some(&sg), &g, &t, &base);
    let mut grid_origin = base;
    for v in grid_origin.iter_mut() {
        *v -= 40.0;
    }
    let centres = [
        Centres::AtPoints,
        Centres::Grid {
            origin: grid_origin,
            spacing: [20.0; D],
            counts: [5; D],
        },
    ];
    let sels = [
        Selection::Nearest { k },
        Selection::Radius {
            radius_m: 40.0,
            min_points: D + 1,
        },
    ];
    for c in &centres {
        for sel in &sels {
            for dw in weightings() {
                let (good, bad) = fit_neighbourhoods(&set, c, sel, &opts(dw)).expect("valid run");
                let expected = match c {
                    Centres::AtPoints => n,
                    Centres::Grid { .. } => 5usize.pow(D as u32),
                };
                assert_eq!(good.len() + bad.len(), expected);
                match sel {
                    // k ≥ D+2 nearest points of a random cloud are in general position:
                    // every neighbourhood fits. With k = D+1 four (three) random points
                    // are nearly coplanar (collinear) with probability ~1e-5, observed
                    // over 10⁵ neighbourhoods; those few must be reported as exactly that.
                    Selection::Nearest { k } if *k >= D + 2 => assert_eq!(
                        good.len(),
                        expected,
                        "{c:?} {sel:?} {dw:?}: {:?}",
                        bad.first()
                    ),
                    Selection::Nearest { .. } => {
                        assert!(bad.len() * 50 <= expected, "{c:?} {sel:?}: {bad:?}");
                        for r in &bad {
                            assert!(
                                r.reason.contains("coplanar") || r.reason.contains("collinear"),
                                "{}",
                                r.reason
                            );
                        }
                    }
                    // Radius 40 m in a 100 m cloud of 20–60 points: over 3000 runs each
                    // the smallest accepted fraction was 0.8 (2D) and 0.2 (3D; corners
                    // hold few points); the floors leave a margin.
                    Selection::Radius { .. } => {
                        let floor = if D == 2 { 0.6 } else { 0.1 };
                        assert!(
                            good.len() as f64 >= floor * expected as f64,
                            "{c:?} {sel:?} {dw:?}: {} of {expected} accepted",
                            good.len()
                        );
                    }
                }
                for e in &good {
                    assert_eq!(e.kind, RegionKind::Neighbourhood);
                    assert_uniform(e, &g, &t, &base);
                }
                for r in &bad {
                    assert!(!r.reason.is_empty());
                }
            }
        }
    }
}

fn network_case<const D: usize>(seed: u64, n: usize) {
    let mut rng = Rng::new(seed ^ 0x5eed);
    let base = [OFFSET; D];
    let xs = cloud(&mut rng, n, 200.0, base);
    let g = random_g::<D>(&mut rng, 1e-3);
    let t = random_t::<D>(&mut rng);
    let set = uniform_set(&xs, None, &g, &t, &base);
    let fit = fit_network(&set, &FitOptions::default()).expect("network fits");
    assert_eq!(fit.estimate.kind, RegionKind::Network);
    assert_eq!(fit.estimate.label, "network");
    assert_eq!(fit.estimate.members.len(), n);
    assert_uniform(&fit.estimate, &g, &t, &base);
    // Convention (DESIGN.md): ε = (G+Gᵀ)/2, W = (G−Gᵀ)/2; 2D ω = (G10−G01)/2;
    // 3D w = curl(u)/2.
    for i in 0..D {
        for j in 0..D {
            assert!((fit.strain[(i, j)] - (g[i][j] + g[j][i]) / 2.0).abs() < 1e-12);
            assert!((fit.rotation_tensor[(i, j)] - (g[i][j] - g[j][i]) / 2.0).abs() < 1e-12);
        }
    }
    match fit.rotation {
        RigidRotation::Plane { omega_rad } => {
            assert_eq!(D, 2);
            assert!((omega_rad - (g[1][0] - g[0][1]) / 2.0).abs() < 1e-12);
        }
        RigidRotation::Space { w_rad } => {
            assert_eq!(D, 3);
            let want = [
                (g[2][1] - g[1][2]) / 2.0,
                (g[0][2] - g[2][0]) / 2.0,
                (g[1][0] - g[0][1]) / 2.0,
            ];
            for k in 0..3 {
                assert!((w_rad[k] - want[k]).abs() < 1e-12);
            }
        }
    }
    let want_t = uniform_u(&g, &t, &base, &fit.estimate.centroid);
    for k in 0..D {
        assert!((fit.translation[k] - want_t[k]).abs() < 1e-10);
    }
}

fn grid_uniform_case(seed: u64, nx: usize, ny: usize, missing: f64) {
    let mut rng = Rng::new(seed);
    let g = random_g::<2>(&mut rng, 1e-2);
    let t = random_t::<2>(&mut rng);
    let origin = [
        OFFSET + rng.range(0.0, 1e3),
        2.0 * OFFSET + rng.range(0.0, 1e3),
    ];
    let spacing = [rng.range(0.01, 2.0), rng.range(0.01, 2.0)];
    let mut u = Vec::with_capacity(nx * ny);
    for j in 0..ny {
        for i in 0..nx {
            let x = [
                origin[0] + i as f64 * spacing[0],
                origin[1] + j as f64 * spacing[1],
            ];
            u.push((rng.uniform() >= missing).then(|| uniform_u(&g, &t, &origin, &x)));
        }
    }
    let present = u.iter().filter(|c| c.is_some()).count();
    let field = GridField2 {
        origin,
        spacing,
        nx,
        ny,
        u,
    };
    let (good, bad) = grid_gradients(&field).expect("valid grid");
    assert_eq!(good.len() + bad.len(), present);
    for e in &good {
        assert_eq!(e.kind, RegionKind::GridNode);
        let eg = max_gradient_error(&e.gradient, &g);
        // Rounding of u (≈ 1e-16·|u|) divided by the spacing.
        assert!(
            eg < 1e-11 / spacing[0].min(spacing[1]),
            "{}: {eg:e}",
            e.label
        );
    }
    if missing == 0.0 {
        assert!(
            bad.is_empty(),
            "a full grid of ≥ 3×3 cells has every stencil"
        );
    }
}

#[test]
fn rigid_translation_gives_zero_gradient() {
    // A rigid translation has ∂u/∂x = 0 (definition of the displacement gradient).
    let mut rng = Rng::new(7);
    let base = [OFFSET, OFFSET];
    let xs = cloud(&mut rng, 12, 30.0, base);
    let zero = [[0.0; 2]; 2];
    let t = [0.012, -0.034];
    let set = uniform_set(&xs, None, &zero, &t, &base);
    let all: Vec<usize> = (0..12).collect();
    let est = fit_points(
        &set,
        &all,
        "T",
        RegionKind::Group,
        None,
        &FitOptions::default(),
    )
    .expect("fits");
    assert!(max_gradient_error(&est.gradient, &zero) < 1e-14);
    let net = fit_network(&set, &FitOptions::default()).expect("fits");
    assert!(max_gradient_error(&net.strain, &zero) < 1e-14);
    assert_eq!(
        net.translation.map(|v| (v * 1e9).round()),
        t.map(|v| (v * 1e9).round())
    );
    let (good, _) = fit_neighbourhoods(
        &set,
        &Centres::AtPoints,
        &Selection::Nearest { k: 5 },
        &FitOptions::default(),
    )
    .expect("run");
    assert_eq!(good.len(), 12);
    for e in good {
        assert!(max_gradient_error(&e.gradient, &zero) < 1e-14);
    }
}

#[test]
fn variance_factor_averages_one_with_true_weights() {
    // Source: Ghilani & Wolf, Adjustment Computations (reference variance): with weights
    // 1/σ² from the true standard deviations, E[vᵀPv] = r·σ₀² with σ₀² = 1, and the
    // covariance of the parameters is (AᵀPA)⁻¹σ₀².
    let mut rng = Rng::new(20260101);
    let base = [OFFSET, OFFSET];
    let n = 10;
    let xs = cloud(&mut rng, n, 20.0, base);
    let sg = sigmas::<2>(&mut rng, n);
    let g = [[2e-4, -1e-4], [3e-4, 5e-5]];
    let t = [0.01, 0.02];
    let all: Vec<usize> = (0..n).collect();
    let trials = 4000;
    let mut sum_s0 = 0.0;
    let mut g00 = Vec::with_capacity(trials);
    let mut g11 = Vec::with_capacity(trials);
    let mut apriori = None;
    for _ in 0..trials {
        let pts = xs
            .iter()
            .enumerate()
            .map(|(k, x)| {
                let mut u = uniform_u(&g, &t, &base, x);
                for c in 0..2 {
                    u[c] += sg[k][c] * rng.normal();
                }
                Point::new(format!("N{k}"), *x, u).with_sigma(sg[k])
            })
            .collect();
        let set = PointSet::new(pts).expect("valid");
        let est = fit_points(
            &set,
            &all,
            "noisy",
            RegionKind::Group,
            None,
            &FitOptions::default(),
        )
        .expect("fits");
        let fit = est.fit.expect("stats");
        assert_eq!(fit.redundancy, 14);
        let s0 = fit.variance_factor.expect("redundant");
        sum_s0 += s0;
        g00.push(est.gradient[(0, 0)]);
        g11.push(est.gradient[(1, 1)]);
        // Covariance divided by σ̂₀² is the a-priori (AᵀPA)⁻¹, the same in every trial.
        apriori.get_or_insert((fit.cov_gradient[(0, 0)] / s0, fit.cov_gradient[(3, 3)] / s0));
    }
    let mean = sum_s0 / trials as f64;
    // Var(σ̂₀²) = 2/r for normal errors, so the mean of 4000 has σ ≈ 0.006.
    assert!((mean - 1.0).abs() < 0.03, "mean variance factor {mean}");
    let var = |v: &[f64]| {
        let m = v.iter().sum::<f64>() / v.len() as f64;
        v.iter().map(|x| (x - m) * (x - m)).sum::<f64>() / (v.len() - 1) as f64
    };
    let (a00, a11) = apriori.expect("trials ran");
    // Sample variance of 4000 normal values has relative σ ≈ 2.2 %.
    assert!(
        (var(&g00) / a00 - 1.0).abs() < 0.1,
        "{} vs {a00}",
        var(&g00)
    );
    assert!(
        (var(&g11) / a11 - 1.0).abs() < 0.1,
        "{} vs {a11}",
        var(&g11)
    );
}

#[test]
fn exact_fit_is_flagged_and_uses_apriori_factor() {
    // Three points in 2D determine G and t exactly: r = 3·2 − 2·3 = 0.
    let xs = [
        [OFFSET, OFFSET],
        [OFFSET + 10.0, OFFSET],
        [OFFSET, OFFSET + 10.0],
    ];
    let g = [[1e-3, 2e-3], [-5e-4, 4e-4]];
    let set = uniform_set(&xs, None, &g, &[0.0, 0.0], &xs[0]);
    let est = fit_points(
        &set,
        &[0, 1, 2],
        "E",
        RegionKind::Group,
        None,
        &FitOptions::default(),
    )
    .expect("fits");
    let fit = est.fit.as_ref().expect("stats");
    assert!(fit.exact);
    assert_eq!(fit.redundancy, 0);
    assert_eq!(fit.variance_factor, None);
    // A-priori factor 1 with unit weights: cov(row of G) = M⁻¹ with M = Σ d dᵀ about the
    // centroid (normal equations of the centred regression). Here the centroid is
    // (10/3, 10/3) from the first point, M = 100/3·[[2, −1], [−1, 2]], M⁻¹ = 3/100 · 1/3 ·
    // [[2, 1], [1, 2]] = [[0.02, 0.01], [0.01, 0.02]].
    let cov = &fit.cov_gradient;
    for (r, c, want) in [
        (0, 0, 0.02),
        (0, 1, 0.01),
        (1, 1, 0.02),
        (2, 2, 0.02),
        (3, 2, 0.01),
    ] {
        assert!(
            (cov[(r, c)] - want).abs() < 1e-12,
            "cov[{r}][{c}] = {}",
            cov[(r, c)]
        );
    }
    assert_eq!(cov[(0, 2)], 0.0);
    assert_uniform(&est, &g, &[0.0, 0.0], &xs[0]);
}

#[test]
fn network_covariance_of_parts_on_a_square() {
    // Unit weights, four points at (±a, ±a): M = Σ d dᵀ = 4a²·I, so cov(row of G) =
    // σ̂₀²/(4a²)·I and var(t_i) = σ̂₀²/4 (Ghilani & Wolf, Adjustment Computations,
    // (AᵀA)⁻¹σ̂₀²). By propagation of variances: var(ω) = (var G10 + var G01)/4 =
    // σ̂₀²/(8a²), var(εxx) = σ̂₀²/(4a²), var(εxy) = σ̂₀²/(8a²).
    let a = 5.0;
    let c = [OFFSET, 2.0 * OFFSET];
    let off = [[-a, -a], [a, -a], [a, a], [-a, a]];
    let bumps = [[1e-3, -2e-3], [-1e-3, 2e-3], [1e-3, -2e-3], [-1e-3, 2e-3]];
    let pts = (0..4)
        .map(|k| {
            Point::new(
                format!("S{k}"),
                [c[0] + off[k][0], c[1] + off[k][1]],
                [1e-3 * off[k][0] + bumps[k][0], bumps[k][1]],
            )
        })
        .collect();
    let set = PointSet::new(pts).expect("valid");
    let fit = fit_network(&set, &FitOptions::default()).expect("fits");
    let s0 = fit
        .estimate
        .fit
        .as_ref()
        .and_then(|f| f.variance_factor)
        .expect("r = 2");
    assert!(s0 > 0.0);
    let close = |got: f64, want: f64| (got - want).abs() <= 1e-12 * want.abs().max(1e-30);
    assert!(close(fit.cov_rotation[(0, 0)], s0 / (8.0 * a * a)));
    assert!(close(fit.cov_strain[(0, 0)], s0 / (4.0 * a * a)));
    assert!(close(fit.cov_strain[(1, 1)], s0 / (8.0 * a * a)));
    assert!(close(fit.var_translation[0], s0 / 4.0));
    assert!(close(fit.var_translation[1], s0 / 4.0));
    assert!((fit.strain[(0, 0)] - 1e-3).abs() < 1e-12);
}

#[test]
fn distance_weights_follow_their_formulas() {
    // A non-uniform field makes the result depend on the weights: compare the fit with a
    // fit on unit weights replaced by explicit precision weights 1/σ² = δ(d).
    // Kernels (common practice): Gaussian δ = exp(−d²/(2s²)); quadratic δ = (1 − d²/R²)².
    let mut rng = Rng::new(99);
    let centre = [OFFSET, OFFSET];
    let xs = cloud(&mut rng, 15, 10.0, centre);
    let u: Vec<[f64; 2]> = xs
        .iter()
        .map(|x| {
            let (dx, dy) = (x[0] - centre[0], x[1] - centre[1]);
            [1e-4 * dx * dx + 1e-3 * dy, -2e-4 * dx * dy]
        })
        .collect();
    for dw in [
        DistanceWeight::Gaussian { scale_m: 4.0 },
        DistanceWeight::QuadraticDecay { radius_m: 12.0 },
    ] {
        let plain = PointSet::new(
            xs.iter()
                .zip(&u)
                .enumerate()
                .map(|(k, (x, u))| Point::new(format!("P{k}"), *x, *u))
                .collect(),
        )
        .expect("valid");
        let mut kept = Vec::new();
        let weighted = PointSet::new(
            xs.iter()
                .zip(&u)
                .enumerate()
                .filter_map(|(k, (x, u))| {
                    let d2 = (x[0] - centre[0]).powi(2) + (x[1] - centre[1]).powi(2);
                    let w = match dw {
                        DistanceWeight::Gaussian { scale_m } => {
                            (-d2 / (2.0 * scale_m * scale_m)).exp()
                        }
                        DistanceWeight::QuadraticDecay { radius_m } => {
                            let q = 1.0 - d2 / (radius_m * radius_m);
                            if q > 0.0 { q * q } else { 0.0 }
                        }
                        DistanceWeight::None => 1.0,
                    };
                    (w > 0.0).then(|| {
                        kept.push(k);
                        Point::new(format!("P{k}"), *x, *u).with_sigma([w.sqrt().recip(); 2])
                    })
                })
                .collect(),
        )
        .expect("valid");
        let all: Vec<usize> = (0..xs.len()).collect();
        let a = fit_points(
            &plain,
            &all,
            "A",
            RegionKind::Group,
            Some(centre),
            &opts(dw),
        )
        .expect("fit");
        let b_all: Vec<usize> = (0..weighted.len()).collect();
        let b = fit_points(
            &weighted,
            &b_all,
            "B",
            RegionKind::Group,
            None,
            &FitOptions::default(),
        )
        .expect("fit");
        assert_eq!(a.members, kept);
        assert!(
            max_gradient_error(
                &a.gradient,
                &[
                    [b.gradient[(0, 0)], b.gradient[(0, 1)]],
                    [b.gradient[(1, 0)], b.gradient[(1, 1)]]
                ]
            ) < 1e-12
        );
        let unweighted = fit_points(
            &plain,
            &all,
            "C",
            RegionKind::Group,
            None,
            &FitOptions::default(),
        )
        .expect("fit");
        assert!(
            (unweighted.gradient[(0, 0)] - a.gradient[(0, 0)]).abs() > 1e-8,
            "the weights matter for this field"
        );
    }
}

// ---------------------------------------------------------------- grid accuracy

/// Field sampled on an `nx × ny` grid from `f(x, y)`, optional missing cells.
fn sample(
    nx: usize,
    ny: usize,
    origin: [f64; 2],
    h: [f64; 2],
    f: impl Fn(f64, f64) -> [f64; 2],
    missing: &[(usize, usize)],
) -> GridField2 {
    let mut u = Vec::with_capacity(nx * ny);
    for j in 0..ny {
        for i in 0..nx {
            let (x, y) = (origin[0] + i as f64 * h[0], origin[1] + j as f64 * h[1]);
            u.push((!missing.contains(&(i, j))).then(|| f(x, y)));
        }
    }
    GridField2 {
        origin,
        spacing: h,
        nx,
        ny,
        u,
    }
}

#[test]
fn grid_is_exact_for_quadratic_fields_at_edges_and_next_to_gaps() {
    // Source: Taylor series / Fornberg (1988) weights: the central difference
    // (f₁ − f₋₁)/2h and the one-sided (−3f₀ + 4f₁ − f₂)/2h are exact for quadratics.
    let f = |x: f64, y: f64| {
        [
            0.3 * x * x - 0.2 * x * y + 0.1 * y * y + 0.05 * x - 0.01 * y + 0.2,
            -0.15 * x * x + 0.4 * x * y + 0.25 * y * y - 0.02 * x + 0.03 * y,
        ]
    };
    let df = |x: f64, y: f64| {
        [
            [0.6 * x - 0.2 * y + 0.05, -0.2 * x + 0.2 * y - 0.01],
            [-0.3 * x + 0.4 * y - 0.02, 0.4 * x + 0.5 * y + 0.03],
        ]
    };
    // Gaps force one-sided stencils inside the grid too.
    let field = sample(9, 9, [-1.5, 0.5], [0.5, 0.4], f, &[(4, 4), (3, 5)]);
    let (good, bad) = grid_gradients(&field).expect("valid");
    assert!(bad.is_empty(), "{bad:?}");
    assert_eq!(good.len(), 9 * 9 - 2);
    for e in &good {
        let want = df(e.centroid[0], e.centroid[1]);
        assert!(
            max_gradient_error(&e.gradient, &want) < 1e-12,
            "{}",
            e.label
        );
        assert_eq!(e.translation, Some(f(e.centroid[0], e.centroid[1])));
    }
    let corner = good.iter().find(|e| e.label == "0,0").expect("corner");
    // Forward stencils along both axes: cells (0,0),(1,0),(2,0),(0,1),(0,2).
    assert_eq!(corner.members, vec![0, 1, 2, 9, 18]);
    // Next to the gap at (4,4): (3,4) uses the backward x stencil (2,4),(1,4).
    let beside = good.iter().find(|e| e.label == "3,4").expect("node");
    assert!(beside.members.contains(&(4 * 9 + 1)) && !beside.members.contains(&(4 * 9 + 4)));
}

#[test]
fn grid_converges_at_second_order_on_a_smooth_field() {
    // Source: truncation error O(h²) of second-order differences (Taylor series; any
    // numerical-analysis text, e.g. Fornberg 1988). The maximum error over all nodes,
    // edges included, should fall by ≈ 4 as h halves.
    let f = |x: f64, y: f64| [(1.3 * x).sin() * (0.7 * y).cos(), (0.9 * x + 1.1 * y).cos()];
    let df = |x: f64, y: f64| {
        [
            [
                1.3 * (1.3 * x).cos() * (0.7 * y).cos(),
                -0.7 * (1.3 * x).sin() * (0.7 * y).sin(),
            ],
            [
                -0.9 * (0.9 * x + 1.1 * y).sin(),
                -1.1 * (0.9 * x + 1.1 * y).sin(),
            ],
        ]
    };
    let mut errs = Vec::new();
    for level in 0..4 {
        let n = 10 * (1 << level) + 1;
        let h = 2.0 / (n - 1) as f64;
        let field = sample(n, n, [0.0, 0.0], [h, h], f, &[]);
        let (good, bad) = grid_gradients(&field).expect("valid");
        assert!(bad.is_empty());
        let e = good
            .iter()
            .map(|e| max_gradient_error(&e.gradient, &df(e.centroid[0], e.centroid[1])))
            .fold(0.0, f64::max);
        errs.push(e);
    }
    for w in errs.windows(2) {
        let order = (w[0] / w[1]).log2();
        assert!((1.8..2.2).contains(&order), "order {order} from {errs:?}");
    }
}

#[test]
fn grid_rejects_nodes_without_a_second_order_stencil() {
    // A 2-cell-wide grid cannot form ∂/∂x to second order (needs 3 cells in the line).
    let field = sample(2, 4, [0.0, 0.0], [1.0, 1.0], |x, y| [x, y], &[]);
    let (good, bad) = grid_gradients(&field).expect("valid");
    assert!(good.is_empty());
    assert_eq!(bad.len(), 8);
    assert!(bad[0].reason.contains("∂u/∂x"), "{}", bad[0].reason);
    assert!(bad[0].reason.contains("2 of 2 cells"), "{}", bad[0].reason);
    // Cell isolated in its row by gaps: (2,1) with (1,1) and (3,1) missing, 5 wide.
    let field = sample(
        5,
        3,
        [0.0, 0.0],
        [1.0, 1.0],
        |x, y| [x, y],
        &[(1, 1), (3, 1)],
    );
    let (good, bad) = grid_gradients(&field).expect("valid");
    // Rejected: (2,1) and its row ends (0,1), (4,1) along x; (1,0), (1,2), (3,0), (3,2)
    // along y (their column has a gap next to them and no third cell beyond).
    assert_eq!(bad.len(), 7, "{bad:?}");
    assert_eq!(good.len(), 13 - 7);
    let iso = bad
        .iter()
        .find(|r| r.label == "2,1")
        .expect("isolated cell");
    assert_eq!(iso.members, vec![7]);
    assert!(iso.reason.contains("∂u/∂x"), "{}", iso.reason);
}

// ---------------------------------------------------------------- errors

fn set2(xs: &[[f64; 2]]) -> PointSet<2> {
    uniform_set(xs, None, &[[0.0; 2]; 2], &[0.0; 2], &[0.0; 2])
}

fn set3(xs: &[[f64; 3]]) -> PointSet<3> {
    uniform_set(xs, None, &[[0.0; 3]; 3], &[0.0; 3], &[0.0; 3])
}

fn group(name: &str, ids: &[&str]) -> Group {
    Group {
        name: name.into(),
        point_ids: ids.iter().map(|s| s.to_string()).collect(),
    }
}

#[test]
fn collinear_group_in_2d_is_degenerate() {
    let s = set2(&[
        [OFFSET, OFFSET],
        [OFFSET + 1.0, OFFSET + 2.0],
        [OFFSET + 3.0, OFFSET + 6.0],
        [OFFSET - 2.0, OFFSET - 4.0],
    ]);
    let err = fit_groups(
        &s,
        &[group("L1", &["P0", "P1", "P2", "P3"])],
        &FitOptions::default(),
    );
    match err {
        Err(CoreError::DegenerateGeometry {
            context,
            shape,
            condition,
        }) => {
            assert_eq!(context, "group `L1`");
            assert_eq!(shape, "collinear");
            assert!(condition < 1e-10);
        }
        other => panic!("expected DegenerateGeometry, got {other:?}"),
    }
}

#[test]
fn coplanar_and_collinear_groups_in_3d_are_degenerate() {
    let plane = set3(&[
        [0.0, 0.0, 5.0],
        [1.0, 0.0, 5.0],
        [0.0, 1.0, 5.0],
        [1.0, 1.0, 5.0],
        [0.3, 0.7, 5.0],
    ]);
    let all: Vec<usize> = (0..5).collect();
    assert!(matches!(
        fit_points(
            &plane,
            &all,
            "F",
            RegionKind::Group,
            None,
            &FitOptions::default()
        ),
        Err(CoreError::DegenerateGeometry {
            shape: "coplanar",
            ..
        })
    ));
    let line = set3(&[
        [0.0, 0.0, 0.0],
        [1.0, 1.0, 1.0],
        [2.0, 2.0, 2.0],
        [-1.0, -1.0, -1.0],
    ]);
    assert!(matches!(
        fit_points(
            &line,
            &[0, 1, 2, 3],
            "L",
            RegionKind::Group,
            None,
            &FitOptions::default()
        ),
        Err(CoreError::DegenerateGeometry {
            shape: "collinear",
            ..
        })
    ));
}

#[test]
fn coincident_points_are_degenerate() {
    // Four readings of one monument (differences at coordinate rounding, 1e-9 m).
    let s = set2(&[
        [OFFSET, OFFSET],
        [OFFSET + 1e-9, OFFSET],
        [OFFSET, OFFSET + 1e-9],
        [OFFSET - 1e-9, OFFSET - 1e-9],
    ]);
    assert!(matches!(
        fit_points(
            &s,
            &[0, 1, 2, 3],
            "C",
            RegionKind::Group,
            None,
            &FitOptions::default()
        ),
        Err(CoreError::DegenerateGeometry {
            shape: "coincident",
            ..
        })
    ));
}

#[test]
fn too_few_points_and_unknown_or_repeated_points_are_reported() {
    let s = set2(&[[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]]);
    assert_eq!(
        fit_groups(&s, &[group("G", &["P0", "P1"])], &FitOptions::default()),
        Err(CoreError::TooFewPoints {
            context: "group `G`".into(),
            needed: 3,
            got: 2
        })
    );
    assert_eq!(
        fit_groups(
            &s,
            &[group("G1", &["P0", "P1", "Q9"])],
            &FitOptions::default()
        ),
        Err(CoreError::UnknownPoint {
            context: "group `G1`".into(),
            id: "Q9".into()
        })
    );
    match fit_groups(
        &s,
        &[group("G2", &["P0", "P1", "P0"])],
        &FitOptions::default(),
    ) {
        Err(CoreError::InvalidParameter {
            name: "point_ids",
            reason,
        }) => {
            assert!(
                reason.contains("group `G2`") && reason.contains("`P0`"),
                "{reason}"
            );
        }
        other => panic!("expected InvalidParameter, got {other:?}"),
    }
    assert_eq!(
        fit_groups(&s, &[], &FitOptions::default()),
        Err(CoreError::Empty { what: "groups" })
    );
    // fit_points itself refuses a repeated member index.
    assert!(matches!(
        fit_points(
            &s,
            &[0, 1, 1],
            "R",
            RegionKind::Group,
            None,
            &FitOptions::default()
        ),
        Err(CoreError::InvalidParameter {
            name: "members",
            ..
        })
    ));
    // Every point beyond the quadratic-decay radius: zero total weight.
    let far = FitOptions {
        distance_weight: DistanceWeight::QuadraticDecay { radius_m: 1.0 },
        ..FitOptions::default()
    };
    assert!(matches!(
        fit_points(
            &s,
            &[0, 1, 2],
            "W",
            RegionKind::Group,
            Some([50.0, 50.0]),
            &far
        ),
        Err(CoreError::InvalidParameter {
            name: "distance_weight",
            ..
        })
    ));
    // Good groups fit, and in order.
    let good = fit_groups(
        &s,
        &[
            group("A", &["P0", "P1", "P2"]),
            group("B", &["P2", "P1", "P0"]),
        ],
        &FitOptions::default(),
    )
    .expect("fits");
    assert_eq!(
        good.iter().map(|e| e.label.as_str()).collect::<Vec<_>>(),
        ["A", "B"]
    );
    assert_eq!(good[1].members, vec![2, 1, 0]);
}

#[test]
fn invalid_neighbourhood_parameters_are_rejected() {
    let mut rng = Rng::new(3);
    let xs = cloud(&mut rng, 20, 10.0, [0.0, 0.0]);
    let s = set2(&xs);
    let o = FitOptions::default();
    let cases: [(Centres<2>, Selection, &str); 5] = [
        (Centres::AtPoints, Selection::Nearest { k: 2 }, "k"),
        (
            Centres::AtPoints,
            Selection::Radius {
                radius_m: -1.0,
                min_points: 3,
            },
            "radius_m",
        ),
        (
            Centres::AtPoints,
            Selection::Radius {
                radius_m: f64::NAN,
                min_points: 3,
            },
            "radius_m",
        ),
        (
            Centres::AtPoints,
            Selection::Radius {
                radius_m: 5.0,
                min_points: 2,
            },
            "min_points",
        ),
        (
            Centres::Grid {
                origin: [0.0, 0.0],
                spacing: [1.0, 0.0],
                counts: [3, 3],
            },
            Selection::Nearest { k: 5 },
            "spacing",
        ),
    ];
    for (c, sel, want) in cases {
        match fit_neighbourhoods(&s, &c, &sel, &o) {
            Err(CoreError::InvalidParameter { name, .. }) => assert_eq!(name, want),
            other => panic!("{want}: expected InvalidParameter, got {other:?}"),
        }
    }
}

#[test]
fn degenerate_and_underfilled_neighbourhoods_become_rejections() {
    // A square patch of points plus a straight line of points far away.
    let mut xs = Vec::new();
    for i in 0..4 {
        for j in 0..4 {
            xs.push([i as f64, j as f64]);
        }
    }
    for i in 0..6 {
        xs.push([100.0 + i as f64, 0.0]);
    }
    let s = set2(&xs);
    let (good, bad) = fit_neighbourhoods(
        &s,
        &Centres::AtPoints,
        &Selection::Radius {
            radius_m: 2.5,
            min_points: 3,
        },
        &FitOptions::default(),
    )
    .expect("run");
    assert_eq!(good.len(), 16);
    assert_eq!(bad.len(), 6);
    assert!(bad.iter().all(|r| r.label.starts_with('P')));
    assert!(
        bad.iter().all(|r| r.reason.contains("collinear")),
        "{bad:?}"
    );
    // Labels follow the point IDs, in input order.
    assert_eq!(good[0].label, "P0");
    // Grid nodes: labels "i,j", i fastest; nodes far from everything are underfilled.
    let mut labels = Vec::new();
    let mut reasons = Vec::new();
    fit_neighbourhoods_with(
        &s,
        &Centres::Grid {
            origin: [1.5, 1.5],
            spacing: [30.0, 30.0],
            counts: [2, 2],
        },
        &Selection::Radius {
            radius_m: 3.0,
            min_points: 4,
        },
        &FitOptions::default(),
        |r| match r {
            Ok(e) => labels.push(e.label),
            Err(r) => {
                labels.push(r.label);
                reasons.push(r.reason);
            }
        },
    )
    .expect("run");
    assert_eq!(labels, ["0,0", "1,0", "0,1", "1,1"]);
    assert_eq!(reasons.len(), 3);
    assert!(
        reasons[0].contains("0 points within 3 m, need at least 4"),
        "{reasons:?}"
    );
}

#[test]
fn bad_grids_get_typed_errors() {
    let mut field = sample(3, 3, [0.0, 0.0], [1.0, 1.0], |x, y| [x, y], &[]);
    field.u[5] = Some([0.0, f64::NAN]);
    assert_eq!(
        grid_gradients(&field),
        Err(CoreError::NonFinite {
            id: "2,1".into(),
            field: "uy"
        })
    );
    let mut short = sample(3, 3, [0.0, 0.0], [1.0, 1.0], |x, y| [x, y], &[]);
    short.u.pop();
    assert!(matches!(
        grid_gradients(&short),
        Err(CoreError::InvalidGrid { .. })
    ));
    let mut flat = sample(3, 3, [0.0, 0.0], [1.0, 1.0], |x, y| [x, y], &[]);
    flat.spacing = [1.0, 0.0];
    assert!(matches!(
        grid_gradients(&flat),
        Err(CoreError::InvalidGrid { .. })
    ));
}

// ------------------------------------------------------------ parameter bounds

#[test]
fn k_above_the_point_count_and_huge_grids_are_rejected() {
    let mut rng = Rng::new(31);
    let xs = cloud(&mut rng, 10, 10.0, [0.0, 0.0]);
    let s = set2(&xs);
    let o = FitOptions::default();
    for k in [11, usize::MAX / 2] {
        match fit_neighbourhoods(&s, &Centres::AtPoints, &Selection::Nearest { k }, &o) {
            Err(CoreError::InvalidParameter { name: "k", reason }) => assert!(
                reason.contains(&format!("k = {k} exceeds the 10 points in the set")),
                "{reason}"
            ),
            other => panic!("k = {k}: expected InvalidParameter, got {other:?}"),
        }
    }
    // k = n is allowed: every neighbourhood is the whole set.
    let (good, bad) = fit_neighbourhoods(&s, &Centres::AtPoints, &Selection::Nearest { k: 10 }, &o)
        .expect("k = n");
    assert_eq!((good.len(), bad.len()), (10, 0));
    for counts in [
        [1_000_000_000, 1_000_000_000],
        [usize::MAX, 2],
        [MAX_GRID_NODES + 1, 1],
    ] {
        let c = Centres::Grid {
            origin: [0.0, 0.0],
            spacing: [1.0, 1.0],
            counts,
        };
        match fit_neighbourhoods(&s, &c, &Selection::Nearest { k: 5 }, &o) {
            Err(CoreError::InvalidParameter {
                name: "counts",
                reason,
            }) => assert!(reason.contains("exceeds the limit"), "{reason}"),
            other => panic!("{counts:?}: expected InvalidParameter, got {other:?}"),
        }
    }
    let inf = Selection::Radius {
        radius_m: f64::INFINITY,
        min_points: 3,
    };
    assert!(matches!(
        fit_neighbourhoods(&s, &Centres::AtPoints, &inf, &o),
        Err(CoreError::InvalidParameter {
            name: "radius_m",
            ..
        })
    ));
}

#[test]
fn precision_weights_must_be_complete_and_representable() {
    let xs = [
        [0.0, 0.0],
        [10.0, 0.0],
        [0.0, 10.0],
        [10.0, 10.0],
        [5.0, 3.0],
    ];
    let g = [[1e-3, 0.0], [0.0, -1e-3]];
    let with = |sig: &[Option<f64>]| {
        PointSet::new(
            xs.iter()
                .zip(sig)
                .enumerate()
                .map(|(k, (x, s))| {
                    let p = Point::new(format!("P{k}"), *x, uniform_u(&g, &[0.0; 2], &[0.0; 2], x));
                    match s {
                        Some(s) => p.with_sigma([*s, *s]),
                        None => p,
                    }
                })
                .collect(),
        )
        .expect("valid points")
    };
    let all = [0, 1, 2, 3, 4];
    let fit = |s: &PointSet<2>| {
        fit_points(
            s,
            &all,
            "G",
            RegionKind::Group,
            None,
            &FitOptions::default(),
        )
    };
    let sigma_error = |r: Result<GradientEstimate<2>, CoreError>, id: &str| match r {
        Err(CoreError::InvalidParameter {
            name: "sigma",
            reason,
        }) => assert!(reason.contains(&format!("`{id}`")), "{reason}"),
        other => panic!("expected a sigma error naming {id}, got {other:?}"),
    };
    // A point without sigma among points with 1 mm: named.
    sigma_error(
        fit(&with(&[Some(1e-3), Some(1e-3), None, Some(1e-3), None])),
        "P2",
    );
    // σ = 1e200 m: 1/σ² underflows to 0 (was misread as coincident points).
    sigma_error(
        fit(&with(&[
            Some(1e-3),
            Some(1e200),
            Some(1e-3),
            Some(1e-3),
            Some(1e-3),
        ])),
        "P1",
    );
    // σ = 1e-160 m: 1/σ² overflows.
    sigma_error(
        fit(&with(&[
            Some(1e-3),
            Some(1e-3),
            Some(1e-3),
            Some(1e-160),
            Some(1e-3),
        ])),
        "P3",
    );
    // σ = 1e-154 m: each weight 1e308 is finite but their sum overflows the normal
    // matrix (was misread as collinear).
    sigma_error(fit(&with(&[Some(1e-154); 5])), "P1");
    // No point states a precision: unit weights, and the fit is exact for a uniform field.
    let est = fit(&with(&[None; 5])).expect("unit weights");
    assert!(max_gradient_error(&est.gradient, &g) < 1e-15);
    // Precision weighting off: sigma is ignored even when only some points state it.
    let off = FitOptions {
        use_precision: false,
        ..FitOptions::default()
    };
    assert!(
        fit_points(
            &with(&[Some(1e-3), None, None, None, None]),
            &all,
            "G",
            RegionKind::Group,
            None,
            &off
        )
        .is_ok()
    );
}

#[test]
fn non_finite_centre_and_underflowing_kernels_are_errors() {
    let s = set2(&[[0.0, 0.0], [10.0, 0.0], [0.0, 10.0], [10.0, 10.0]]);
    let gauss = opts(DistanceWeight::Gaussian { scale_m: 1.0 });
    for c in [[f64::NAN, 0.0], [0.0, f64::INFINITY]] {
        assert!(matches!(
            fit_points(&s, &[0, 1, 2, 3], "C", RegionKind::Group, Some(c), &gauss),
            Err(CoreError::InvalidParameter { name: "centre", .. })
        ));
    }
    // 1 km from every point with a 1 m Gaussian: exp(−5·10⁵) underflows to 0 for all.
    assert!(matches!(
        fit_points(
            &s,
            &[0, 1, 2, 3],
            "C",
            RegionKind::Group,
            Some([1e3, 1e3]),
            &gauss
        ),
        Err(CoreError::InvalidParameter {
            name: "distance_weight",
            ..
        })
    ));
}

// --------------------------------------- distance weighting: variance and covariance

/// Points `P0…` at `xs` with displacement `G·x + noise`, σ = `sigma` on both axes.
fn noisy_set(xs: &[[f64; 2]], g: &[[f64; 2]; 2], sigma: f64, rng: &mut Rng) -> PointSet<2> {
    PointSet::new(
        xs.iter()
            .enumerate()
            .map(|(k, x)| {
                let mut u = uniform_u(g, &[0.0; 2], &[0.0; 2], x);
                for v in u.iter_mut() {
                    *v += sigma * rng.normal();
                }
                Point::new(format!("P{k}"), *x, u).with_sigma([sigma, sigma])
            })
            .collect(),
    )
    .expect("valid points")
}

#[test]
fn kernel_weights_do_not_count_as_redundancy() {
    // Source: for a weighted estimator with Var(u) = σ₀²P⁻¹, E[vᵀPv] = σ₀²·r_eff with
    // r_eff = tr((I−H)ᵀP(I−H)P⁻¹) (expectation of a quadratic form, any regression
    // text), so vᵀPv / r_eff is unbiased for σ₀² = 1 when the noise has the stated σ.
    //
    // Probe: 4 noisy points within 0.5 m of the centre and 50 points 30 m away, Gaussian
    // s = 1 m. The far points have kernel weight e^−450 and do not enter the fit: r = 2.
    let mut rng = Rng::new(77);
    let mut xs: Vec<[f64; 2]> = vec![[0.4, 0.1], [-0.3, 0.35], [0.05, -0.45], [-0.2, -0.1]];
    for k in 0..50 {
        let a = k as f64 * std::f64::consts::TAU / 50.0;
        xs.push([30.0 * a.cos(), 30.0 * a.sin()]);
    }
    let g = [[2e-4, -1e-4], [5e-5, 3e-4]];
    let o = opts(DistanceWeight::Gaussian { scale_m: 1.0 });
    let all: Vec<usize> = (0..xs.len()).collect();
    let runs = 2000;
    let mut sum = 0.0;
    for _ in 0..runs {
        let s = noisy_set(&xs, &g, 1e-3, &mut rng);
        let est = fit_points(
            &s,
            &all,
            "C",
            RegionKind::Neighbourhood,
            Some([0.0, 0.0]),
            &o,
        )
        .expect("fits");
        assert_eq!(est.members, vec![0, 1, 2, 3]);
        let fit = est.fit.expect("stats");
        assert_eq!((fit.n_points, fit.redundancy), (4, 2));
        assert!(
            (fit.effective_redundancy - 2.0).abs() < 0.1,
            "{}",
            fit.effective_redundancy
        );
        sum += fit.variance_factor.expect("redundant");
    }
    // σ̂₀² ≈ χ²₂/2 per run (variance 1): the mean of 2000 has sd 0.022.
    let mean = sum / runs as f64;
    assert!((mean - 1.0).abs() < 0.1, "mean σ̂₀² = {mean}");
}

#[test]
fn sandwich_covariance_matches_the_scatter_of_kernel_weighted_fits() {
    // Source: the sandwich (Huber–White) covariance of a weighted estimator,
    // Cov(β̂) = σ₀² N⁻¹(AᵀK²PA)N⁻¹: checked here against the empirical scatter of
    // β̂ over independent noise draws (fixed geometry, σ₀² = 1), and σ̂₀² against 1.
    // Kernel weights from 1 down to ~0.01 (s = 2 m, points out to 6 m): all used.
    let mut grng = Rng::new(5);
    let xs: Vec<[f64; 2]> = (0..20)
        .map(|_| [grng.range(-6.0, 6.0), grng.range(-6.0, 6.0)])
        .collect();
    let g = [[2e-4, -1e-4], [5e-5, 3e-4]];
    let o = opts(DistanceWeight::Gaussian { scale_m: 2.0 });
    let all: Vec<usize> = (0..xs.len()).collect();
    let mut rng = Rng::new(6);
    let runs = 4000;
    let mut gs = Vec::with_capacity(runs);
    let mut s0 = 0.0;
    let mut cov_apriori = None;
    for _ in 0..runs {
        let s = noisy_set(&xs, &g, 1e-3, &mut rng);
        let est = fit_points(
            &s,
            &all,
            "C",
            RegionKind::Neighbourhood,
            Some([0.0, 0.0]),
            &o,
        )
        .expect("fits");
        let fit = est.fit.expect("stats");
        assert_eq!(fit.n_points, 20);
        // The P-weighted fit minimises vᵀPv, so any other weighting leaves more on
        // average: r_eff > r (not an integer; I − H is an oblique projection).
        assert!(
            fit.effective_redundancy > fit.redundancy as f64 + 0.1,
            "{}",
            fit.effective_redundancy
        );
        let f = fit.variance_factor.expect("redundant");
        s0 += f;
        // cov / σ̂₀² is the σ₀² = 1 covariance: fixed by the geometry alone.
        let c = fit.cov_gradient.clone() / f;
        if let Some(prev) = &cov_apriori {
            let d: nalgebra::DMatrix<f64> = &c - prev;
            assert!(d.abs().max() < 1e-9 * c.abs().max());
        }
        cov_apriori = Some(c);
        gs.push(est.gradient);
    }
    let mean_s0 = s0 / runs as f64;
    // r_eff ≈ 50 here: σ̂₀² has sd below 0.3 per run, below 0.005 for the mean of 4000.
    assert!((mean_s0 - 1.0).abs() < 0.05, "mean σ̂₀² = {mean_s0}");
    let cov = cov_apriori.expect("runs");
    for (a, (i, j)) in [(0, 0), (0, 1), (1, 0), (1, 1)].into_iter().enumerate() {
        let m = gs.iter().map(|x| x[(i, j)]).sum::<f64>() / runs as f64;
        let var = gs.iter().map(|x| (x[(i, j)] - m).powi(2)).sum::<f64>() / (runs - 1) as f64;
        // Sample variance of 4000 normal draws: relative sd √(2/3999) ≈ 0.022.
        let ratio = var / cov[(a, a)];
        assert!(
            (ratio - 1.0).abs() < 0.1,
            "G[{i}][{j}]: empirical/sandwich = {ratio}"
        );
    }
}

#[test]
fn without_a_kernel_the_statistics_are_the_classical_ones() {
    // K = I: r_eff = r = n·D − D(D+1) exactly and σ̂₀² = Σπv²/r (Ghilani & Wolf); a
    // Gaussian kernel with every point at the same distance (3-4-5 triangles: d² = 25
    // exactly) has constant K and must give bit for bit the unweighted fit.
    let xs = [
        [3.0, 4.0],
        [-3.0, 4.0],
        [3.0, -4.0],
        [-3.0, -4.0],
        [5.0, 0.0],
        [0.0, 5.0],
        [-5.0, 0.0],
        [0.0, -5.0],
    ];
    let g = [[2e-4, -1e-4], [5e-5, 3e-4]];
    let mut rng = Rng::new(8);
    let s = noisy_set(&xs, &g, 1e-3, &mut rng);
    let all: Vec<usize> = (0..xs.len()).collect();
    let plain = fit_points(
        &s,
        &all,
        "C",
        RegionKind::Group,
        Some([0.0, 0.0]),
        &opts(DistanceWeight::None),
    )
    .expect("fits");
    let fit = plain.fit.as_ref().expect("stats");
    assert_eq!(fit.redundancy, 8 * 2 - 6);
    assert_eq!(fit.effective_redundancy, 10.0);
    let vtpv: f64 = fit
        .residuals
        .iter()
        .map(|v| (v[0] * v[0] + v[1] * v[1]) / 1e-6)
        .sum();
    let f = fit.variance_factor.expect("redundant");
    assert!(
        (f - vtpv / 10.0).abs() < 1e-12 * f,
        "{f} vs {}",
        vtpv / 10.0
    );
    let gauss = fit_points(
        &s,
        &all,
        "C",
        RegionKind::Group,
        Some([0.0, 0.0]),
        &opts(DistanceWeight::Gaussian { scale_m: 2.0 }),
    )
    .expect("fits");
    assert_eq!(gauss, plain);
}
