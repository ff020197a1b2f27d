//! Precision of the gradient and of everything derived from it.
//!
//! Sources:
//! - propagation of variance of linear functions `var(aᵀx) = aᵀCa` and the general law
//!   `J C Jᵀ`: Ghilani & Wolf, *Adjustment Computations*, ch. 6;
//! - constant-strain element shape functions: Zienkiewicz & Taylor, *The Finite Element
//!   Method*, vol. 1 (linear triangle / tetrahedron);
//! - Monte Carlo: sample standard deviations of a seeded normal sample (Box–Muller on
//!   SplitMix64), with the derived values computed by the independent kinematics code
//!   (`analyze2`/`analyze3`) — the sample sd of N normal draws has relative standard
//!   error ≈ 1/√(2N) (0.5 % for N = 20 000);
//! - Rayleigh distribution CDF `1 − exp(−r²/(2s²))` for the radius of an isotropic
//!   bivariate normal (any statistics text).

// Index loops over parallel arrays read most plainly in these checks.
#![allow(clippy::needless_range_loop)]

use kinema_core::CoreError;
use kinema_core::estimate::RegionKind;
use kinema_core::estimate::lsq::{FitOptions, fit_points};
use kinema_core::kinematics::nalgebra::{DMatrix, Matrix2, Matrix3, SMatrix};
use kinema_core::kinematics::{KinematicsOptions, analyze2, analyze3};
use kinema_core::uncertainty::{
    IsotropyTest, covariance_from_sigma, displacement_covariance, element_gradient_covariance,
    propagate2, propagate3,
};
use kinema_core::{Point, PointSet};

/// SplitMix64 with Box–Muller normals.
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
    fn normal(&mut self) -> f64 {
        if let Some(s) = self.spare.take() {
            return s;
        }
        let (u1, u2) = (self.unit(), self.unit());
        let r = (-2.0 * u1.ln()).sqrt();
        let t = 2.0 * std::f64::consts::PI * u2;
        self.spare = Some(r * t.sin());
        r * t.cos()
    }
}

/// A random symmetric positive-definite `n×n` covariance `s²·(A Aᵀ + 0.2 I)`.
fn random_cov(rng: &mut Rng, n: usize, s: f64) -> DMatrix<f64> {
    let a = DMatrix::from_fn(n, n, |_, _| rng.normal());
    (&a * a.transpose() / n as f64 + DMatrix::identity(n, n) * 0.2) * (s * s)
}

/// Draws `x ~ N(mean, C)` via the Cholesky factor.
fn sampler(c: &DMatrix<f64>) -> DMatrix<f64> {
    c.clone()
        .cholesky()
        .expect("covariance is positive definite")
        .l()
}

fn draw(rng: &mut Rng, l: &DMatrix<f64>) -> Vec<f64> {
    let n = l.nrows();
    let z = DMatrix::from_fn(n, 1, |_, _| rng.normal());
    (l * z).iter().copied().collect()
}

fn sample_sd(xs: &[f64]) -> f64 {
    let n = xs.len() as f64;
    let mean = xs.iter().sum::<f64>() / n;
    (xs.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt()
}

fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs()
}

// ---------------------------------------------------------------------------------------
// Exact linear cases by hand.
// Source: Ghilani & Wolf, Adjustment Computations, ch. 6 (variance of a linear function).

#[test]
fn linear_2d_components_by_hand() {
    let mut rng = Rng::new(1);
    let c = random_cov(&mut rng, 4, 1e-5);
    let g = Matrix2::new(3e-4, -1e-4, 2e-4, -5e-5);
    let u = propagate2(&g, &c, &IsotropyTest::default()).expect("valid input");
    let close = |a: f64, b: f64| assert!((a - b).abs() <= 1e-12 * b.abs().max(1e-30), "{a} vs {b}");
    // vec(G) = (G00, G01, G10, G11).
    close(u.sd_exx.powi(2), c[(0, 0)]);
    close(u.sd_eyy.powi(2), c[(3, 3)]);
    // var(exy) = (var G01 + var G10 + 2 cov(G01, G10)) / 4.
    close(
        u.sd_exy.powi(2),
        (c[(1, 1)] + c[(2, 2)] + 2.0 * c[(1, 2)]) / 4.0,
    );
    close(u.sd_gxy, 2.0 * u.sd_exy);
    // var(ω) = (var G10 + var G01 − 2 cov) / 4.
    close(
        u.sd_rotation.powi(2),
        (c[(1, 1)] + c[(2, 2)] - 2.0 * c[(1, 2)]) / 4.0,
    );
    // var(exx + eyy) = var G00 + var G11 + 2 cov.
    close(
        u.sd_volumetric.powi(2),
        c[(0, 0)] + c[(3, 3)] + 2.0 * c[(0, 3)],
    );
    // cov(exx, exy) = (cov(G00,G01) + cov(G00,G10)) / 2; cov(exx, eyy) = cov(G00, G11).
    close(u.cov_strain[0][2], 0.5 * (c[(0, 1)] + c[(0, 2)]));
    close(u.cov_strain[2][0], u.cov_strain[0][2]);
    close(u.cov_strain[0][1], c[(0, 3)]);
    close(u.cov_strain[1][2], 0.5 * (c[(3, 1)] + c[(3, 2)]));
}

#[test]
fn linear_3d_components_by_hand() {
    let mut rng = Rng::new(2);
    let c = random_cov(&mut rng, 9, 1e-5);
    let g = Matrix3::new(
        3e-4, 1e-4, -2e-4, 0.5e-4, -1e-4, 0.7e-4, 0.2e-4, 0.3e-4, 1.5e-4,
    );
    let u = propagate3(&g, &c, &IsotropyTest::default()).expect("valid input");
    let close = |a: f64, b: f64| assert!((a - b).abs() <= 1e-12 * b.abs(), "{a} vs {b}");
    let i = |r: usize, s: usize| r * 3 + s;
    close(u.sd_ezz.powi(2), c[(8, 8)]);
    // eyz = (G12 + G21)/2.
    close(
        u.sd_eyz.powi(2),
        (c[(i(1, 2), i(1, 2))] + c[(i(2, 1), i(2, 1))] + 2.0 * c[(i(1, 2), i(2, 1))]) / 4.0,
    );
    close(u.sd_gyz, 2.0 * u.sd_eyz);
    // w_y = (G02 − G20)/2.
    close(
        u.sd_rotation_vector[1].powi(2),
        (c[(i(0, 2), i(0, 2))] + c[(i(2, 0), i(2, 0))] - 2.0 * c[(i(0, 2), i(2, 0))]) / 4.0,
    );
    let vol: f64 = [0, 4, 8]
        .iter()
        .flat_map(|&a| [0, 4, 8].map(move |b| (a, b)))
        .map(|(a, b)| c[(a, b)])
        .sum();
    close(u.sd_volumetric.powi(2), vol);
    // Principal values sum to the trace: var(e1+e2+e3) = var(vol) needs the covariances,
    // but for a diagonal G with distinct values the principal directions are the axes.
    let gd = Matrix3::from_diagonal(&kinema_core::kinematics::nalgebra::Vector3::new(
        3e-4, 1e-4, -2e-4,
    ));
    let ud = propagate3(&gd, &c, &IsotropyTest::default()).expect("valid input");
    close(ud.sd_principal[0].expect("distinct"), c[(0, 0)].sqrt());
    close(ud.sd_principal[1].expect("distinct"), c[(4, 4)].sqrt());
    close(ud.sd_principal[2].expect("distinct"), c[(8, 8)].sqrt());
    // (e1 − e3)/2 = (G00 − G22)/2 along the axes.
    close(
        ud.sd_max_shear_tensor.expect("distinct").powi(2),
        (c[(0, 0)] + c[(8, 8)] - 2.0 * c[(0, 8)]) / 4.0,
    );
}

// ---------------------------------------------------------------------------------------
// Point and two-epoch covariances.
// Source: Ghilani & Wolf, Adjustment Computations, ch. 6 (variance of a difference,
// C_u = C_ref + C_cur − C_rc − C_rcᵀ).

#[test]
fn displacement_covariance_by_hand() {
    let cr = covariance_from_sigma(&[0.002, 0.003]).expect("positive sigma");
    let cc = covariance_from_sigma(&[0.001, 0.004]).expect("positive sigma");
    let c = displacement_covariance(&cr, &cc, None).expect("valid");
    assert!((c[(0, 0)] - (4e-6 + 1e-6)).abs() < 1e-18);
    assert!((c[(1, 1)] - (9e-6 + 16e-6)).abs() < 1e-18);
    assert_eq!(c[(0, 1)], 0.0);
    let x = SMatrix::<f64, 2, 2>::new(1e-6, 0.5e-6, 0.0, 2e-6);
    let c2 = displacement_covariance(&cr, &cc, Some(&x)).expect("valid");
    assert!((c2[(0, 0)] - (5e-6 - 2e-6)).abs() < 1e-18);
    assert!((c2[(0, 1)] - (-0.5e-6)).abs() < 1e-18);
    assert!((c2[(1, 1)] - (25e-6 - 4e-6)).abs() < 1e-18);
}

#[test]
fn bad_covariances_are_typed_errors() {
    assert!(matches!(
        covariance_from_sigma(&[0.001, 0.0]),
        Err(CoreError::InvalidParameter { name: "sigma", .. })
    ));
    assert!(matches!(
        covariance_from_sigma(&[-0.001, 0.002, 0.003]),
        Err(CoreError::InvalidParameter { name: "sigma", .. })
    ));
    let ok = covariance_from_sigma(&[0.001, 0.001]).expect("positive");
    let nonsym = SMatrix::<f64, 2, 2>::new(1e-6, 1e-7, 0.0, 1e-6);
    match displacement_covariance(&nonsym, &ok, None) {
        Err(CoreError::InvalidCovariance { name, reason }) => {
            assert_eq!(name, "cov_ref");
            assert!(reason.contains("symmetric"), "{reason}");
        }
        other => panic!("expected InvalidCovariance, got {other:?}"),
    }
    let indefinite = SMatrix::<f64, 2, 2>::new(1e-6, 2e-6, 2e-6, 1e-6);
    assert!(matches!(
        displacement_covariance(&ok, &indefinite, None),
        Err(CoreError::InvalidCovariance { name, .. }) if name == "cov_cur"
    ));
    let nan = SMatrix::<f64, 2, 2>::new(f64::NAN, 0.0, 0.0, 1e-6);
    assert!(matches!(
        displacement_covariance(&ok, &ok, Some(&nan)),
        Err(CoreError::InvalidCovariance { name, .. }) if name == "cross"
    ));
    // A cross-covariance larger than the epochs allow: C = 2e-6·I − 2·(3e-6·I) < 0.
    let big = SMatrix::<f64, 2, 2>::identity() * 3e-6;
    assert!(matches!(
        displacement_covariance(&ok, &ok, Some(&big)),
        Err(CoreError::InvalidCovariance { .. })
    ));
    let g = Matrix2::new(1e-4, 0.0, 0.0, 2e-4);
    assert!(matches!(
        propagate2(&g, &DMatrix::identity(3, 3), &IsotropyTest::default()),
        Err(CoreError::InvalidCovariance { .. })
    ));
    let mut neg = DMatrix::<f64>::identity(4, 4);
    neg[(2, 2)] = -1.0;
    assert!(matches!(
        propagate2(&g, &neg, &IsotropyTest::default()),
        Err(CoreError::InvalidCovariance { .. })
    ));
    let bad_g = Matrix2::new(f64::NAN, 0.0, 0.0, 0.0);
    assert!(matches!(
        propagate2(&bad_g, &DMatrix::identity(4, 4), &IsotropyTest::default()),
        Err(CoreError::NonFinite { .. })
    ));
    let bad_k = IsotropyTest {
        k: 0.0,
        ..IsotropyTest::default()
    };
    assert!(matches!(
        propagate2(&g, &DMatrix::identity(4, 4), &bad_k),
        Err(CoreError::InvalidParameter { name: "k", .. })
    ));
}

// ---------------------------------------------------------------------------------------
// Element covariance.
// Source: linear-triangle shape functions (Zienkiewicz & Taylor, The Finite Element
// Method, vol. 1): for the unit right triangle (0,0), (1,0), (0,1) the gradients are
// ∇N0 = (−1,−1), ∇N1 = (1,0), ∇N2 = (0,1); with σ² on every axis,
// var(G00) = σ²(1+1) = 2σ², cov(G00, G01) = σ²·(−1)(−1) = σ², cov(G00, G10) = 0.

#[test]
fn element_covariance_unit_triangle_by_hand() {
    let s2 = 1e-6;
    let cov = covariance_from_sigma(&[1e-3, 1e-3]).expect("positive");
    let c = element_gradient_covariance(&[[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]], &[cov; 3])
        .expect("valid triangle");
    let close = |a: f64, b: f64| assert!((a - b).abs() < 1e-18, "{a} vs {b}");
    close(c[(0, 0)], 2.0 * s2);
    close(c[(1, 1)], 2.0 * s2);
    close(c[(0, 1)], s2);
    close(c[(0, 2)], 0.0);
    close(c[(3, 3)], 2.0 * s2);
    close(c[(2, 3)], s2);
}

fn fit_gradient<const D: usize>(x: &[[f64; D]], u: &[[f64; D]]) -> SMatrix<f64, D, D> {
    let pts: Vec<Point<D>> = x
        .iter()
        .zip(u)
        .enumerate()
        .map(|(k, (x, u))| Point::new(format!("P{k}"), *x, *u))
        .collect();
    let set = PointSet::new(pts).expect("valid points");
    let members: Vec<usize> = (0..x.len()).collect();
    fit_points(
        &set,
        &members,
        "el",
        RegionKind::Group,
        None,
        &FitOptions::default(),
    )
    .expect("exact fit")
    .gradient
}

/// The gradient of an exact (D+1)-point least-squares fit is the element gradient, a
/// linear map of the vertex displacements: its numerical Jacobian J gives
/// cov(vec G) = J Σ Jᵀ independently of the shape-function formula.
fn check_element_against_jacobian<const D: usize>(x: &[[f64; D]], sig: &[[f64; D]]) {
    let covs: Vec<SMatrix<f64, D, D>> = sig
        .iter()
        .map(|s| covariance_from_sigma(s).expect("positive"))
        .collect();
    let c = element_gradient_covariance(x, &covs).expect("valid element");
    let n_in = (D + 1) * D;
    let base = vec![[0.0; D]; D + 1];
    let g0 = fit_gradient(x, &base);
    let h = 1e-3;
    let mut j = DMatrix::<f64>::zeros(D * D, n_in);
    for k in 0..=D {
        for a in 0..D {
            let mut u = base.clone();
            u[k][a] = h;
            let g = fit_gradient(x, &u);
            for r in 0..D {
                for s in 0..D {
                    j[(r * D + s, k * D + a)] = (g[(r, s)] - g0[(r, s)]) / h;
                }
            }
        }
    }
    let sigma = DMatrix::from_fn(n_in, n_in, |r, s| {
        if r == s {
            sig[r / D][r % D].powi(2)
        } else {
            0.0
        }
    });
    let expect = &j * sigma * j.transpose();
    let scale = expect.amax();
    assert!(
        (&c - &expect).amax() <= 1e-8 * scale,
        "element covariance\n{c}\nvs Jacobian\n{expect}"
    );
}

#[test]
fn element_covariance_matches_numerical_jacobian() {
    check_element_against_jacobian::<2>(
        &[[100.0, 200.0], [112.0, 203.0], [104.0, 215.0]],
        &[[0.002, 0.003], [0.001, 0.001], [0.004, 0.002]],
    );
    check_element_against_jacobian::<3>(
        &[
            [0.0, 0.0, 0.0],
            [10.0, 1.0, 0.5],
            [2.0, 9.0, 1.0],
            [1.0, 2.0, 8.0],
        ],
        &[
            [0.002, 0.003, 0.004],
            [0.001, 0.001, 0.002],
            [0.004, 0.002, 0.001],
            [0.003, 0.003, 0.003],
        ],
    );
}

#[test]
fn element_covariance_matches_monte_carlo() {
    let x = [[0.0, 0.0], [20.0, 2.0], [5.0, 15.0]];
    let sig = [[0.002, 0.003], [0.001, 0.002], [0.003, 0.001]];
    let covs: Vec<SMatrix<f64, 2, 2>> = sig
        .iter()
        .map(|s| covariance_from_sigma(s).expect("positive"))
        .collect();
    let c = element_gradient_covariance(&x, &covs).expect("valid element");
    let mut rng = Rng::new(7);
    let n = 6000;
    let mut samples = (0..4)
        .map(|_| Vec::with_capacity(n))
        .collect::<Vec<Vec<f64>>>();
    for _ in 0..n {
        let u: Vec<[f64; 2]> = sig
            .iter()
            .map(|s| [s[0] * rng.normal(), s[1] * rng.normal()])
            .collect();
        let g = fit_gradient(&x, &u);
        for r in 0..2 {
            for s in 0..2 {
                samples[r * 2 + s].push(g[(r, s)]);
            }
        }
    }
    // Relative standard error of a sample sd ≈ 1/√(2N) ≈ 0.9 %; allow 4 %.
    for k in 0..4 {
        let sd = sample_sd(&samples[k]);
        assert!(
            rel(sd, c[(k, k)].sqrt()) < 0.04,
            "component {k}: MC {sd} vs {}",
            c[(k, k)].sqrt()
        );
    }
}

#[test]
fn degenerate_element_is_rejected() {
    let cov = covariance_from_sigma(&[1e-3, 1e-3]).expect("positive");
    assert!(matches!(
        element_gradient_covariance(&[[0.0, 0.0], [1.0, 1.0], [2.0, 2.0]], &[cov; 3]),
        Err(CoreError::DegenerateElement { .. })
    ));
    assert!(matches!(
        element_gradient_covariance(&[[0.0, 0.0], [1.0, 0.0]], &[cov; 2]),
        Err(CoreError::TooFewPoints { .. })
    ));
    assert!(matches!(
        element_gradient_covariance(&[[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]], &[cov; 2]),
        Err(CoreError::InvalidParameter {
            name: "vertex_cov",
            ..
        })
    ));
}

// ---------------------------------------------------------------------------------------
// Monte Carlo against first order.

const N_MC: usize = 20_000;

#[test]
fn monte_carlo_2d_matches_first_order() {
    let mut rng = Rng::new(11);
    // e1 − e2 ≈ 8e-4 against sd ≈ 1e-5: far from isotropy, θ1 ≈ 0.3 rad (no wrap).
    let g0 = Matrix2::new(6e-4, 1.0e-4, 3.0e-4, -1e-4);
    let c = random_cov(&mut rng, 4, 1e-5);
    let first = propagate2(&g0, &c, &IsotropyTest::default()).expect("valid");
    assert!(!first.near_isotropic);
    let l = sampler(&c);
    let opts = KinematicsOptions::default();
    let mut cols: Vec<Vec<f64>> = (0..9)
        .map(|_| Vec::with_capacity(N_MC))
        .collect::<Vec<Vec<f64>>>();
    for _ in 0..N_MC {
        let d = draw(&mut rng, &l);
        let g = g0 + Matrix2::new(d[0], d[1], d[2], d[3]);
        let k = analyze2(&g, &opts).expect("finite gradient");
        let vals = [
            k.strain.exx,
            k.strain.eyy,
            k.strain.exy,
            k.rotation,
            k.volumetric,
            k.principal.e1,
            k.principal.e2,
            k.principal.theta1.expect("anisotropic sample"),
            k.max_shear.tensor_shear,
        ];
        for (col, v) in cols.iter_mut().zip(vals) {
            col.push(v);
        }
    }
    let expect = [
        ("exx", first.sd_exx),
        ("eyy", first.sd_eyy),
        ("exy", first.sd_exy),
        ("rotation", first.sd_rotation),
        ("volumetric", first.sd_volumetric),
        ("e1", first.sd_e1.expect("distinct")),
        ("e2", first.sd_e2.expect("distinct")),
        ("theta1", first.sd_theta1.expect("not isotropic")),
        ("max shear", first.sd_max_shear_tensor.expect("distinct")),
    ];
    for ((name, sd1), col) in expect.iter().zip(&cols) {
        let mc = sample_sd(col);
        assert!(
            rel(mc, *sd1) < 0.03,
            "{name}: Monte Carlo {mc:e} vs first order {sd1:e}"
        );
    }
    let eng = first.sd_max_shear_engineering.expect("distinct");
    assert!((eng - 2.0 * first.sd_max_shear_tensor.expect("distinct")).abs() < 1e-20);
}

/// Angle between two unit vectors, sign-insensitive (an eigenvector's sign is arbitrary).
fn axis_angle(a: &[f64; 3], b: &[f64; 3]) -> f64 {
    let d = (a[0] * b[0] + a[1] * b[1] + a[2] * b[2]).abs().min(1.0);
    d.acos()
}

#[test]
fn monte_carlo_3d_matches_first_order() {
    let mut rng = Rng::new(13);
    let g0 = Matrix3::new(
        8e-4, 1e-4, 0.5e-4, 2e-4, 2e-4, -0.8e-4, 0.3e-4, 0.4e-4, -5e-4,
    );
    let c = random_cov(&mut rng, 9, 1e-5);
    let first = propagate3(&g0, &c, &IsotropyTest::default()).expect("valid");
    assert_eq!(first.gap_flagged, [false, false]);
    let opts = KinematicsOptions::default();
    let k0 = analyze3(&g0, &opts).expect("finite");
    let n0 = [
        k0.principal.n1.expect("distinct"),
        k0.principal.n2.expect("distinct"),
        k0.principal.n3.expect("distinct"),
    ];
    let l = sampler(&c);
    let mut cols: Vec<Vec<f64>> = (0..6)
        .map(|_| Vec::with_capacity(N_MC))
        .collect::<Vec<Vec<f64>>>();
    let mut ang2 = [0.0_f64; 3];
    for _ in 0..N_MC {
        let d = draw(&mut rng, &l);
        let g = g0 + Matrix3::from_row_slice(&d);
        let k = analyze3(&g, &opts).expect("finite gradient");
        let p = k.principal;
        let vals = [
            p.e1,
            p.e2,
            p.e3,
            k.max_shear.tensor_shear,
            k.volumetric,
            k.strain.exz,
        ];
        for (col, v) in cols.iter_mut().zip(vals) {
            col.push(v);
        }
        let n = [p.n1, p.n2, p.n3].map(|v| v.expect("distinct sample"));
        for i in 0..3 {
            ang2[i] += axis_angle(&n[i], &n0[i]).powi(2);
        }
    }
    let expect = [
        ("e1", first.sd_principal[0].expect("distinct")),
        ("e2", first.sd_principal[1].expect("distinct")),
        ("e3", first.sd_principal[2].expect("distinct")),
        ("max shear", first.sd_max_shear_tensor.expect("distinct")),
        ("volumetric", first.sd_volumetric),
        ("exz", first.sd_exz),
    ];
    for ((name, sd1), col) in expect.iter().zip(&cols) {
        let mc = sample_sd(col);
        assert!(
            rel(mc, *sd1) < 0.03,
            "{name}: Monte Carlo {mc:e} vs first order {sd1:e}"
        );
    }
    // RMS angular deviation of each direction against sd_direction.
    for i in 0..3 {
        let rms = (ang2[i] / N_MC as f64).sqrt();
        let sd1 = first.sd_direction[i].expect("not flagged");
        assert!(
            rel(rms, sd1) < 0.04,
            "direction {i}: Monte Carlo RMS {rms:e} vs {sd1:e}"
        );
    }
}

// ---------------------------------------------------------------------------------------
// Isotropy flag.
// Source: Rayleigh distribution. For an isotropic truth (R = 0) with independent noise of
// sd s on d = (exx−eyy)/2 and on exy, R̂ is Rayleigh(s) and the first-order sd(R̂) is s,
// so R̂ < 2·sd(R̂) with probability 1 − exp(−2) ≈ 0.865.

#[test]
fn isotropic_gradient_with_noise_is_flagged() {
    let mut rng = Rng::new(17);
    let s = 1e-5;
    // Independent noise of sd s on G00 − G11 halves and on the shear: cov of vec(G) with
    // var(G00) = var(G11) = 2s², var(G01) = var(G10) = 2s² → var(d) = s², var(exy) = s².
    let c = DMatrix::<f64>::identity(4, 4) * (2.0 * s * s);
    let l = sampler(&c);
    let trials = 2000;
    let mut flagged = 0;
    for _ in 0..trials {
        let d = draw(&mut rng, &l);
        let g = Matrix2::new(2e-4 + d[0], d[1], d[2], 2e-4 + d[3]);
        let u = propagate2(&g, &c, &IsotropyTest::default()).expect("valid");
        if u.near_isotropic {
            flagged += 1;
            assert!(u.sd_theta1.is_none());
            assert!(
                u.theta1_withheld
                    .as_deref()
                    .is_some_and(|r| r.contains("k·sd(R)"))
            );
        } else {
            assert!(u.sd_theta1.is_some() && u.theta1_withheld.is_none());
        }
    }
    let p = 1.0 - (-2.0_f64).exp();
    let frac = flagged as f64 / trials as f64;
    let tol = 4.0 * (p * (1.0 - p) / trials as f64).sqrt();
    assert!(
        (frac - p).abs() < tol,
        "flagged fraction {frac} vs Rayleigh {p}"
    );
    // Exactly isotropic: no derivative, every sd of the principal values withheld.
    let iso = propagate2(
        &Matrix2::new(2e-4, 0.0, 0.0, 2e-4),
        &c,
        &IsotropyTest::default(),
    )
    .expect("valid");
    assert!(iso.near_isotropic && iso.sd_e1.is_none() && iso.sd_theta1.is_none());
    assert!(
        iso.theta1_withheld
            .as_deref()
            .is_some_and(|r| r.contains("coincide"))
    );
    // Far from isotropy: not flagged.
    let far = propagate2(
        &Matrix2::new(5e-4, 0.0, 0.0, -5e-4),
        &c,
        &IsotropyTest::default(),
    )
    .expect("valid");
    assert!(!far.near_isotropic && far.sd_theta1.is_some());
}

#[test]
fn near_isotropic_3d_pair_is_flagged() {
    // e2 ≈ e3 within noise: n1 is meaningful, n2 and n3 are not.
    let s = 1e-5;
    let c = DMatrix::<f64>::identity(9, 9) * (s * s);
    let g = Matrix3::from_diagonal(&kinema_core::kinematics::nalgebra::Vector3::new(
        5e-4, 1e-4, 0.99e-4,
    ));
    let u = propagate3(&g, &c, &IsotropyTest::default()).expect("valid");
    assert_eq!(u.gap_flagged, [false, true]);
    assert!(u.sd_direction[0].is_some());
    assert!(u.sd_direction[1].is_none() && u.sd_direction[2].is_none());
    assert!(
        u.direction_withheld[2]
            .as_deref()
            .is_some_and(|r| r.contains("e2 − e3"))
    );
    // Exactly repeated e2 = e3: their one-by-one sds are withheld, e1's is given.
    let g2 = Matrix3::from_diagonal(&kinema_core::kinematics::nalgebra::Vector3::new(
        5e-4, 1e-4, 1e-4,
    ));
    let u2 = propagate3(&g2, &c, &IsotropyTest::default()).expect("valid");
    assert!(u2.sd_principal[0].is_some());
    assert!(u2.sd_principal[1].is_none() && u2.sd_principal[2].is_none());
    assert!(u2.sd_max_shear_tensor.is_none());
    assert!(u2.sd_gaps[0].is_some() && u2.sd_gaps[1].is_none());
}
