//! Is the strain real? χ² / F tests of "strain = 0", the epoch-change test, and the
//! minimal detectable strain.
//!
//! Sources:
//! - level of a test: under H0 the rejection probability equals α; over N independent
//!   trials the rejection count is Binomial(N, α) (any statistics text);
//! - χ²/F tests of the variance factor and of linear hypotheses: Koch, *Parameter
//!   Estimation and Hypothesis Testing in Linear Models*; Ghilani & Wolf, *Adjustment
//!   Computations*;
//! - Baarda, *A testing procedure for use in geodetic networks* (1968):
//!   λ₀(α = 0.001, β = 0.80, m = 1) = 17.075 — from memory;
//!   λ₀(α = 0.05, β = 0.80, m = 1) ≈ 7.849 = (1.960 + 0.8416)² — from memory;
//! - non-central χ² with one degree of freedom: `F(x; 1, λ) = Φ(√x − √λ) − Φ(−√x − √λ)`
//!   (the square of a normal variable with mean √λ; Johnson, Kotz & Balakrishnan,
//!   *Continuous Univariate Distributions*, vol. 2, ch. 29).

// Index loops over parallel arrays read most plainly in these checks.
#![allow(clippy::needless_range_loop)]

use kinema_core::CoreError;
use kinema_core::estimate::RegionKind;
use kinema_core::estimate::lsq::{FitOptions, fit_points};
use kinema_core::kinematics::nalgebra::{DMatrix, Matrix2, Matrix3};
use kinema_core::significance::{
    DeformationParameters, Distribution, VarianceFactor, chi2_critical, minimal_detectable_strain,
    noncentral_chi2_cdf, noncentrality, test_strain_change, test_zero_strain,
};
use kinema_core::{Point, PointSet};
use statrs::distribution::{ContinuousCDF, Normal};

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

/// An invented 2D monitoring network of 8 points (metres), σ = 2 mm per axis.
const NET: [[f64; 2]; 8] = [
    [0.0, 0.0],
    [40.0, 3.0],
    [82.0, -2.0],
    [5.0, 35.0],
    [44.0, 41.0],
    [79.0, 38.0],
    [20.0, 70.0],
    [65.0, 74.0],
];
const SIGMA: f64 = 0.002;

/// Fits `u = t + G x` to the network displaced by the gradient `g` (plus translation)
/// and normal noise of sd `SIGMA`, weights `1/σ²`.
fn noisy_fit(rng: &mut Rng, g: &Matrix2<f64>) -> kinema_core::estimate::GradientEstimate<2> {
    let pts: Vec<Point<2>> = NET
        .iter()
        .enumerate()
        .map(|(k, x)| {
            let u = [
                0.010 + g[(0, 0)] * x[0] + g[(0, 1)] * x[1] + SIGMA * rng.normal(),
                -0.004 + g[(1, 0)] * x[0] + g[(1, 1)] * x[1] + SIGMA * rng.normal(),
            ];
            Point::new(format!("N{k}"), *x, u).with_sigma([SIGMA, SIGMA])
        })
        .collect();
    let set = PointSet::new(pts).expect("valid network");
    let members: Vec<usize> = (0..NET.len()).collect();
    fit_points(
        &set,
        &members,
        "net",
        RegionKind::Network,
        None,
        &FitOptions::default(),
    )
    .expect("well-conditioned network")
}

/// 4-sigma binomial tolerance on a rejection rate.
fn binomial_tol(p: f64, n: usize) -> f64 {
    4.0 * (p * (1.0 - p) / n as f64).sqrt()
}

#[test]
fn zero_strain_is_rejected_at_rate_alpha() {
    // A rigid motion (translation and a rotation of 5e-4 rad) is no strain: the tests
    // use the deformation parameters only, so the rejection rate must still be α.
    let w = 5e-4;
    let g = Matrix2::new(0.0, -w, w, 0.0);
    let alpha = 0.05;
    let trials = 2000;
    let mut rng = Rng::new(3);
    let (mut rej_chi2, mut rej_f) = (0, 0);
    for _ in 0..trials {
        let est = noisy_fit(&mut rng, &g);
        let p_apriori = DeformationParameters::from_estimate(&est, Some(1.0)).expect("fit");
        let t = test_zero_strain(&p_apriori, alpha).expect("valid");
        assert_eq!(t.distribution, Distribution::ChiSquared);
        assert_eq!((t.dof1, t.dof2), (3, None));
        rej_chi2 += usize::from(t.significant);
        let p_est = DeformationParameters::from_estimate(&est, None).expect("fit");
        let f = test_zero_strain(&p_est, alpha).expect("valid");
        assert_eq!(f.distribution, Distribution::F);
        // r = n·D − D·(D+1) = 16 − 6.
        assert_eq!((f.dof1, f.dof2), (3, Some(10)));
        assert_eq!(f.significant, f.p_value < alpha);
        assert_eq!(f.significant, f.statistic > f.critical_value);
        rej_f += usize::from(f.significant);
    }
    for (name, rej) in [("chi2", rej_chi2), ("F", rej_f)] {
        let rate = rej as f64 / trials as f64;
        assert!(
            (rate - alpha).abs() < binomial_tol(alpha, trials),
            "{name}: rejection rate {rate} vs alpha {alpha}"
        );
    }
}

#[test]
fn large_strain_is_significant() {
    let mut rng = Rng::new(5);
    // 5e-4 strain over ~80 m is 40 mm of relative motion against 2 mm noise.
    let g = Matrix2::new(5e-4, 1.5e-4, 1.5e-4, -2.5e-4);
    let est = noisy_fit(&mut rng, &g);
    for apriori in [Some(1.0), None] {
        let p = DeformationParameters::from_estimate(&est, apriori).expect("fit");
        let t = test_zero_strain(&p, 0.01).expect("valid");
        assert!(t.significant && t.p_value < 1e-6, "{t:?}");
    }
}

#[test]
fn statistic_by_hand() {
    // Q = diag(1, 4, 0.25)·1e-10, ε̂ = (2e-5, 2e-5, 1e-5):
    // T = 4e-10/1e-10 + 4e-10/4e-10 + 1e-10/0.25e-10 = 4 + 1 + 4 = 9.
    let q = DMatrix::from_diagonal(&kinema_core::kinematics::nalgebra::DVector::from_vec(vec![
        1e-10, 4e-10, 0.25e-10,
    ]));
    let p = DeformationParameters {
        labels: vec!["exx", "eyy", "exy"],
        strain: vec![2e-5, 2e-5, 1e-5],
        cofactor: q.clone(),
        factor: VarianceFactor::Apriori { sigma0_sq: 2.0 },
    };
    let t = test_zero_strain(&p, 0.05).expect("valid");
    assert!((t.quadratic_form - 9.0).abs() < 1e-12);
    assert!((t.statistic - 4.5).abs() < 1e-12);
    // χ²(3) upper tail, closed form for 3 dof (Johnson, Kotz & Balakrishnan, vol. 1,
    // ch. 18): 2(1 − Φ(√x)) + √(2x/π)·e^{−x/2}.
    let x: f64 = 4.5;
    let n = Normal::new(0.0, 1.0).expect("standard normal");
    let sf =
        2.0 * (1.0 - n.cdf(x.sqrt())) + (2.0 * x / std::f64::consts::PI).sqrt() * (-x / 2.0).exp();
    // statrs' regularised gamma function is good to ~1e-12 relative.
    assert!((t.p_value - sf).abs() < 1e-10, "{} vs {sf}", t.p_value);
    let pf = DeformationParameters {
        factor: VarianceFactor::Estimated {
            sigma0_sq: 1.5,
            redundancy: 12,
        },
        ..p
    };
    let f = test_zero_strain(&pf, 0.05).expect("valid");
    assert!((f.statistic - 9.0 / (3.0 * 1.5)).abs() < 1e-12);
}

#[test]
fn epoch_change_test() {
    let alpha = 0.05;
    let g = Matrix2::new(1e-4, 0.3e-4, 0.3e-4, -0.5e-4);
    let mut rng = Rng::new(9);
    let trials = 1500;
    let mut rej = 0;
    for _ in 0..trials {
        let a = noisy_fit(&mut rng, &g);
        let b = noisy_fit(&mut rng, &g);
        let pa = DeformationParameters::from_estimate(&a, None).expect("fit");
        let pb = DeformationParameters::from_estimate(&b, None).expect("fit");
        let t = test_strain_change(&pa, &pb, alpha).expect("valid");
        assert_eq!(t.dof2, Some(20));
        let (s1, s2) = (pa.factor.sigma0_sq(), pb.factor.sigma0_sq());
        assert!((t.sigma0_sq - (10.0 * s1 + 10.0 * s2) / 20.0).abs() < 1e-12 * t.sigma0_sq);
        rej += usize::from(t.significant);
    }
    let rate = rej as f64 / trials as f64;
    assert!(
        (rate - alpha).abs() < binomial_tol(alpha, trials),
        "rate {rate}"
    );
    // A real change of 1e-4 in exx is detected.
    let a = noisy_fit(&mut rng, &g);
    let b = noisy_fit(&mut rng, &(g + Matrix2::new(1e-4, 0.0, 0.0, 0.0)));
    let pa = DeformationParameters::from_estimate(&a, Some(1.0)).expect("fit");
    let pb = DeformationParameters::from_estimate(&b, Some(1.0)).expect("fit");
    let t = test_strain_change(&pa, &pb, alpha).expect("valid");
    assert!(t.significant && t.distribution == Distribution::ChiSquared);
    // With a shared σ₀, Q_Δ = Q1 + Q2 by hand.
    let q = &pa.cofactor + &pb.cofactor;
    let d: Vec<f64> = (0..3).map(|k| pb.strain[k] - pa.strain[k]).collect();
    let dv = kinema_core::kinematics::nalgebra::DVector::from_vec(d);
    let qf = (dv.transpose() * q.try_inverse().expect("regular") * &dv)[(0, 0)];
    assert!((t.statistic - qf).abs() < 1e-9 * qf);
    // Mixing a trusted and an estimated factor is refused.
    let pe = DeformationParameters::from_estimate(&b, None).expect("fit");
    assert!(matches!(
        test_strain_change(&pa, &pe, alpha),
        Err(CoreError::InvalidParameter { name: "factor", .. })
    ));
}

#[test]
fn baarda_noncentrality() {
    // Source: Baarda (1968), from memory.
    let l1 = noncentrality(0.001, 0.80, 1).expect("valid");
    assert!((l1 - 17.075).abs() < 0.005, "λ₀ = {l1}");
    let l2 = noncentrality(0.05, 0.80, 1).expect("valid");
    assert!((l2 - 7.849).abs() < 0.002, "λ₀ = {l2}");
    // More degrees of freedom need a larger shift for the same power.
    let l3 = noncentrality(0.05, 0.80, 3).expect("valid");
    assert!(l3 > l2);
    // At λ₀ the power is β by definition.
    let c = chi2_critical(0.05, 3.0).expect("valid");
    let power = 1.0 - noncentral_chi2_cdf(c, 3.0, l3).expect("valid");
    assert!((power - 0.80).abs() < 1e-9);
}

#[test]
fn noncentral_chi2_one_dof_closed_form() {
    // Source: X = (Z + √λ)², Z standard normal.
    let n = Normal::new(0.0, 1.0).expect("standard normal");
    for &(x, lam) in &[
        (0.5, 0.3),
        (3.84, 7.85),
        (10.0, 2.0),
        (25.0, 40.0),
        (100.0, 150.0),
    ] {
        let (sx, sl) = (f64::sqrt(x), f64::sqrt(lam));
        let exact = n.cdf(sx - sl) - n.cdf(-sx - sl);
        let got = noncentral_chi2_cdf(x, 1.0, lam).expect("valid");
        assert!(
            (got - exact).abs() < 1e-10,
            "x {x}, λ {lam}: {got} vs {exact}"
        );
    }
}

#[test]
fn minimal_detectable_strain_is_detected_with_power_beta() {
    // Q = diag(q) with a correlation-free design: δ_k = √(λ₀ σ₀² q_k).
    let qd = [4e-12, 1e-12, 2.25e-12];
    let q = DMatrix::from_diagonal(&kinema_core::kinematics::nalgebra::DVector::from_row_slice(
        &qd,
    ));
    let p = DeformationParameters {
        labels: vec!["exx", "eyy", "exy"],
        strain: vec![0.0; 3],
        cofactor: q.clone(),
        factor: VarianceFactor::Apriori { sigma0_sq: 1.0 },
    };
    let (alpha, power) = (0.05, 0.80);
    let m = minimal_detectable_strain(&p, alpha, power).expect("valid");
    let l0 = noncentrality(alpha, power, 3).expect("valid");
    for k in 0..3 {
        assert!((m.per_component[k] - (l0 * qd[k]).sqrt()).abs() < 1e-15);
    }
    assert!((m.worst - (l0 * 4e-12).sqrt()).abs() < 1e-15);
    assert!((m.best - (l0 * 1e-12).sqrt()).abs() < 1e-15);
    assert!((m.worst_direction[0] - 1.0).abs() < 1e-12);
    // Monte Carlo: a true strain of the minimal detectable size along exx is rejected at
    // the rate β (definition of power).
    let mut rng = Rng::new(21);
    let trials = 4000;
    let mut rej = 0;
    for _ in 0..trials {
        let e: Vec<f64> = (0..3)
            .map(|k| if k == 0 { m.per_component[0] } else { 0.0 } + qd[k].sqrt() * rng.normal())
            .collect();
        let pk = DeformationParameters {
            strain: e,
            ..p.clone()
        };
        rej += usize::from(test_zero_strain(&pk, alpha).expect("valid").significant);
    }
    let rate = rej as f64 / trials as f64;
    assert!(
        (rate - power).abs() < binomial_tol(power, trials),
        "power {rate}"
    );
}

#[test]
fn three_d_parameters_and_bad_input() {
    // 3D: six deformation parameters from a gradient cofactor.
    let g = Matrix3::new(1e-4, 2e-5, 0.0, 0.0, -3e-5, 1e-5, 4e-5, 0.0, 2e-5);
    let qg = DMatrix::<f64>::identity(9, 9) * 1e-12;
    let p =
        DeformationParameters::from_gradient(&g, &qg, VarianceFactor::Apriori { sigma0_sq: 1.0 })
            .expect("valid");
    assert_eq!(p.labels, ["exx", "eyy", "ezz", "exy", "eyz", "exz"]);
    assert!((p.strain[5] - 2e-5).abs() < 1e-20);
    // var(exz) = (1 + 1)/4·1e-12.
    assert!((p.cofactor[(5, 5)] - 0.5e-12).abs() < 1e-24);
    let t = test_zero_strain(&p, 0.05).expect("valid");
    assert_eq!(t.dof1, 6);
    assert!(t.significant);
    // A singular cofactor: exy not observed at all.
    let mut qs = DMatrix::<f64>::identity(4, 4) * 1e-12;
    for (i, j) in [(1, 1), (2, 2)] {
        qs[(i, j)] = 0.0;
    }
    let ps = DeformationParameters::from_gradient(
        &Matrix2::new(1e-4, 0.0, 0.0, 1e-4),
        &qs,
        VarianceFactor::Apriori { sigma0_sq: 1.0 },
    )
    .expect("parameters");
    assert!(matches!(
        test_zero_strain(&ps, 0.05),
        Err(CoreError::SingularCovariance { .. })
    ));
    assert!(matches!(
        minimal_detectable_strain(&ps, 0.05, 0.8),
        Err(CoreError::SingularCovariance { .. })
    ));
    assert!(matches!(
        test_zero_strain(&p, 1.5),
        Err(CoreError::InvalidParameter { name: "alpha", .. })
    ));
    assert!(matches!(
        noncentrality(0.05, 0.01, 1),
        Err(CoreError::InvalidParameter { name: "power", .. })
    ));
    assert!(matches!(
        DeformationParameters::from_gradient(
            &g,
            &qg,
            VarianceFactor::Estimated {
                sigma0_sq: 1.0,
                redundancy: 0
            }
        ),
        Err(CoreError::InvalidParameter {
            name: "redundancy",
            ..
        })
    ));
    assert!(matches!(
        noncentral_chi2_cdf(1.0, 2.0, -1.0),
        Err(CoreError::InvalidParameter { .. })
    ));
    // An exact fit has no estimated factor.
    let pts: Vec<Point<2>> = NET[..3]
        .iter()
        .enumerate()
        .map(|(k, x)| Point::new(format!("E{k}"), *x, [0.0, 0.0]))
        .collect();
    let set = PointSet::new(pts).expect("valid");
    let est = fit_points(
        &set,
        &[0, 1, 2],
        "tri",
        RegionKind::Group,
        None,
        &FitOptions::default(),
    )
    .expect("exact fit");
    assert!(matches!(
        DeformationParameters::from_estimate(&est, None),
        Err(CoreError::InvalidParameter {
            name: "variance_factor",
            ..
        })
    ));
}
