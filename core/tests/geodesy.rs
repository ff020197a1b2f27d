//! WGS84 geodetic ↔ ECEF ↔ local ENU, covariance rotation, directions, bad input.

use std::f64::consts::{FRAC_PI_2, PI};

use kinema_core::CoreError;
use kinema_core::geodesy::{
    EnuFrame, Geodetic, WGS84_B, WGS84_E2, azimuth_from_angle, direction, ecef_to_geodetic,
    geodetic_to_ecef, meridian_radius, normalize_longitude, prime_vertical_radius,
};
use nalgebra::{Matrix3, Vector3};

fn dms(d: f64, m: f64, s: f64) -> f64 {
    (d + m / 60.0 + s / 3600.0).to_radians()
}

// Source: NIMA TR8350.2, 3rd ed., Table 3.3 (derived WGS84 constants, from memory):
// b = 6 356 752.3142 m, e² = 6.694 379 990 14 × 10⁻³.
#[test]
fn derived_wgs84_constants() {
    assert!((WGS84_B - 6_356_752.314_2).abs() < 1e-4, "b {WGS84_B}");
    assert!(
        (WGS84_E2 - 6.694_379_990_14e-3).abs() < 1e-14,
        "e² {WGS84_E2}"
    );
}

// Source: IOGP Guidance Note 7-2, EPSG method 9602 (geographic/geocentric conversions),
// worked example on WGS84: φ = 53°48'33.82"N, λ = 2°07'46.38"E, h = 73.0 m →
// X = 3 771 793.968 m, Y = 140 253.342 m, Z = 5 124 304.349 m. The values are from
// memory; the closed form reproduces all three to 0.5 mm, which confirms them.
#[test]
fn epsg_9602_worked_example_both_ways() {
    let g = Geodetic::new(dms(53.0, 48.0, 33.82), dms(2.0, 7.0, 46.38), 73.0);
    let x = geodetic_to_ecef(&g).expect("valid");
    let want = [3_771_793.968, 140_253.342, 5_124_304.349];
    for k in 0..3 {
        assert!(
            (x[k] - want[k]).abs() < 1e-3,
            "axis {k}: {} vs {}",
            x[k],
            want[k]
        );
    }
    let back = ecef_to_geodetic(want).expect("valid");
    // 1e-10 rad is 0.6 mm on the ground.
    assert!((back.lat - g.lat).abs() < 1e-10, "lat {}", back.lat - g.lat);
    assert!((back.lon - g.lon).abs() < 1e-10, "lon {}", back.lon - g.lon);
    assert!((back.h - g.h).abs() < 1e-3, "h {}", back.h);
}

// Source: IOGP Guidance Note 7-2, EPSG method 9836 (geocentric/topocentric conversions),
// worked example on WGS84: topocentric origin φ0 = 55°N, λ0 = 5°E, h0 = 200 m; the point
// X = 3 771 793.97 m, Y = 140 253.34 m, Z = 5 124 304.35 m (the 9602 example above) has
// U (east) = −189 013.869 m, V (north) = −128 642.040 m, W (up) = −4 220.171 m. The values
// are from memory; the closed form reproduces all three to the millimetre, which confirms
// them.
#[test]
fn epsg_9836_worked_example_both_ways() {
    let frame = EnuFrame::new(&Geodetic::from_degrees(55.0, 5.0, 200.0)).expect("valid origin");
    let x = [3_771_793.968, 140_253.342, 5_124_304.349];
    let enu = frame.ecef_to_enu(x).expect("finite");
    let want = [-189_013.869, -128_642.040, -4_220.171];
    for k in 0..3 {
        assert!(
            (enu[k] - want[k]).abs() < 1e-3,
            "axis {k}: {} vs {}",
            enu[k],
            want[k]
        );
    }
    let back = frame.enu_to_ecef(want).expect("finite");
    for k in 0..3 {
        assert!(
            (back[k] - x[k]).abs() < 1e-3,
            "axis {k}: {} vs {}",
            back[k],
            x[k]
        );
    }
}

#[test]
fn round_trip_everywhere_including_poles() {
    for lat in [
        -90.0,
        -89.999_999,
        -60.0,
        -1e-9,
        0.0,
        12.5,
        45.0,
        77.7,
        89.9,
        90.0,
    ] {
        for lon in [-180.0, -97.3, 0.0, 33.3, 179.999] {
            for h in [-430.0, 0.0, 73.0, 8_848.0, 20_200_000.0] {
                let g = Geodetic::from_degrees(lat, lon, h);
                let x = geodetic_to_ecef(&g).expect("valid");
                let b = ecef_to_geodetic(x).expect("valid");
                assert!((b.lat - g.lat).abs() < 1e-12, "lat {lat} {lon} {h}");
                assert!((b.h - h).abs() < 1e-6, "h {lat} {lon} {h}: {}", b.h);
                if lat.abs() < 90.0 {
                    let dl = (b.lon - normalize_longitude(g.lon)).abs();
                    assert!(dl.min(2.0 * PI - dl) < 1e-12, "lon {lat} {lon} {h}");
                }
            }
        }
    }
    // At the pole Z = b + h and X = Y = 0 (definition of the semi-minor axis).
    let x = geodetic_to_ecef(&Geodetic::from_degrees(90.0, 0.0, 10.0)).expect("pole");
    assert!(x[0].abs() < 1e-9 && (x[2] - WGS84_B - 10.0).abs() < 1e-8);
}

#[test]
fn longitude_normalisation() {
    let n = |d: f64| normalize_longitude(d.to_radians()).to_degrees();
    assert!((n(190.0) + 170.0).abs() < 1e-12);
    assert!((n(180.0) - 180.0).abs() < 1e-12);
    assert!((n(-180.0) - 180.0).abs() < 1e-12);
    assert!((n(-190.0) - 170.0).abs() < 1e-12);
    assert!((n(370.0) - 10.0).abs() < 1e-12);
    let a = geodetic_to_ecef(&Geodetic::from_degrees(10.0, 370.0, 5.0)).expect("valid");
    let b = geodetic_to_ecef(&Geodetic::from_degrees(10.0, 10.0, 5.0)).expect("valid");
    for k in 0..3 {
        assert!((a[k] - b[k]).abs() < 1e-6);
    }
}

fn frame() -> EnuFrame {
    EnuFrame::new(&Geodetic::from_degrees(47.376_9, 8.541_7, 408.0)).expect("valid origin")
}

// Properties any ECEF → ENU rotation (EPSG method 9836) must have, beside the worked
// example above.
#[test]
fn enu_frame_properties() {
    let f = frame();
    let r = f.rotation;
    assert!(
        (r * r.transpose() - Matrix3::identity()).amax() < 1e-15,
        "orthonormal"
    );
    assert!((r.determinant() - 1.0).abs() < 1e-15, "right-handed");
    // Origin maps to 0.
    let o = f.ecef_to_enu(f.origin_ecef).expect("finite");
    assert!(o.iter().all(|v| v.abs() < 1e-9));
    // +1 m along the ellipsoid normal (h + 1) is U = 1.
    let up = f
        .geodetic_to_enu(&Geodetic {
            h: f.origin.h + 1.0,
            ..f.origin
        })
        .expect("valid");
    assert!(
        up[0].abs() < 1e-9 && up[1].abs() < 1e-9 && (up[2] - 1.0).abs() < 1e-9,
        "{up:?}"
    );
    // East is perpendicular to the meridian plane (which holds the polar axis and the
    // origin).
    let e = Vector3::new(r[(0, 0)], r[(0, 1)], r[(0, 2)]);
    assert!(e.dot(&Vector3::z()).abs() < 1e-15);
    assert!(e.dot(&Vector3::from(f.origin_ecef)).abs() < 1e-8);
    // A point on the same meridian has E = 0, and N > 0 to the north.
    let p = f
        .geodetic_to_enu(&Geodetic {
            lat: f.origin.lat + 0.01,
            h: 900.0,
            ..f.origin
        })
        .expect("valid");
    assert!(p[0].abs() < 1e-8 && p[1] > 0.0, "{p:?}");
}

// Small offsets against the radii of curvature: dN = (M + h)·dφ and dE = (N + h)cosφ·dλ
// to first order (Source: any geodesy text, e.g. Torge & Müller, Geodesy, 4th ed.,
// §4.1, radii of curvature of the ellipsoid). With dφ, dλ = 1e-7 rad (≈ 0.6 m) the
// second-order terms are below 1e-7 m.
#[test]
fn small_offsets_match_radii_of_curvature() {
    let f = frame();
    let (lat, h) = (f.origin.lat, f.origin.h);
    let d = 1e-7;
    let north = f
        .geodetic_to_enu(&Geodetic {
            lat: lat + d,
            ..f.origin
        })
        .expect("valid");
    let want_n = (meridian_radius(lat) + h) * d;
    assert!((north[1] - want_n).abs() < 1e-7, "{} vs {want_n}", north[1]);
    let east = f
        .geodetic_to_enu(&Geodetic {
            lon: f.origin.lon + d,
            ..f.origin
        })
        .expect("valid");
    let want_e = (prime_vertical_radius(lat) + h) * lat.cos() * d;
    assert!((east[0] - want_e).abs() < 1e-7, "{} vs {want_e}", east[0]);
}

#[test]
fn enu_round_trip_and_equator_axes() {
    let f = frame();
    for x in [
        [4_273_000.0, 642_000.0, 4_672_000.0],
        [-2_000_000.0, 5_000_000.0, -3_000_000.0],
    ] {
        let enu = f.ecef_to_enu(x).expect("finite");
        let back = f.enu_to_ecef(enu).expect("finite");
        for k in 0..3 {
            assert!((back[k] - x[k]).abs() < 1e-9, "{back:?} vs {x:?}");
        }
    }
    // At φ = λ = 0: East = +Y, North = +Z, Up = +X.
    let eq = EnuFrame::new(&Geodetic::new(0.0, 0.0, 0.0)).expect("valid");
    let enu = eq
        .ecef_to_enu([eq.origin_ecef[0] + 3.0, 2.0, 1.0])
        .expect("finite");
    assert!((enu[0] - 2.0).abs() < 1e-12 && (enu[1] - 1.0).abs() < 1e-12);
    assert!((enu[2] - 3.0).abs() < 1e-9);
}

#[test]
fn covariance_rotation() {
    // At φ = λ = 0 a diagonal ECEF covariance permutes: (σX², σY², σZ²) → E = σY²,
    // N = σZ², U = σX².
    let eq = EnuFrame::new(&Geodetic::new(0.0, 0.0, 0.0)).expect("valid");
    let c = Matrix3::from_diagonal(&Vector3::new(9e-6, 4e-6, 1e-6));
    let enu = eq.covariance_to_enu(&c).expect("valid");
    let want = Matrix3::from_diagonal(&Vector3::new(4e-6, 1e-6, 9e-6));
    assert!((enu - want).amax() < 1e-20);
    // Elsewhere: trace and eigenvalues are invariant, and the rotation round-trips.
    let f = frame();
    let c = Matrix3::new(4e-6, 1e-6, -5e-7, 1e-6, 3e-6, 2e-7, -5e-7, 2e-7, 9e-6);
    let enu = f.covariance_to_enu(&c).expect("valid");
    assert!((enu.trace() - c.trace()).abs() < 1e-20);
    assert!((enu.determinant() - c.determinant()).abs() < 1e-30);
    assert!((enu - enu.transpose()).amax() < 1e-21, "stays symmetric");
    let back = f.covariance_to_ecef(&enu).expect("valid");
    assert!((back - c).amax() < 1e-20);
    // Propagation law: the variance of U equals uᵀ C u with u the Up vector.
    let u = Vector3::new(f.rotation[(2, 0)], f.rotation[(2, 1)], f.rotation[(2, 2)]);
    assert!((enu[(2, 2)] - (u.transpose() * c * u)[(0, 0)]).abs() < 1e-20);

    let mut bad = c;
    bad[(0, 1)] = 2e-6;
    assert!(matches!(
        f.covariance_to_enu(&bad),
        Err(CoreError::InvalidParameter {
            name: "covariance",
            ..
        })
    ));
    bad[(0, 1)] = f64::NAN;
    assert!(matches!(
        f.covariance_to_enu(&bad),
        Err(CoreError::NonFinite { field: "xy", .. })
    ));
}

#[test]
fn directions_both_conventions() {
    let cases = [
        ((1.0, 0.0), FRAC_PI_2, 0.0),
        ((0.0, 1.0), 0.0, FRAC_PI_2),
        ((-1.0, 0.0), 1.5 * PI, PI),
        ((0.0, -1.0), PI, -FRAC_PI_2),
        ((-1.0, -1.0), 1.25 * PI, -0.75 * PI),
        ((1.0, 1.0), 0.25 * PI, 0.25 * PI),
    ];
    for ((e, n), az, ang) in cases {
        let d = direction(e, n).expect("non-zero");
        assert!(
            (d.azimuth - az).abs() < 1e-15,
            "({e}, {n}) az {}",
            d.azimuth
        );
        assert!((d.angle_from_east - ang).abs() < 1e-15, "({e}, {n})");
        assert!((azimuth_from_angle(d.angle_from_east) - az).abs() < 1e-15);
        assert!((0.0..2.0 * PI).contains(&d.azimuth));
    }
    assert!(matches!(
        direction(0.0, 0.0),
        Err(CoreError::InvalidParameter {
            name: "direction",
            ..
        })
    ));
    assert!(matches!(
        direction(f64::NAN, 1.0),
        Err(CoreError::NonFinite { field: "east", .. })
    ));
}

#[test]
fn bad_input_gets_typed_errors() {
    match geodetic_to_ecef(&Geodetic::from_degrees(91.5, 0.0, 0.0)) {
        Err(CoreError::LatitudeOutOfRange { degrees }) => {
            assert!((degrees - 91.5).abs() < 1e-12)
        }
        other => panic!("expected LatitudeOutOfRange, got {other:?}"),
    }
    assert!(matches!(
        EnuFrame::new(&Geodetic::from_degrees(-90.0001, 0.0, 0.0)),
        Err(CoreError::LatitudeOutOfRange { .. })
    ));
    assert_eq!(
        geodetic_to_ecef(&Geodetic::new(0.1, f64::NAN, 0.0)),
        Err(CoreError::NonFinite {
            id: "geodetic".into(),
            field: "lon"
        })
    );
    assert_eq!(
        ecef_to_geodetic([1.0, f64::INFINITY, 0.0]),
        Err(CoreError::NonFinite {
            id: "ecef".into(),
            field: "y"
        })
    );
    assert!(matches!(
        ecef_to_geodetic([1000.0, 0.0, 0.0]),
        Err(CoreError::InvalidParameter { name: "ecef", .. })
    ));
    assert!(matches!(
        frame().enu_to_ecef([0.0, f64::NAN, 0.0]),
        Err(CoreError::NonFinite { field: "n", .. })
    ));
}
