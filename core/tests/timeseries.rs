//! Time series of strain: rates, increments, missing points, temperature compensation,
//! rigid motion and bad input.

use kinema_core::CoreError;
use kinema_core::PointSet;
use kinema_core::estimate::elements::{ElementSpec, OrientationPolicy, element_strains};
use kinema_core::estimate::lsq::{FitOptions, Group, fit_groups};
use kinema_core::estimate::quality::QualityThresholds;
use kinema_core::points::Point;
use kinema_core::timeseries::{
    DAYS_PER_JULIAN_YEAR, Epoch, EpochPoint, Excluded, Rate, RateWeighting, RegionSeries, Regions,
    SECONDS_PER_DAY, SeriesOptions, StrainSigma, ThermalCompensation, strain_component_names,
    strain_series, weighted_slope,
};
use nalgebra::{Matrix2, Matrix3, SMatrix};

/// 2001-09-09T01:46:40Z, an arbitrary baseline instant (Unix time 1e9 s).
const T0: f64 = 1.0e9;

/// Irregular epoch offsets, days from the baseline.
const DAYS: [f64; 5] = [0.0, 3.5, 17.25, 40.0, 101.75];

/// A 2D network on a 3×3 lattice with jittered coordinates (metres, invented).
fn net2() -> Vec<(String, [f64; 2])> {
    let mut v = Vec::new();
    for i in 0..3 {
        for j in 0..3 {
            let x = 5.0 * i as f64 + 0.37 * ((i * 3 + j) % 4) as f64;
            let y = 4.0 * j as f64 + 0.21 * ((i + 2 * j) % 3) as f64;
            v.push((format!("P{i}{j}"), [x, y]));
        }
    }
    v
}

/// Counter-clockwise triangles over `net2`.
fn triangles() -> Vec<ElementSpec> {
    let mut t = Vec::new();
    for i in 0..2 {
        for j in 0..2 {
            let a = format!("P{i}{j}");
            let b = format!("P{}{j}", i + 1);
            let c = format!("P{}{}", i + 1, j + 1);
            let d = format!("P{i}{}", j + 1);
            t.push(ElementSpec::new(format!("T{i}{j}a"), [&a, &b, &c]));
            t.push(ElementSpec::new(format!("T{i}{j}b"), [&a, &c, &d]));
        }
    }
    t
}

fn groups2() -> Vec<Group> {
    let g = |name: &str, ids: &[&str]| Group {
        name: name.into(),
        point_ids: ids.iter().map(|s| (*s).to_owned()).collect(),
    };
    vec![
        g("west", &["P00", "P01", "P02", "P10", "P11"]),
        g("east", &["P12", "P20", "P21", "P22"]),
        g(
            "all",
            &[
                "P00", "P01", "P02", "P10", "P11", "P12", "P20", "P21", "P22",
            ],
        ),
    ]
}

fn elements_regions() -> Regions {
    Regions::Elements {
        elements: triangles(),
        policy: OrientationPolicy::Require,
        thresholds: QualityThresholds::off(),
    }
}

fn groups_regions() -> Regions {
    Regions::Groups {
        groups: groups2(),
        options: FitOptions::default(),
    }
}

/// Epochs with positions `x + u(x, t)` for a displacement field `u`.
fn epochs_from<const D: usize>(
    net: &[(String, [f64; D])],
    days: &[f64],
    u: impl Fn([f64; D], f64) -> [f64; D],
) -> Vec<Epoch<D>> {
    days.iter()
        .enumerate()
        .map(|(k, &d)| {
            let pts = net
                .iter()
                .map(|(id, x)| {
                    let du = u(*x, d);
                    let mut p = *x;
                    for i in 0..D {
                        p[i] += du[i];
                    }
                    EpochPoint::new(id.clone(), p)
                })
                .collect();
            Epoch::new(format!("E{k}"), T0 + d * SECONDS_PER_DAY, pts)
        })
        .collect()
}

fn rel_close(a: f64, b: f64, rel: f64, what: &str) {
    assert!(
        (a - b).abs() <= rel * b.abs().max(f64::MIN_POSITIVE),
        "{what}: {a} vs {b} (relative tol {rel})"
    );
}

fn rates(r: &RegionSeries<2>) -> Vec<f64> {
    match &r.rate {
        Rate::Estimated(rr) => rr.components.iter().map(|c| c.per_day).collect(),
        Rate::TooFewEpochs { .. } => panic!("region {} has no rate", r.region),
    }
}

fn sym_components<const D: usize>(g: &SMatrix<f64, D, D>) -> Vec<f64> {
    let pairs: &[(usize, usize)] = if D == 2 {
        &[(0, 0), (1, 1), (0, 1)]
    } else {
        &[(0, 0), (1, 1), (2, 2), (0, 1), (1, 2), (0, 2)]
    };
    pairs
        .iter()
        .map(|&(i, j)| 0.5 * (g[(i, j)] + g[(j, i)]))
        .collect()
}

// ---------------------------------------------------------------------------
// Uniform strain growing linearly in time
// ---------------------------------------------------------------------------

// Source: homogeneous deformation u = G·x has the uniform gradient G (any continuum
// mechanics text, e.g. Malvern, Introduction to the Mechanics of a Continuous Medium,
// §4.2); with G(t) = Ġ·t the small strain is ε(t) = sym(Ġ)·t, so the least-squares line
// through exact samples has slope sym(Ġ) exactly (Draper & Smith, Applied Regression
// Analysis, ch. 1: a straight line through collinear data has zero residuals).
#[test]
fn linear_growth_gives_exact_rates_and_increments_2d() {
    // Ġ per day, with a rotation part (G01 ≠ G10).
    let gdot = Matrix2::new(2.0e-5, -0.7e-5, 1.3e-5, -1.1e-5);
    let edot = sym_components(&gdot);
    let net = net2();
    let eps = epochs_from(&net, &DAYS, |x, d| {
        let u = gdot * nalgebra::Vector2::new(x[0], x[1]) * d;
        [u[0], u[1]]
    });
    for regions in [elements_regions(), groups_regions()] {
        let out = strain_series(&eps, &regions, &SeriesOptions::new("E0")).expect("series");
        assert!(out.excluded.is_empty());
        assert_eq!(out.components, strain_component_names::<2>());
        assert!(!out.regions.is_empty());
        for r in &out.regions {
            assert_eq!(r.samples.len(), DAYS.len());
            let per_day = rates(r);
            for c in 0..3 {
                rel_close(per_day[c], edot[c], 1e-12, "rate per day");
            }
            let Rate::Estimated(rr) = &r.rate else {
                unreachable!()
            };
            assert_eq!(rr.n_epochs, 5);
            assert_eq!(rr.dof, 3);
            assert!(!rr.weighted);
            for c in &rr.components {
                // Julian year: 365.25 days (IAU definition of the Julian year).
                assert_eq!(c.per_year, c.per_day * 365.25);
                assert!(c.std_per_day.expect("std with 5 epochs") <= 1e-12 * edot[0].abs());
            }
            assert_eq!(r.increments.len(), DAYS.len() - 1);
            for (k, inc) in r.increments.iter().enumerate() {
                let dt = DAYS[k + 1] - DAYS[k];
                assert!((inc.dt_days - dt).abs() < 1e-9);
                for (got, e) in inc.strain.iter().zip(&edot) {
                    rel_close(*got, e * dt, 1e-10, "increment");
                }
                // Rotation increment ω̇·Δt, ω = (G10 − G01)/2.
                let wdot = 0.5 * (gdot[(1, 0)] - gdot[(0, 1)]);
                rel_close(inc.rotation[0], wdot * dt, 1e-10, "rotation increment");
            }
            // Baseline sample is exactly zero.
            assert!(r.samples[0].strain.iter().all(|v| *v == 0.0));
        }
    }
    assert_eq!(DAYS_PER_JULIAN_YEAR, 365.25);
}

// Source: as above (homogeneous deformation; straight line through collinear data), 3D.
#[test]
fn linear_growth_gives_exact_rates_3d() {
    let gdot = Matrix3::new(
        1.5e-5, 0.4e-5, -0.9e-5, 0.2e-5, -2.0e-5, 0.6e-5, 1.1e-5, -0.3e-5, 0.8e-5,
    );
    let edot = sym_components(&gdot);
    let net: Vec<(String, [f64; 3])> = vec![
        ("A".into(), [0.0, 0.0, 0.0]),
        ("B".into(), [6.0, 0.3, 0.2]),
        ("C".into(), [0.4, 5.0, -0.1]),
        ("D".into(), [0.2, 0.1, 4.0]),
        ("E".into(), [5.5, 5.2, 4.3]),
    ];
    let eps = epochs_from(&net, &DAYS, |x, d| {
        let u = gdot * nalgebra::Vector3::new(x[0], x[1], x[2]) * d;
        [u[0], u[1], u[2]]
    });
    let regions = [
        Regions::Elements {
            elements: vec![
                ElementSpec::new("K1", ["A", "B", "C", "D"]),
                ElementSpec::new("K2", ["B", "E", "C", "D"]),
            ],
            policy: OrientationPolicy::Fix,
            thresholds: QualityThresholds::off(),
        },
        Regions::Groups {
            groups: vec![Group {
                name: "block".into(),
                point_ids: ["A", "B", "C", "D", "E"].map(String::from).to_vec(),
            }],
            options: FitOptions::default(),
        },
    ];
    for reg in &regions {
        let out = strain_series(&eps, reg, &SeriesOptions::new("E0")).expect("series");
        for r in &out.regions {
            let Rate::Estimated(rr) = &r.rate else {
                panic!("no rate")
            };
            assert_eq!(rr.components.len(), 6);
            for (c, cr) in rr.components.iter().enumerate() {
                rel_close(cr.per_day, edot[c], 1e-12, "3D rate");
                assert_eq!(cr.per_year, cr.per_day * 365.25);
            }
        }
    }
}

// ---------------------------------------------------------------------------
// Increments equal the strain of the incremental displacement
// ---------------------------------------------------------------------------

// Source: linearity of the estimators in u for fixed geometry — the element gradient
// G = D·E⁻¹ (Zienkiewicz & Taylor, The Finite Element Method, constant-strain triangle)
// and the least-squares solution (Nᵀ P N)⁻¹ Nᵀ P u (Ghilani & Wolf, Adjustment
// Computations) are linear maps of u, so G(u_{k+1}) − G(u_k) = G(u_{k+1} − u_k).
#[test]
fn increments_equal_strain_of_incremental_displacement() {
    let net = net2();
    // A non-uniform, time-varying field, so that the regions differ.
    let eps = epochs_from(&net, &DAYS, |x, d| {
        let s = d / 100.0;
        [
            1e-3 * s * x[0] * x[1] / 10.0 + 2e-4 * s * s * x[1],
            -5e-4 * s * x[0] * x[0] / 10.0 + 3e-4 * s.sqrt() * x[1],
        ]
    });
    for regions in [elements_regions(), groups_regions()] {
        let out = strain_series(&eps, &regions, &SeriesOptions::new("E0")).expect("series");
        for k in 0..DAYS.len() - 1 {
            let pts: Vec<Point<2>> = eps[0]
                .points
                .iter()
                .enumerate()
                .map(|(i, p)| {
                    let a = eps[k].points[i].x;
                    let b = eps[k + 1].points[i].x;
                    Point::new(p.id.clone(), p.x, [b[0] - a[0], b[1] - a[1]])
                })
                .collect();
            let set = PointSet::new(pts).expect("set");
            let direct: Vec<(String, Matrix2<f64>)> = match &regions {
                Regions::Elements {
                    elements,
                    policy,
                    thresholds,
                } => element_strains(&set, elements, *policy, thresholds)
                    .expect("elements")
                    .0
                    .into_iter()
                    .map(|g| (g.label, g.gradient))
                    .collect(),
                Regions::Groups { groups, options } => fit_groups(&set, groups, options)
                    .expect("groups")
                    .into_iter()
                    .map(|g| (g.label, g.gradient))
                    .collect(),
            };
            for (label, g) in direct {
                let r = out
                    .regions
                    .iter()
                    .find(|r| r.region == label)
                    .expect("region");
                let inc = &r.increments[k];
                assert_eq!(inc.from, format!("E{k}"));
                let want = sym_components(&g);
                assert_eq!(inc.strain.len(), want.len());
                for (got, w) in inc.strain.iter().zip(&want) {
                    assert!((got - w).abs() <= 1e-13, "{label} epoch {k}: {got} vs {w}");
                }
            }
        }
    }
}

// ---------------------------------------------------------------------------
// Weighted regression: closed form
// ---------------------------------------------------------------------------

// Source: Draper & Smith, Applied Regression Analysis, 3rd ed., weighted least
// squares (§9.2, section number from memory): b = Σw(t−t̄)(y−ȳ)/Σw(t−t̄)², var b = σ̂²/Σw(t−t̄)², σ̂² = Σw r²/(n−2).
// Hand computation with t = 0,1,2,4, y = 1.0,2.9,5.2,8.8, σ = 0.1,0.2,0.1,0.2:
// w = 100,25,100,25; Σw = 250; t̄ = 325/250 = 1.3; ȳ = 912.5/250 = 3.65;
// S_tt = 100·1.69 + 25·0.09 + 100·0.49 + 25·7.29 = 402.5;
// S_ty = 100·(−1.3)(−2.65) + 25·(−0.3)(−0.75) + 100·0.7·1.55 + 25·2.7·5.15 = 806.25;
// Σw(y−ȳ)² = 1619.625; Σw r² = 1619.625 − S_ty²/S_tt.
// Cross-checked with numpy.polyfit(t, y, 1, w=1/σ, cov=True): slope 2.003105590062112,
// its standard deviation 0.0757662145688292.
#[test]
fn weighted_slope_matches_closed_form_four_points() {
    let t = [0.0, 1.0, 2.0, 4.0];
    let y = [1.0, 2.9, 5.2, 8.8];
    let s = [0.1, 0.2, 0.1, 0.2];
    let fit = weighted_slope(&t, &y, Some(&s)).expect("fit");
    let b = 806.25 / 402.5;
    let s0 = (1619.625 - 806.25 * 806.25 / 402.5) / 2.0;
    rel_close(fit.slope, b, 1e-14, "slope");
    rel_close(fit.t_mean, 1.3, 1e-14, "t mean");
    rel_close(fit.y_mean, 3.65, 1e-14, "y mean");
    rel_close(
        fit.variance_factor.expect("s0"),
        s0,
        1e-10,
        "variance factor",
    );
    rel_close(
        fit.std_slope.expect("std"),
        (s0 / 402.5).sqrt(),
        1e-10,
        "std of slope",
    );
    rel_close(fit.slope, 2.003105590062112, 1e-13, "numpy slope");
    rel_close(
        fit.std_slope.expect("std"),
        0.0757662145688292,
        1e-10,
        "numpy std",
    );
    assert_eq!(fit.dof, 2);

    // Equal weights: ordinary least squares, b = S_ty/S_tt with t̄ = 1.75, ȳ = 4.475:
    // S_tt = 3.0625+0.5625+0.0625+5.0625 = 8.75;
    // S_ty = (−1.75)(−3.475)+(−0.75)(−1.575)+(0.25)(0.725)+(2.25)(4.325)
    //      = 6.08125+1.18125+0.18125+9.73125 = 17.175.
    let ols = weighted_slope(&t, &y, None).expect("ols");
    rel_close(ols.slope, 17.175 / 8.75, 1e-13, "OLS slope");
}

// Source: Draper & Smith §9.2 as above; the series must hand the given strain
// standard deviations to the regression as weights 1/σ².
#[test]
fn series_rate_uses_given_weights() {
    let net = net2();
    // Strain not linear in time (quadratic), so the weights matter.
    let eps = epochs_from(&net, &DAYS, |x, d| {
        let e = 1e-5 * d + 3e-8 * d * d;
        [e * x[0], 0.0]
    });
    let sig = [2e-6, 1e-6, 3e-6, 1e-6, 4e-6];
    let regions = Regions::Elements {
        elements: vec![ElementSpec::new("T1", ["P00", "P20", "P22"])],
        policy: OrientationPolicy::Require,
        thresholds: QualityThresholds::off(),
    };
    let mut opts = SeriesOptions::new("E0");
    opts.weighting = RateWeighting::Given(
        (0..5)
            .map(|k| StrainSigma {
                region: "T1".into(),
                epoch: format!("E{k}"),
                sigma: vec![sig[k]; 3],
            })
            .collect(),
    );
    let out = strain_series(&eps, &regions, &opts).expect("series");
    let r = &out.regions[0];
    let y: Vec<f64> = DAYS.iter().map(|d| 1e-5 * d + 3e-8 * d * d).collect();
    // Closed form, written out (Draper & Smith §9.2).
    let w: Vec<f64> = sig.iter().map(|s| 1.0 / (s * s)).collect();
    let sw: f64 = w.iter().sum();
    let tb = (0..5).map(|k| w[k] * DAYS[k]).sum::<f64>() / sw;
    let yb = (0..5).map(|k| w[k] * y[k]).sum::<f64>() / sw;
    let stt: f64 = (0..5).map(|k| w[k] * (DAYS[k] - tb).powi(2)).sum();
    let b = (0..5)
        .map(|k| w[k] * (DAYS[k] - tb) * (y[k] - yb))
        .sum::<f64>()
        / stt;
    let s0 = (0..5)
        .map(|k| w[k] * (y[k] - yb - b * (DAYS[k] - tb)).powi(2))
        .sum::<f64>()
        / 3.0;
    let Rate::Estimated(rr) = &r.rate else {
        panic!("no rate")
    };
    assert!(rr.weighted);
    rel_close(rr.components[0].per_day, b, 1e-9, "weighted exx rate");
    rel_close(
        rr.components[0].std_per_day.expect("std"),
        (s0 / stt).sqrt(),
        1e-6,
        "std of weighted rate",
    );
    // A missing sigma for a computed sample is a typed error.
    let RateWeighting::Given(mut list) = opts.weighting.clone() else {
        unreachable!()
    };
    list.pop();
    opts.weighting = RateWeighting::Given(list);
    assert!(matches!(
        strain_series(&eps, &regions, &opts),
        Err(CoreError::InvalidParameter {
            name: "strain_sigma",
            ..
        })
    ));
}

// ---------------------------------------------------------------------------
// Missing points
// ---------------------------------------------------------------------------

// Source: common practice — a region's gradient depends only on its own points (element
// formula; group fit), so removing a point changes only the regions that contain it.
#[test]
fn missing_point_excludes_only_its_regions_at_that_epoch() {
    let net = net2();
    let full = epochs_from(&net, &DAYS, |x, d| {
        [1e-5 * d * x[0] + 2e-7 * d * x[1] * x[1], -4e-6 * d * x[1]]
    });
    let mut gap = full.clone();
    gap[2].points.retain(|p| p.id != "P11");
    for regions in [elements_regions(), groups_regions()] {
        let a = strain_series(&full, &regions, &SeriesOptions::new("E0")).expect("full");
        let b = strain_series(&gap, &regions, &SeriesOptions::new("E0")).expect("gap");
        let holders: Vec<String> = match &regions {
            Regions::Elements { elements, .. } => elements
                .iter()
                .filter(|e| e.vertices.iter().any(|v| v == "P11"))
                .map(|e| e.id.clone())
                .collect(),
            Regions::Groups { groups, .. } => groups
                .iter()
                .filter(|g| g.point_ids.iter().any(|v| v == "P11"))
                .map(|g| g.name.clone())
                .collect(),
        };
        assert!(!holders.is_empty());
        let want: Vec<Excluded> = holders
            .iter()
            .map(|h| Excluded {
                region: h.clone(),
                epoch: "E2".into(),
                missing: vec!["P11".into()],
            })
            .collect();
        assert_eq!(b.excluded, want);
        for (ra, rb) in a.regions.iter().zip(&b.regions) {
            assert_eq!(ra.region, rb.region);
            if holders.contains(&ra.region) {
                assert_eq!(rb.samples.len(), DAYS.len() - 1);
                assert!(rb.samples.iter().all(|s| s.epoch != "E2"));
                // The other epochs are unchanged.
                for s in &rb.samples {
                    let sa = ra
                        .samples
                        .iter()
                        .find(|x| x.epoch == s.epoch)
                        .expect("same");
                    assert_eq!(s.strain, sa.strain);
                }
                // The increment skips the gap: E1 → E3.
                assert_eq!(rb.increments[1].from, "E1");
                assert_eq!(rb.increments[1].to, "E3");
                assert_eq!(rb.increments[1].strain, {
                    let s3 = &ra.samples[3].strain;
                    let s1 = &ra.samples[1].strain;
                    s3.iter().zip(s1).map(|(x, y)| x - y).collect::<Vec<_>>()
                });
            } else {
                assert_eq!(ra.samples, rb.samples);
                assert_eq!(ra.increments, rb.increments);
                assert_eq!(ra.rate, rb.rate);
            }
        }
    }
}

// ---------------------------------------------------------------------------
// Temperature compensation
// ---------------------------------------------------------------------------

// Source: free thermal expansion of an isotropic solid, ε_ij = α·ΔT·δ_ij (Timoshenko &
// Goodier, Theory of Elasticity, 3rd ed., chapter on thermal stress; chapter number from
// memory); u = α ΔT (x − x0) is exactly that strain with no shear.
#[test]
fn free_thermal_expansion_compensates_to_zero() {
    let alpha = 1.2e-5; // 1/K, order of structural steel (common practice)
    let temps = [12.0, 18.5, 25.0, 4.0, -6.5];
    let x0 = [3.0, 2.0];
    let net = net2();
    let mut eps = epochs_from(&net, &DAYS, |x, d| {
        let k = DAYS.iter().position(|v| *v == d).expect("day");
        let e = alpha * (temps[k] - temps[0]);
        [e * (x[0] - x0[0]), e * (x[1] - x0[1])]
    });
    for (e, t) in eps.iter_mut().zip(temps) {
        e.temperature_c = Some(t);
    }
    let mut opts = SeriesOptions::new("E0");
    opts.thermal = Some(ThermalCompensation { alpha_per_k: alpha });
    for regions in [elements_regions(), groups_regions()] {
        let out = strain_series(&eps, &regions, &opts).expect("series");
        for r in &out.regions {
            for (k, s) in r.samples.iter().enumerate() {
                let th = alpha * (temps[k] - temps[0]);
                assert_eq!(s.thermal_strain, Some(th));
                let comp = s.compensated.as_ref().expect("compensated");
                assert_eq!(comp.len(), 3);
                assert!(comp.iter().all(|v| v.abs() < 1e-14), "compensated {comp:?}");
                assert!((s.strain[0] - th).abs() < 1e-14);
                assert!((s.strain[1] - th).abs() < 1e-14);
                assert!(s.strain[2].abs() < 1e-14);
            }
            let Some(Rate::Estimated(rc)) = &r.rate_compensated else {
                panic!("no compensated rate")
            };
            assert!(rc.components.iter().all(|c| c.per_day.abs() < 1e-15));
            assert!(matches!(r.rate, Rate::Estimated(_)));
        }
    }
    // A missing temperature under compensation names the epoch.
    eps[3].temperature_c = None;
    assert_eq!(
        strain_series(&eps, &elements_regions(), &opts),
        Err(CoreError::MissingTemperature { epoch: "E3".into() })
    );
    // Without compensation the missing temperature does not matter.
    assert!(strain_series(&eps, &elements_regions(), &SeriesOptions::new("E0")).is_ok());
}

// ---------------------------------------------------------------------------
// Rigid motion
// ---------------------------------------------------------------------------

// Source: a rigid motion x' = R x + t has gradient G = R − I with
// sym(R − I) = (cos θ − 1)·I in 2D, |cos θ − 1| ≤ θ²/2 (Taylor bound), and
// skew part sin θ (small-strain rotation; Malvern §4.2).
#[test]
fn rigid_motion_gives_zero_strain_to_second_order() {
    let thetas: [f64; 5] = [0.0, 2e-4, -5e-4, 1e-3, 3e-4];
    let shifts = [
        [0.0, 0.0],
        [0.012, -0.004],
        [0.03, 0.01],
        [-0.02, 0.05],
        [0.0, 0.1],
    ];
    let c = [4.0, 3.0];
    let net = net2();
    let eps: Vec<Epoch<2>> = (0..5)
        .map(|k| {
            let (s, co) = thetas[k].sin_cos();
            let pts = net
                .iter()
                .map(|(id, x)| {
                    let dx = x[0] - c[0];
                    let dy = x[1] - c[1];
                    EpochPoint::new(
                        id.clone(),
                        [
                            c[0] + co * dx - s * dy + shifts[k][0],
                            c[1] + s * dx + co * dy + shifts[k][1],
                        ],
                    )
                })
                .collect();
            Epoch::new(format!("E{k}"), T0 + DAYS[k] * SECONDS_PER_DAY, pts)
        })
        .collect();
    for regions in [elements_regions(), groups_regions()] {
        let out = strain_series(&eps, &regions, &SeriesOptions::new("E0")).expect("series");
        for r in &out.regions {
            for (k, s) in r.samples.iter().enumerate() {
                let bound = thetas[k] * thetas[k] / 2.0 + 1e-12;
                assert!(s.strain.iter().all(|v| v.abs() <= bound), "{:?}", s.strain);
                assert!((s.rotation[0] - thetas[k].sin()).abs() < 1e-12);
            }
            for (k, inc) in r.increments.iter().enumerate() {
                let m = thetas[k].abs().max(thetas[k + 1].abs());
                let bound = m * m / 2.0 + 1e-12;
                assert!(
                    inc.strain.iter().all(|v| v.abs() <= bound),
                    "{:?}",
                    inc.strain
                );
            }
        }
    }
}

// ---------------------------------------------------------------------------
// Single epoch and bad input
// ---------------------------------------------------------------------------

// Source: common practice — the baseline alone defines zero strain; no increment or
// rate exists without a second epoch.
#[test]
fn single_epoch_has_no_increments_and_no_rate() {
    let eps = epochs_from(&net2(), &[0.0], |_, _| [0.0, 0.0]);
    let out = strain_series(&eps, &elements_regions(), &SeriesOptions::new("E0")).expect("one");
    for r in &out.regions {
        assert_eq!(r.samples.len(), 1);
        assert!(r.increments.is_empty());
        assert_eq!(r.rate, Rate::TooFewEpochs { available: 1 });
    }
}

// Source: common practice (input validation); each case asserts the exact variant.
#[test]
fn bad_input_gets_typed_errors() {
    let net = net2();
    let good = epochs_from(&net, &DAYS[..3], |x, d| [1e-6 * d * x[0], 0.0]);
    let reg = elements_regions();
    let o = SeriesOptions::new("E0");

    assert_eq!(
        strain_series::<2>(&[], &reg, &o),
        Err(CoreError::Empty { what: "epochs" })
    );

    let mut swapped = good.clone();
    swapped.swap(1, 2);
    assert_eq!(
        strain_series(&swapped, &reg, &o),
        Err(CoreError::EpochsOutOfOrder {
            previous: "E2".into(),
            previous_time_s: good[2].time_s,
            next: "E1".into(),
            next_time_s: good[1].time_s,
        })
    );

    let mut same = good.clone();
    same[2].time_s = same[1].time_s;
    assert_eq!(
        strain_series(&same, &reg, &o),
        Err(CoreError::EpochsOutOfOrder {
            previous: "E1".into(),
            previous_time_s: good[1].time_s,
            next: "E2".into(),
            next_time_s: good[1].time_s,
        })
    );

    let mut dup = good.clone();
    dup[2].label = "E1".into();
    assert_eq!(
        strain_series(&dup, &reg, &o),
        Err(CoreError::DuplicateEpoch { label: "E1".into() })
    );

    assert_eq!(
        strain_series(&good, &reg, &SeriesOptions::new("spring")),
        Err(CoreError::BaselineNotInSeries {
            label: "spring".into(),
            known: "E0, E1, E2".into()
        })
    );

    let mut nan_t = good.clone();
    nan_t[1].time_s = f64::NAN;
    assert_eq!(
        strain_series(&nan_t, &reg, &o),
        Err(CoreError::NonFinite {
            id: "E1".into(),
            field: "time_s"
        })
    );

    let mut inf_temp = good.clone();
    inf_temp[2].temperature_c = Some(f64::INFINITY);
    assert_eq!(
        strain_series(&inf_temp, &reg, &o),
        Err(CoreError::NonFinite {
            id: "E2".into(),
            field: "temperature_c"
        })
    );

    let mut nan_x = good.clone();
    nan_x[1].points[4].x[1] = f64::NAN;
    assert_eq!(
        strain_series(&nan_x, &reg, &o),
        Err(CoreError::InEpoch {
            epoch: "E1".into(),
            source: Box::new(CoreError::NonFinite {
                id: "P11".into(),
                field: "y"
            })
        })
    );

    let mut dup_pt = good.clone();
    let p = dup_pt[2].points[0].clone();
    dup_pt[2].points.push(p);
    assert_eq!(
        strain_series(&dup_pt, &reg, &o),
        Err(CoreError::InEpoch {
            epoch: "E2".into(),
            source: Box::new(CoreError::DuplicatePoint { id: "P00".into() })
        })
    );

    let mut bad_sigma = good.clone();
    bad_sigma[0].points[0].sigma = Some([0.001, 0.0]);
    assert!(matches!(
        strain_series(&bad_sigma, &reg, &o),
        Err(CoreError::InEpoch { ref epoch, ref source })
            if epoch == "E0"
            && matches!(**source, CoreError::InvalidParameter { name: "sigma_y", .. })
    ));

    let mut with_t = good.clone();
    for e in &mut with_t {
        e.temperature_c = Some(10.0);
    }
    let mut th = o.clone();
    th.thermal = Some(ThermalCompensation {
        alpha_per_k: f64::NAN,
    });
    assert!(matches!(
        strain_series(&with_t, &reg, &th),
        Err(CoreError::InvalidParameter {
            name: "alpha_per_k",
            ..
        })
    ));

    let unknown = Regions::Elements {
        elements: vec![ElementSpec::new("TX", ["P00", "P10", "Q9"])],
        policy: OrientationPolicy::Require,
        thresholds: QualityThresholds::off(),
    };
    assert_eq!(
        strain_series(&good, &unknown, &o),
        Err(CoreError::UnknownPoint {
            context: "element `TX`".into(),
            id: "Q9".into()
        })
    );

    let none = Regions::Groups {
        groups: vec![],
        options: FitOptions::default(),
    };
    assert_eq!(
        strain_series(&good, &none, &o),
        Err(CoreError::Empty { what: "groups" })
    );

    let mut empty_label = good.clone();
    empty_label[1].label = String::new();
    assert!(matches!(
        strain_series(&empty_label, &reg, &o),
        Err(CoreError::InvalidParameter {
            name: "epoch label",
            ..
        })
    ));
}

// Source: common practice — a point missing from the baseline removes its regions at
// every epoch, and a region computed at one epoch only has no rate.
#[test]
fn point_missing_from_baseline_excludes_region_everywhere() {
    let net = net2();
    let mut eps = epochs_from(&net, &DAYS[..3], |x, d| [1e-6 * d * x[0], 0.0]);
    eps[0].points.retain(|p| p.id != "P22");
    let out = strain_series(&eps, &elements_regions(), &SeriesOptions::new("E0")).expect("ok");
    let holders = ["T11a", "T11b"];
    assert_eq!(out.excluded.len(), 2 * 3);
    for x in &out.excluded {
        assert!(holders.contains(&x.region.as_str()));
        assert_eq!(x.missing, vec!["P22".to_owned()]);
    }
    for r in &out.regions {
        if holders.contains(&r.region.as_str()) {
            assert!(r.samples.is_empty());
            assert_eq!(r.rate, Rate::TooFewEpochs { available: 0 });
        } else {
            assert_eq!(r.samples.len(), 3);
        }
    }
}

/// Epochs of `net2` with a linear field plus a deterministic perturbation (a few mm) and
/// a stated sigma of `sig[k]` metres per axis at epoch `k`.
fn noisy_epochs_with_sigma(sig: &[f64; 5]) -> Vec<Epoch<2>> {
    let mut e = epochs_from(&net2(), &DAYS, |x, d| {
        [d * 1.0e-6 * x[0], d * (-0.4e-6 * x[1] + 0.2e-6 * x[0])]
    });
    for (k, ep) in e.iter_mut().enumerate() {
        for (q, p) in ep.points.iter_mut().enumerate() {
            // Perturbation from a fixed sine sequence (invented, not random).
            let s = ((k * 9 + q) as f64 * 1.7).sin();
            p.x[0] += 0.002 * s;
            p.x[1] -= 0.0015 * s * s;
            p.sigma = Some([sig[k], sig[k]]);
        }
    }
    e
}

#[test]
fn precision_weighting_leaves_the_baseline_out_and_tests_increments_directly() {
    let sig = [0.001, 0.002, 0.0015, 0.001, 0.003];
    let epochs = noisy_epochs_with_sigma(&sig);
    let regions = groups_regions();
    let mut opts = SeriesOptions::new("E0");
    opts.weighting = RateWeighting::Precision;
    let out = strain_series(&epochs, &regions, &opts).expect("series");
    let names = strain_component_names::<2>();
    for reg in &out.regions {
        let base = &reg.samples[0];
        assert_eq!(base.strain_std.as_deref(), Some(&[0.0; 3][..]));
        // Weighted rate = weighted_slope (Draper & Smith, weighted least squares; checked
        // against the closed form above) over the epochs after the baseline with
        // sigma = the propagated strain sd.
        let after = &reg.samples[1..];
        let t: Vec<f64> = after.iter().map(|s| s.days_from_baseline).collect();
        let Rate::Estimated(rr) = &reg.rate else {
            panic!("rate of {}", reg.region)
        };
        assert!(rr.weighted && !rr.includes_baseline);
        assert_eq!(rr.n_epochs, 4);
        for c in 0..names.len() {
            let y: Vec<f64> = after.iter().map(|s| s.strain[c]).collect();
            let sd: Vec<f64> = after
                .iter()
                .map(|s| s.strain_std.as_ref().expect("sd")[c])
                .collect();
            assert!(sd.iter().all(|v| *v > 0.0));
            let fit = weighted_slope(&t, &y, Some(&sd)).expect("fit");
            rel_close(rr.components[c].per_day, fit.slope, 1e-12, "weighted rate");
        }
        // The increment's test is on the strain of x_to − x_from on the baseline
        // geometry with sigma sqrt(σ_from² + σ_to²) (linear propagation of variance);
        // a group with redundancy uses F (Koch, general linear hypothesis).
        for (k, inc) in reg.increments.iter().enumerate() {
            let (a, b) = (&epochs[k], &epochs[k + 1]);
            let pts: Vec<Point<2>> = epochs[0]
                .points
                .iter()
                .zip(a.points.iter().zip(&b.points))
                .map(|(p0, (pa, pb))| Point {
                    id: p0.id.clone(),
                    x: p0.x,
                    u: [pb.x[0] - pa.x[0], pb.x[1] - pa.x[1]],
                    sigma: Some([sig[k].hypot(sig[k + 1]); 2]),
                    cov: None,
                })
                .collect();
            let set = PointSet::new(pts).expect("set");
            let Regions::Groups { groups, options } = &regions else {
                unreachable!()
            };
            let g: Vec<Group> = groups
                .iter()
                .filter(|g| g.name == reg.region)
                .cloned()
                .collect();
            let est = fit_groups(&set, &g, options).expect("fit").remove(0);
            let p = kinema_core::significance::DeformationParameters::from_estimate(&est, None)
                .expect("params");
            let want = kinema_core::significance::test_zero_strain(&p, 0.05).expect("test");
            let got = inc.test.as_ref().expect("test present");
            assert_eq!(got.dof2, want.dof2);
            assert!(got.dof2.is_some(), "F test for a group with redundancy");
            rel_close(got.statistic, want.statistic, 1e-9, "increment statistic");
        }
    }
    // Bad alpha is a typed error naming it.
    opts.alpha = 1.5;
    assert!(matches!(
        strain_series(&epochs, &regions, &opts),
        Err(CoreError::InvalidParameter { name: "alpha", .. })
    ));
}

#[test]
fn without_sigma_there_is_no_sd_no_test_and_equal_weights() {
    let epochs = epochs_from(&net2(), &DAYS, |x, d| [d * 1.0e-6 * x[0], 0.0]);
    let mut opts = SeriesOptions::new("E0");
    opts.weighting = RateWeighting::Precision;
    for regions in [elements_regions(), groups_regions()] {
        let out = strain_series(&epochs, &regions, &opts).expect("series");
        for reg in &out.regions {
            assert!(reg.samples.iter().all(|s| s.strain_std.is_none()));
            assert!(reg.increments.iter().all(|i| i.test.is_none()));
            let Rate::Estimated(rr) = &reg.rate else {
                panic!("rate")
            };
            assert!(!rr.weighted && rr.includes_baseline);
            assert_eq!(rr.n_epochs, 5);
        }
    }
}
