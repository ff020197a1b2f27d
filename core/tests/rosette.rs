//! Strain-gauge rosettes: closed forms, general solver, least squares, corrections,
//! bad input.

use kinema_core::CoreError;
use kinema_core::rosette::{
    AppliedCorrection, Corrections, Gauge, GaugeFactor, PlaneStrain, SolveKind, ThermalOutput,
    TransverseSensitivity, delta_closed_form, delta_gauges, forward_reading,
    rectangular_closed_form, rectangular_gauges, solve,
};
use proptest::prelude::*;

const TOL: f64 = 1e-12;

fn state(exx: f64, eyy: f64, exy: f64) -> PlaneStrain {
    PlaneStrain { exx, eyy, exy }
}

fn assert_close(a: f64, b: f64, tol: f64, what: &str) {
    assert!((a - b).abs() <= tol, "{what}: {a} vs {b} (tol {tol})");
}

fn assert_state(s: &PlaneStrain, t: &PlaneStrain, tol: f64) {
    assert_close(s.exx, t.exx, tol, "exx");
    assert_close(s.eyy, t.eyy, tol, "eyy");
    assert_close(s.exy, t.exy, tol, "exy");
}

fn readings(s: &PlaneStrain, degrees: &[f64]) -> Vec<f64> {
    degrees
        .iter()
        .map(|d| s.normal_strain(d.to_radians()))
        .collect()
}

// Source: Gere & Goodno, Mechanics of Materials, §7.7: the normal strain along a unit
// vector n is nᵀ·ε·n; with engineering shear gxy = 2·exy the transformation reads
// exx·cos² + eyy·sin² + gxy·sin·cos.
#[test]
fn gauge_strain_is_the_tensor_projection() {
    let s = state(420e-6, -130e-6, 75e-6);
    for deg in [0.0, 17.0, 45.0, 90.0, 123.0, 200.0, -31.0] {
        let t = f64::to_radians(deg);
        let (sn, cs) = t.sin_cos();
        let projected = cs * (s.exx * cs + s.exy * sn) + sn * (s.exy * cs + s.eyy * sn);
        let engineering = s.exx * cs * cs + s.eyy * sn * sn + s.gxy() * sn * cs;
        assert_close(s.normal_strain(t), projected, TOL, "nᵀεn");
        assert_close(s.normal_strain(t), engineering, TOL, "gxy form");
    }
    assert_eq!(s.gxy(), 2.0 * s.exy);
}

// Source: Gere & Goodno, Mechanics of Materials, §7.7 and Dally & Riley, Experimental
// Stress Analysis, 4th ed., rosette chapter: rectangular rosette exx = εa, eyy = εc,
// gxy = 2εb − εa − εc; principal ε1,2 = (εa+εc)/2 ± (1/√2)·sqrt((εa−εb)² + (εb−εc)²);
// tan 2θp = (2εb − εa − εc)/(εa − εc).
#[test]
fn rectangular_closed_form_matches_general_solver() {
    let truth = state(520e-6, -180e-6, 210e-6);
    let r = readings(&truth, &[0.0, 45.0, 90.0]);
    let closed = rectangular_closed_form(r[0], r[1], r[2]);
    assert_state(&closed, &truth, TOL);
    assert_close(closed.gxy(), 2.0 * r[1] - r[0] - r[2], TOL, "gxy");

    let res = solve(
        &rectangular_gauges([r[0], r[1], r[2]]),
        &Corrections::default(),
    )
    .expect("rectangular rosette solves");
    assert_eq!(res.kind, SolveKind::Exact);
    assert_state(&res.strain, &closed, TOL);
    assert!(res.applied.is_empty());
    assert!((res.condition - 2.0).abs() < 1e-9, "cond {}", res.condition);

    let (a, b, c) = (r[0], r[1], r[2]);
    let rad = ((a - b).powi(2) + (b - c).powi(2)).sqrt() / 2f64.sqrt();
    assert_close(res.principal.e1, 0.5 * (a + c) + rad, TOL, "e1");
    assert_close(res.principal.e2, 0.5 * (a + c) - rad, TOL, "e2");
    let theta = res.principal.theta_p.expect("not isotropic");
    assert_close(
        (2.0 * theta).tan(),
        (2.0 * b - a - c) / (a - c),
        1e-9,
        "tan 2θp",
    );
    // e1 is the normal strain along θp.
    assert_close(truth.normal_strain(theta), res.principal.e1, TOL, "ε(θp)");
    assert_close(
        res.principal.max_gxy,
        res.principal.e1 - res.principal.e2,
        TOL,
        "γmax",
    );
}

// Source: Dally & Riley, Experimental Stress Analysis, 4th ed., rosette chapter (delta
// rosette): exx = εa, eyy = (2εb + 2εc − εa)/3, gxy = (2/√3)(εb − εc);
// ε1,2 = (εa+εb+εc)/3 ± (√2/3)·sqrt((εa−εb)² + (εb−εc)² + (εc−εa)²).
#[test]
fn delta_closed_form_matches_general_solver() {
    let truth = state(-240e-6, 610e-6, -95e-6);
    let r = readings(&truth, &[0.0, 60.0, 120.0]);
    let (a, b, c) = (r[0], r[1], r[2]);
    let closed = delta_closed_form(a, b, c);
    assert_state(&closed, &truth, TOL);
    assert_close(closed.gxy(), 2.0 / 3f64.sqrt() * (b - c), TOL, "gxy");

    let res = solve(&delta_gauges([a, b, c]), &Corrections::default()).expect("delta solves");
    assert_state(&res.strain, &closed, TOL);
    assert!(res.residuals.iter().all(|v| v.abs() < 1e-15), "exact solve");
    // Source: numpy.linalg.cond of the delta design matrix gives √2.
    assert_close(res.condition, 2f64.sqrt(), 1e-9, "cond delta");
    let mean = (a + b + c) / 3.0;
    let rad = 2f64.sqrt() / 3.0 * ((a - b).powi(2) + (b - c).powi(2) + (c - a).powi(2)).sqrt();
    assert_close(res.principal.e1, mean + rad, TOL, "e1");
    assert_close(res.principal.e2, mean - rad, TOL, "e2");
}

proptest! {
    // Forward-model a known state into three gauges at arbitrary, well separated angles
    // and invert it (the strain transformation of Gere & Goodno §7.7 run both ways).
    #[test]
    fn arbitrary_three_angles_round_trip(
        exx in -2e-3..2e-3f64, eyy in -2e-3..2e-3f64, exy in -2e-3..2e-3f64,
        t0 in 0.0..180.0f64, d1 in 20.0..80.0f64, d2 in 20.0..80.0f64,
    ) {
        let truth = state(exx, eyy, exy);
        let degs = [t0, t0 + d1, t0 + d1 + d2];
        let r = readings(&truth, &degs);
        let gauges: Vec<Gauge> = degs.iter().zip(&r).enumerate()
            .map(|(i, (d, v))| Gauge::new(format!("g{i}"), d.to_radians(), *v)).collect();
        let res = solve(&gauges, &Corrections::default()).expect("well-separated layout solves");
        prop_assert!((res.strain.exx - exx).abs() < 1e-12);
        prop_assert!((res.strain.eyy - eyy).abs() < 1e-12);
        prop_assert!((res.strain.exy - exy).abs() < 1e-12);
        // Principal values are frame invariants: e1 + e2 = exx + eyy.
        prop_assert!((res.principal.e1 + res.principal.e2 - exx - eyy).abs() < 1e-12);
        prop_assert!(res.principal.e1 >= res.principal.e2);
    }
}

// Least squares, four gauges at 0/45/90/135°. The left null space of the design
// matrix is w = (1, −1, 1, −1), so the residuals are v = d/4·w with the misclosure
// d = ε0 + ε90 − ε45 − ε135 (first invariant), σ0 = |d|/2 (one redundant reading), and
// (AᵀA)⁻¹ has diagonal (3/4, 3/4, 1/2). Derived by hand from the least-squares
// projection (Source: any least-squares adjustment text, e.g. Ghilani, Adjustment
// Computations, ch. on observation equations).
#[test]
fn least_squares_four_gauges_residuals_and_sigma() {
    let truth = state(300e-6, 100e-6, -50e-6);
    let degs: [f64; 4] = [0.0, 45.0, 90.0, 135.0];
    let mut r = readings(&truth, &degs);
    let exact: Vec<Gauge> = degs
        .iter()
        .zip(&r)
        .enumerate()
        .map(|(i, (d, v))| Gauge::new(format!("g{i}"), d.to_radians(), *v))
        .collect();
    let res = solve(&exact, &Corrections::default()).expect("solves");
    assert_eq!(res.kind, SolveKind::LeastSquares);
    assert_eq!(res.redundancy, 1);
    assert_state(&res.strain, &truth, TOL);
    assert!(res.sigma_reading.expect("redundant") < 1e-15);

    r[1] += 8e-6; // disturb the 45° gauge
    let d = r[0] + r[2] - r[1] - r[3];
    let gauges: Vec<Gauge> = exact
        .iter()
        .zip(&r)
        .map(|(g, v)| Gauge::new(g.id.clone(), g.angle, *v))
        .collect();
    let res = solve(&gauges, &Corrections::default()).expect("solves");
    for (k, w) in [1.0, -1.0, 1.0, -1.0].iter().enumerate() {
        assert_close(res.residuals[k], d / 4.0 * w, 1e-15, "residual");
    }
    let s0 = res.sigma_reading.expect("redundant");
    assert_close(s0, d.abs() / 2.0, 1e-15, "σ0");
    let sig = res.sigma_strain.expect("redundant");
    assert_close(sig[0], s0 * 0.75f64.sqrt(), 1e-15, "σ exx");
    assert_close(sig[1], s0 * 0.75f64.sqrt(), 1e-15, "σ eyy");
    assert_close(sig[2], s0 * 0.5f64.sqrt(), 1e-15, "σ exy");
    // The fitted exy is (ε45 − ε135)/2 for this layout.
    assert_close(res.strain.exy, 0.5 * (r[1] - r[3]), 1e-15, "exy");
}

// Two gauges share a direction (0° and 180°) but three directions remain: solvable.
#[test]
fn repeated_direction_with_three_distinct_is_fine() {
    let truth = state(1e-4, 2e-4, 3e-5);
    let degs: [f64; 4] = [0.0, 180.0, 60.0, 120.0];
    let r = readings(&truth, &degs);
    let gauges: Vec<Gauge> = degs
        .iter()
        .zip(&r)
        .enumerate()
        .map(|(i, (d, v))| Gauge::new(format!("g{i}"), d.to_radians(), *v))
        .collect();
    let res = solve(&gauges, &Corrections::default()).expect("three directions");
    assert_state(&res.strain, &truth, 1e-15);
}

// Transverse sensitivity. Source: Dally & Riley, Experimental Stress Analysis, 4th
// ed., transverse-sensitivity correction for two orthogonal gauges:
// ε_a = (1 − ν0·K_t)(ε'_a − K_t·ε'_t)/(1 − K_t²). Readings are forward-modelled with
// the gauge response ε' = (ε_a + K_t·ε_t)/(1 − ν0·K_t).
#[test]
fn transverse_sensitivity_rectangular_matches_textbook_pair() {
    let truth = state(800e-6, -260e-6, 140e-6);
    let ts = TransverseSensitivity {
        kt: 0.04,
        nu0: 0.285,
    };
    let ind = |deg: f64| {
        let t = deg.to_radians();
        let ea = truth.normal_strain(t);
        let et = truth.normal_strain(t + std::f64::consts::FRAC_PI_2);
        (ea + ts.kt * et) / (1.0 - ts.nu0 * ts.kt)
    };
    let r = [ind(0.0), ind(45.0), ind(90.0)];
    for (d, v) in [0.0f64, 45.0, 90.0].iter().zip(r) {
        assert_close(
            forward_reading(&truth, d.to_radians(), Some(ts)),
            v,
            1e-15,
            "forward",
        );
    }
    let f = (1.0 - ts.nu0 * ts.kt) / (1.0 - ts.kt * ts.kt);
    assert_close(f * (r[0] - ts.kt * r[2]), truth.exx, 1e-15, "textbook εx");
    assert_close(f * (r[2] - ts.kt * r[0]), truth.eyy, 1e-15, "textbook εy");

    let corr = Corrections {
        transverse: Some(ts),
        ..Default::default()
    };
    let res = solve(&rectangular_gauges(r), &corr).expect("solves");
    assert_state(&res.strain, &truth, 1e-15);
    assert_eq!(
        res.applied,
        vec![AppliedCorrection::TransverseSensitivity {
            kt: 0.04,
            nu0: 0.285
        }]
    );
    // Without the correction the result is off by more than the tolerance.
    let plain = solve(&rectangular_gauges(r), &Corrections::default()).expect("solves");
    assert!((plain.strain.exx - truth.exx).abs() > 1e-6);
}

// The same gauge response model at arbitrary angles, five gauges, least squares.
#[test]
fn transverse_sensitivity_general_angles() {
    let truth = state(-150e-6, 420e-6, 60e-6);
    let ts = TransverseSensitivity {
        kt: -0.02,
        nu0: 0.3,
    };
    let degs = [5.0, 50.0, 80.0, 110.0, 160.0];
    let gauges: Vec<Gauge> = degs
        .iter()
        .enumerate()
        .map(|(i, d)| {
            let t = f64::to_radians(*d);
            let ea = truth.normal_strain(t);
            let et = truth.normal_strain(t + std::f64::consts::FRAC_PI_2);
            Gauge::new(
                format!("g{i}"),
                t,
                (ea + ts.kt * et) / (1.0 - ts.nu0 * ts.kt),
            )
        })
        .collect();
    let corr = Corrections {
        transverse: Some(ts),
        ..Default::default()
    };
    let res = solve(&gauges, &corr).expect("solves");
    assert_state(&res.strain, &truth, 1e-15);
    assert!(res.sigma_reading.expect("redundant") < 1e-15);
}

// All of zero, thermal output and gauge factor: the readings are built from a true
// state by the inverse chain, then solve() must undo it, in the documented order.
#[test]
fn zero_thermal_and_gauge_factor_are_undone_in_order() {
    let truth = state(350e-6, 120e-6, -80e-6);
    let (k_instr, k_gauge) = (2.0, 2.12);
    let thermal = ThermalOutput {
        coefficients: vec![-30e-6, 2.5e-6, -0.05e-6],
        temperature: 31.5,
        reference_temperature: Some(12.0),
    };
    // P(T) by hand: c0 + c1 T + c2 T².
    let p = |t: f64| -30e-6 + 2.5e-6 * t - 0.05e-6 * t * t;
    let apparent = p(31.5) - p(12.0);
    assert_close(thermal.apparent_strain(), apparent, 1e-18, "P(T) − P(T0)");
    let zeros = [15e-6, -7e-6, 3e-6];
    let degs: [f64; 3] = [0.0, 45.0, 90.0];
    let gauges: Vec<Gauge> = degs
        .iter()
        .zip(zeros)
        .zip(["a", "b", "c"])
        .map(|((d, z), id)| {
            let e = truth.normal_strain(d.to_radians());
            // Indicated at k_instr: ε_ind = ε·k_gauge/k_instr, plus thermal, plus zero.
            let reading = e * k_gauge / k_instr + apparent + z;
            Gauge::new(id, d.to_radians(), reading).with_zero(z)
        })
        .collect();
    let corr = Corrections {
        gauge_factor: Some(GaugeFactor {
            instrument: k_instr,
            gauge: k_gauge,
        }),
        thermal: Some(thermal),
        transverse: None,
    };
    let res = solve(&gauges, &corr).expect("solves");
    assert_state(&res.strain, &truth, 1e-15);
    assert_eq!(res.applied.len(), 3);
    assert_eq!(
        res.applied[0],
        AppliedCorrection::ZeroReading {
            gauges: vec!["a".into(), "b".into(), "c".into()],
            zero: zeros.to_vec(),
        }
    );
    match &res.applied[1] {
        AppliedCorrection::ThermalOutput {
            apparent_strain, ..
        } => assert_close(*apparent_strain, apparent, 1e-18, "reported thermal"),
        other => panic!("second correction should be thermal output, got {other:?}"),
    }
    assert_eq!(
        res.applied[2],
        AppliedCorrection::GaugeFactor {
            instrument: k_instr,
            gauge: k_gauge,
            ratio: k_instr / k_gauge
        }
    );
    assert_close(res.corrected[0], truth.exx, 1e-15, "corrected reading a");
}

// Equal principal strains: no direction (DESIGN.md: flagged, never arbitrary).
#[test]
fn isotropic_state_has_no_direction() {
    let r = readings(&state(2e-4, 2e-4, 0.0), &[0.0, 45.0, 90.0]);
    let res = solve(
        &rectangular_gauges([r[0], r[1], r[2]]),
        &Corrections::default(),
    )
    .expect("solves");
    assert!(res.principal.isotropic);
    assert_eq!(res.principal.theta_p, None);
}

#[test]
fn bad_input_gets_typed_errors() {
    let c = Corrections::default();
    assert_eq!(solve(&[], &c), Err(CoreError::Empty { what: "gauges" }));
    let two = [Gauge::new("a", 0.0, 1e-4), Gauge::new("b", 1.0, 1e-4)];
    assert_eq!(
        solve(&two, &c),
        Err(CoreError::TooFewGauges { needed: 3, got: 2 })
    );

    let mut g = rectangular_gauges([1e-4, 2e-4, 3e-4]);
    g[2].id = "a".into();
    assert_eq!(
        solve(&g, &c),
        Err(CoreError::DuplicateGauge { id: "a".into() })
    );

    let mut g = rectangular_gauges([1e-4, 2e-4, 3e-4]);
    g[1].reading = f64::NAN;
    assert_eq!(
        solve(&g, &c),
        Err(CoreError::NonFinite {
            id: "b".into(),
            field: "reading"
        })
    );
    let mut g = rectangular_gauges([1e-4, 2e-4, 3e-4]);
    g[0].zero = Some(f64::INFINITY);
    assert!(matches!(
        solve(&g, &c),
        Err(CoreError::NonFinite { field: "zero", .. })
    ));

    let mut g = rectangular_gauges([1e-4, 2e-4, 3e-4]);
    g[0].id = "bad id".into();
    assert!(matches!(solve(&g, &c), Err(CoreError::InvalidId { .. })));

    // Coinciding modulo 180°: 0° and 180° with 90°.
    let g = [
        Gauge::new("a", 0.0, 1e-4),
        Gauge::new("b", std::f64::consts::PI, 1e-4),
        Gauge::new("c", std::f64::consts::FRAC_PI_2, 1e-4),
    ];
    match solve(&g, &c) {
        Err(CoreError::SingularRosette { gauges, reason }) => {
            assert_eq!(gauges, "a, b, c");
            assert!(reason.contains("a, b at"), "{reason}");
        }
        other => panic!("expected SingularRosette, got {other:?}"),
    }
    // Nearly coinciding: 0°, 0.01°, 90° → condition number above the threshold.
    let g = [
        Gauge::new("a", 0.0, 1e-4),
        Gauge::new("b", 0.01f64.to_radians(), 1e-4),
        Gauge::new("c", std::f64::consts::FRAC_PI_2, 1e-4),
    ];
    match solve(&g, &c) {
        Err(CoreError::SingularRosette { reason, .. }) => {
            assert!(reason.contains("condition number"), "{reason}")
        }
        other => panic!("expected SingularRosette, got {other:?}"),
    }

    // Source: numpy.linalg.cond for 0°, 0.5°, 90° gives 114.597 (below the threshold).
    let g = [
        Gauge::new("a", 0.0, 1e-4),
        Gauge::new("b", 0.5f64.to_radians(), 1e-4),
        Gauge::new("c", std::f64::consts::FRAC_PI_2, 1e-4),
    ];
    let res = solve(&g, &c).expect("0.5° apart is still accepted");
    assert_close(res.condition, 114.597_376_997, 1e-6, "cond 0/0.5/90");

    let g = rectangular_gauges([1e-4, 2e-4, 3e-4]);
    let bad_k = Corrections {
        gauge_factor: Some(GaugeFactor {
            instrument: 2.0,
            gauge: 0.0,
        }),
        ..Default::default()
    };
    assert!(matches!(
        solve(&g, &bad_k),
        Err(CoreError::InvalidParameter {
            name: "gauge_factor.gauge",
            ..
        })
    ));
    let bad_kt = Corrections {
        transverse: Some(TransverseSensitivity { kt: 1.0, nu0: 0.3 }),
        ..Default::default()
    };
    assert!(matches!(
        solve(&g, &bad_kt),
        Err(CoreError::InvalidParameter {
            name: "transverse.kt",
            ..
        })
    ));
    let bad_t = Corrections {
        thermal: Some(ThermalOutput {
            coefficients: vec![f64::NAN],
            temperature: 20.0,
            reference_temperature: None,
        }),
        ..Default::default()
    };
    assert!(matches!(
        solve(&g, &bad_t),
        Err(CoreError::InvalidParameter {
            name: "thermal.coefficients",
            ..
        })
    ));
}
