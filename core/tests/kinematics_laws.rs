//! Kinematics of one displacement gradient: textbook formula checks and property laws.

use kinema_core::CoreError;
use kinema_core::kinematics::{
    AdequacyReason, Degeneracy3, KinematicsOptions, Mat2, Mat3, analyze2, analyze3, frame2, frame3,
    normal_strain, on_plane2, on_plane3, shear_between, sym_eigen2, sym_eigen3, transform2,
    transform3,
};
use nalgebra::{Matrix2, Matrix3, Rotation2, Rotation3, Vector2, Vector3};
use proptest::prelude::*;

fn opts() -> KinematicsOptions {
    KinematicsOptions::default()
}

fn m2(a: &Mat2) -> Matrix2<f64> {
    Matrix2::new(a[0][0], a[0][1], a[1][0], a[1][1])
}

fn m3(a: &Mat3) -> Matrix3<f64> {
    Matrix3::from_fn(|i, j| a[i][j])
}

fn close(a: f64, b: f64, tol: f64) -> bool {
    (a - b).abs() <= tol
}

fn assert_close(a: f64, b: f64, tol: f64, what: &str) {
    assert!(close(a, b, tol), "{what}: {a:e} vs {b:e} (tol {tol:e})");
}

fn same_up_to_sign3(a: [f64; 3], b: [f64; 3], tol: f64) -> bool {
    let d = Vector3::from(a) - Vector3::from(b);
    let s = Vector3::from(a) + Vector3::from(b);
    d.norm() <= tol || s.norm() <= tol
}

// ---------------------------------------------------------------------------------
// Textbook checks
// ---------------------------------------------------------------------------------

/// Source: plane-strain transformation / principal strain formulas,
/// Gere & Goodno, Mechanics of Materials, ch. 7, strain transformation (chapter number from memory):
/// e1,2 = (εx+εy)/2 ± √(((εx−εy)/2)² + (γxy/2)²), tan 2θp = γxy/(εx−εy).
/// Worked by hand: εx = 500e-6, εy = 100e-6, γxy = 300e-6 (εxy = 150e-6):
/// centre = 300e-6, (εx−εy)/2 = 200e-6, R = √(200² + 150²)·1e-6 = 250e-6,
/// e1 = 550e-6, e2 = 50e-6, γmax = e1 − e2 = 500e-6,
/// tan 2θp = 300/400 = 0.75 → θp = ½·atan(0.75) = 0.32175055439664219 rad (18.435°).
#[test]
fn principal_2d_worked_example() {
    let g = Matrix2::new(500e-6, 150e-6, 150e-6, 100e-6);
    let k = analyze2(&g, &opts()).expect("valid gradient");
    assert_close(k.strain.exx, 500e-6, 1e-18, "exx");
    assert_close(k.strain.gxy, 300e-6, 1e-18, "gxy");
    assert_close(k.principal.e1, 550e-6, 1e-18, "e1");
    assert_close(k.principal.e2, 50e-6, 1e-18, "e2");
    let theta = k
        .principal
        .theta1
        .expect("distinct values have a direction");
    assert_close(theta, 0.5 * 0.75_f64.atan(), 1e-15, "theta1");
    assert_close(theta, 0.321_750_554_396_642_2, 1e-15, "theta1 numeric");
    assert_close(k.max_shear.engineering_shear, 500e-6, 1e-18, "gamma_max");
    assert_close(k.max_shear.tensor_shear, 250e-6, 1e-18, "eps_max shear");
    assert_close(
        k.max_shear.normal_strain,
        300e-6,
        1e-18,
        "normal on max shear planes",
    );
    // Planes of max shear at θp ± 45°.
    let planes = k.max_shear.plane_normals.expect("planes defined");
    let t45 = theta + std::f64::consts::FRAC_PI_4;
    assert_close(planes[0][0], t45.cos(), 1e-15, "plane normal x");
    assert_close(planes[0][1], t45.sin(), 1e-15, "plane normal y");
    // Shear on that plane is the maximum (in magnitude).
    let s = on_plane2(&m2(&k.strain_tensor), &planes[0]).expect("unit normal");
    assert_close(s.tensor_shear.abs(), 250e-6, 1e-18, "shear on max plane");
    assert_close(s.normal_strain, 300e-6, 1e-18, "normal on max plane");
}

/// Source: as above (Gere & Goodno ch. 7). Case εx < εy with negative shear, worked
/// by hand: εx = −200e-6, εy = 400e-6, εxy = −400e-6: centre = 100e-6,
/// R = √(300² + 400²)·1e-6 = 500e-6, e1 = 600e-6, e2 = −400e-6.
/// tan 2θp = 2εxy/(εx−εy) = (−800)/(−600) = 4/3; the root belonging to e1 is
/// θ1 = atan(−2) = −1.1071487177940904 rad: n1 = (1, −2)/√5 and
/// ε·n1 = (−200 + 800, −400 − 800)/√5 ·1e-6 = 600e-6 · (1, −2)/√5.
#[test]
fn principal_2d_second_quadrant_angle() {
    let g = Matrix2::new(-200e-6, -400e-6, -400e-6, 400e-6);
    let k = analyze2(&g, &opts()).expect("valid gradient");
    assert_close(k.principal.e1, 600e-6, 1e-18, "e1");
    assert_close(k.principal.e2, -400e-6, 1e-18, "e2");
    let theta = k.principal.theta1.expect("direction");
    assert_close(theta, (-2.0_f64).atan(), 1e-15, "theta1");
    assert_close((2.0 * theta).tan(), 4.0 / 3.0, 1e-12, "tan 2θp");
    let n1 = k.principal.n1.expect("n1");
    assert_close(n1[0], 1.0 / 5f64.sqrt(), 1e-15, "n1x");
    assert_close(n1[1], -2.0 / 5f64.sqrt(), 1e-15, "n1y");
}

/// Source: Mohr's circle of strain, Beer & Johnston, Mechanics of Materials, ch. 7 (chapter from memory)
/// (centre (εx+εy)/2, radius √(((εx−εy)/2)² + (γxy/2)²), point X = (εx, γxy/2),
/// Y = (εy, −γxy/2)). Numbers of the first worked example above.
#[test]
fn mohr_2d_centre_radius_faces() {
    let g = Matrix2::new(500e-6, 150e-6, 150e-6, 100e-6);
    let k = analyze2(&g, &opts()).expect("valid gradient");
    assert_close(k.mohr.centre, 300e-6, 1e-18, "centre");
    assert_close(k.mohr.radius, 250e-6, 1e-18, "radius");
    assert_close(k.mohr.x_face.normal_strain, 500e-6, 1e-18, "X ε");
    assert_close(k.mohr.x_face.tensor_shear, 150e-6, 1e-18, "X γ/2");
    assert_close(k.mohr.x_face.engineering_shear, 300e-6, 1e-18, "X γ");
    assert_close(k.mohr.y_face.normal_strain, 100e-6, 1e-18, "Y ε");
    assert_close(k.mohr.y_face.tensor_shear, -150e-6, 1e-18, "Y γ/2");
    assert_eq!(k.mohr.principal_angle, k.principal.theta1);
    // Both face points lie on the circle.
    for p in [k.mohr.x_face, k.mohr.y_face] {
        let r = (p.normal_strain - k.mohr.centre).hypot(p.tensor_shear);
        assert_close(r, k.mohr.radius, 1e-18, "face on circle");
    }
}

/// Source: strain transformation equations, Gere & Goodno ch. 7:
/// εx1 = (εx+εy)/2 + (εx−εy)/2·cos 2θ + (γxy/2)·sin 2θ,
/// γx1y1/2 = −(εx−εy)/2·sin 2θ + (γxy/2)·cos 2θ.
/// At θ = 30°, with the first worked example: cos 60° = 0.5, sin 60° = √3/2:
/// εx1 = 300 + 200·0.5 + 150·0.8660254 = 529.9038106e-6,
/// γx1y1/2 = −200·0.8660254 + 150·0.5 = −98.2050808e-6.
#[test]
fn transformation_into_deck_axis() {
    let eps = Matrix2::new(500e-6, 150e-6, 150e-6, 100e-6);
    let q = frame2(30f64.to_radians());
    let t = transform2(&eps, &q).expect("proper rotation");
    let s3 = 3f64.sqrt() / 2.0;
    assert_close(t[(0, 0)], (300.0 + 100.0 + 150.0 * s3) * 1e-6, 1e-18, "εx1");
    assert_close(t[(0, 1)], (-200.0 * s3 + 75.0) * 1e-6, 1e-18, "εx1y1");
    let n = normal_strain(&eps, &[30f64.to_radians().cos(), 30f64.to_radians().sin()])
        .expect("direction");
    assert_close(n, t[(0, 0)], 1e-18, "normal strain along 30°");
    // A reflection is not a frame change.
    let bad = Matrix2::new(1.0, 0.0, 0.0, -1.0);
    assert!(matches!(
        transform2(&eps, &bad),
        Err(CoreError::InvalidParameter { name: "frame", .. })
    ));
}

/// Source: polar decomposition of simple shear F = [[1, γ], [0, 1]], Ogden,
/// Non-linear Elastic Deformations, §2.2 (from memory; verified here by hand):
/// λ1,2 = √(1 + γ²/4) ± γ/2, tan θ = γ/2 (clockwise for shear of the top to +x),
/// U = [[2, γ], [γ, 2 + γ²]]/√(4 + γ²), V = [[2 + γ², γ], [γ, 2]]/√(4 + γ²).
/// Hand arithmetic for γ = 1: λ1 = 0.5 + √1.25 = 1.6180339887 (golden ratio), λ2 = 1/λ1,
/// Rᵀ = [[2, −1], [1, 2]]/√5 so U = RᵀF = [[2, 1], [1, 3]]/√5. ln λ1,2 = ±asinh(γ/2).
#[test]
fn polar_decomposition_simple_shear_2d() {
    for gamma in [1.0, 0.3, 1e-3, 2.5] {
        let g = Matrix2::new(0.0, gamma, 0.0, 0.0);
        let k = analyze2(&g, &opts()).expect("valid gradient");
        let f = &k.finite;
        let root = (1.0 + gamma * gamma / 4.0).sqrt();
        assert_close(f.principal_stretches[0], root + gamma / 2.0, 1e-14, "λ1");
        assert_close(f.principal_stretches[1], root - gamma / 2.0, 1e-14, "λ2");
        assert_close(f.rotation_angle, -(gamma / 2.0).atan(), 1e-15, "θ");
        assert_close(f.jacobian, 1.0, 1e-15, "J");
        let d = (4.0 + gamma * gamma).sqrt();
        let u_ref = [[2.0 / d, gamma / d], [gamma / d, (2.0 + gamma * gamma) / d]];
        let v_ref = [[(2.0 + gamma * gamma) / d, gamma / d], [gamma / d, 2.0 / d]];
        for i in 0..2 {
            for j in 0..2 {
                assert_close(f.right_stretch[i][j], u_ref[i][j], 1e-14, "U");
                assert_close(f.left_stretch[i][j], v_ref[i][j], 1e-14, "V");
            }
        }
        assert_close(f.hencky_principal[0], (gamma / 2.0).asinh(), 1e-14, "ln λ1");
        assert_close(
            f.hencky_principal[1],
            -(gamma / 2.0).asinh(),
            1e-14,
            "ln λ2",
        );
        // Green–Lagrange of simple shear: E = [[0, γ/2], [γ/2, γ²/2]].
        assert_close(f.green_lagrange[0][1], gamma / 2.0, 1e-15, "E12");
        assert_close(f.green_lagrange[1][1], gamma * gamma / 2.0, 1e-15, "E22");
        // Euler–Almansi of simple shear: e = [[0, γ/2], [γ/2, −γ²/2]].
        assert_close(f.euler_almansi[0][1], gamma / 2.0, 1e-14, "e12");
        assert_close(f.euler_almansi[1][1], -gamma * gamma / 2.0, 1e-14, "e22");
        assert_close(f.euler_almansi[0][0], 0.0, 1e-14, "e11");
    }
}

/// Same simple shear in 3D (plane x–y; z unchanged): stretches (λ1, 1, λ2),
/// rotation about −z by atan(γ/2). Source as above (Ogden §2.2, from memory).
#[test]
fn polar_decomposition_simple_shear_3d() {
    let gamma = 1.0;
    let g = Matrix3::new(0.0, gamma, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0);
    let k = analyze3(&g, &opts()).expect("valid gradient");
    let f = &k.finite;
    let phi = (1.0 + 5f64.sqrt()) / 2.0;
    assert_close(f.principal_stretches[0], phi, 1e-14, "λ1");
    assert_close(f.principal_stretches[1], 1.0, 1e-14, "λ2");
    assert_close(f.principal_stretches[2], 1.0 / phi, 1e-14, "λ3");
    assert_close(f.rotation_angle, 0.5_f64.atan(), 1e-14, "angle");
    let axis = f.rotation_axis.expect("non-zero rotation");
    assert!(same_up_to_sign3(axis, [0.0, 0.0, -1.0], 1e-12) && axis[2] < 0.0);
    let u = m3(&f.right_stretch);
    let r = m3(&f.rotation);
    let fr = r * u;
    assert!(
        (fr - (Matrix3::identity() + g)).abs().max() < 1e-14,
        "F = RU"
    );
    assert_close(u[(0, 0)], 2.0 / 5f64.sqrt(), 1e-14, "U11");
    assert_close(u[(1, 1)], 3.0 / 5f64.sqrt(), 1e-14, "U22");
    assert_close(u[(2, 2)], 1.0, 1e-14, "U33");
}

/// Source: strain measures of a uniaxial stretch λ, Holzapfel, Nonlinear Solid
/// Mechanics, ch. 2 (from memory): Green–Lagrange E = (λ² − 1)/2, Euler–Almansi
/// e = (1 − λ⁻²)/2, Hencky ln λ, J = λ. λ = 1.2 by hand: E = 0.22,
/// e = (1 − 1/1.44)/2 = 0.15277…, ln 1.2 = 0.1823215567939546.
#[test]
fn uniaxial_stretch_measures() {
    for lambda in [1.2, 0.8, 1.0 + 1e-6, 3.0] {
        let g2 = Matrix2::new(lambda - 1.0, 0.0, 0.0, 0.0);
        let g3 = Matrix3::new(lambda - 1.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0);
        let k2 = analyze2(&g2, &opts()).expect("valid gradient");
        let k3 = analyze3(&g3, &opts()).expect("valid gradient");
        let e_gl = (lambda * lambda - 1.0) / 2.0;
        let e_ea = (1.0 - 1.0 / (lambda * lambda)) / 2.0;
        assert_close(k2.finite.green_lagrange[0][0], e_gl, 1e-15, "E 2D");
        assert_close(k3.finite.green_lagrange[0][0], e_gl, 1e-15, "E 3D");
        assert_close(k2.finite.euler_almansi[0][0], e_ea, 1e-15, "e 2D");
        assert_close(k3.finite.euler_almansi[0][0], e_ea, 1e-15, "e 3D");
        let h2 = k2.finite.hencky[0][0];
        let h3 = k3.finite.hencky[0][0];
        assert_close(
            h2,
            lambda.ln(),
            1e-15 * lambda.ln().abs().max(1.0),
            "ln λ 2D",
        );
        assert_close(
            h3,
            lambda.ln(),
            1e-15 * lambda.ln().abs().max(1.0),
            "ln λ 3D",
        );
        assert_close(k2.finite.jacobian, lambda, 1e-15, "J 2D");
        assert_close(k3.finite.jacobian, lambda, 1e-15, "J 3D");
    }
    let g = Matrix2::new(0.2, 0.0, 0.0, 0.0);
    let k = analyze2(&g, &opts()).expect("valid gradient");
    assert_close(k.finite.green_lagrange[0][0], 0.22, 1e-15, "E λ=1.2");
    assert_close(
        k.finite.hencky[0][0],
        0.182_321_556_793_954_6,
        1e-15,
        "ln 1.2",
    );
}

/// Source: von Mises equivalent strain ε_eq = √(2/3 e′:e′) (Hill, The Mathematical
/// Theory of Plasticity, 1950; from memory) and octahedral shear strain
/// γ_oct = (2/3)√((e1−e2)² + (e2−e3)² + (e3−e1)²) (common practice in soil mechanics).
/// Isochoric uniaxial diag(ε, −ε/2, −ε/2): ε_eq = ε, γ_oct = (2/3)·1.5ε·√2 = √2·ε.
/// Pure shear εxy = γ/2 (small): ε_eq = √(2/3 · 2·(γ/2)²) = γ/√3.
#[test]
fn von_mises_and_octahedral() {
    let e = 400e-6;
    let g = Matrix3::from_diagonal(&Vector3::new(e, -e / 2.0, -e / 2.0));
    let k = analyze3(&g, &opts()).expect("valid gradient");
    assert_close(k.von_mises, e, 1e-18, "ε_eq uniaxial");
    assert_close(
        k.octahedral.engineering_shear,
        2f64.sqrt() * e,
        1e-18,
        "γ_oct",
    );
    assert_close(
        k.octahedral.tensor_shear,
        e / 2f64.sqrt(),
        1e-18,
        "ε_oct shear",
    );
    assert_close(k.octahedral.normal_strain, 0.0, 1e-18, "ε_oct normal");
    assert_close(k.invariants.j2, 0.75 * e * e, 1e-22, "J2 = 3ε²/4");
    // 2D pure shear, plane-strain embedding (ε_zz = 0).
    let gamma = 300e-6;
    let g2 = Matrix2::new(0.0, gamma / 2.0, gamma / 2.0, 0.0);
    let k2 = analyze2(&g2, &opts()).expect("valid gradient");
    assert_close(k2.von_mises, gamma / 3f64.sqrt(), 1e-18, "ε_eq pure shear");
    assert_close(k2.invariants.i3, 0.0, 1e-30, "I3 of embedded 2D tensor");
    assert_close(
        k2.invariants.i2,
        -(gamma / 2.0).powi(2),
        1e-22,
        "I2 = −εxy²",
    );
}

/// 3D principal values by hand: ε = [[4,1,0],[1,4,0],[0,0,1]]·1e-4 has eigenvalues
/// 5, 3, 1 (·1e-4) with directions (1,1,0)/√2, (1,−1,0)/√2, (0,0,1) (block
/// [[4,1],[1,4]] → 4 ± 1). Source: characteristic polynomial, worked by hand.
/// ε = [[2,1,0],[1,2,0],[0,0,3]]·1e-4 has 3, 3, 1: e1 = e2 is degenerate, only the
/// direction of e3, (1,−1,0)/√2, is defined.
#[test]
fn principal_3d_by_hand_and_degenerate() {
    let g = Matrix3::new(4.0, 1.0, 0.0, 1.0, 4.0, 0.0, 0.0, 0.0, 1.0) * 1e-4;
    let k = analyze3(&g, &opts()).expect("valid gradient");
    let p = k.principal;
    assert_close(p.e1, 5e-4, 1e-18, "e1");
    assert_close(p.e2, 3e-4, 1e-18, "e2");
    assert_close(p.e3, 1e-4, 1e-18, "e3");
    let h = std::f64::consts::FRAC_1_SQRT_2;
    assert!(same_up_to_sign3(p.n1.expect("n1"), [h, h, 0.0], 1e-12));
    assert!(same_up_to_sign3(p.n2.expect("n2"), [h, -h, 0.0], 1e-12));
    assert!(same_up_to_sign3(p.n3.expect("n3"), [0.0, 0.0, 1.0], 1e-12));
    assert_eq!(p.degeneracy, Degeneracy3::Distinct);
    let planes = k.max_shear.plane_normals.expect("planes");
    assert_close(k.max_shear.engineering_shear, 4e-4, 1e-18, "γmax = e1 − e3");
    for n in planes {
        let s = on_plane3(&m3(&k.strain_tensor), &n).expect("normal");
        assert_close(s.tensor_shear, 2e-4, 1e-18, "shear on max plane");
    }
    assert_close(k.mohr.c13.radius, 2e-4, 1e-18, "c13 radius");
    assert_close(k.mohr.c12.centre, 4e-4, 1e-18, "c12 centre");

    let g = Matrix3::new(2.0, 1.0, 0.0, 1.0, 2.0, 0.0, 0.0, 0.0, 3.0) * 1e-4;
    let k = analyze3(&g, &opts()).expect("valid gradient");
    let p = k.principal;
    assert_eq!(p.degeneracy, Degeneracy3::FirstPair);
    assert!(p.degenerate && !p.isotropic);
    assert!(p.n1.is_none() && p.n2.is_none());
    assert!(same_up_to_sign3(p.n3.expect("n3"), [h, -h, 0.0], 1e-12));
    assert!(k.max_shear.plane_normals.is_none());
    assert_close(p.e1, 3e-4, 1e-18, "e1");
    assert_close(p.e3, 1e-4, 1e-18, "e3");
}

/// Isotropic states: no direction anywhere, no max-shear planes, flags set.
/// Source: definition (every direction is principal for ε = e·I).
#[test]
fn isotropic_and_zero_states() {
    for e in [0.0, 1e-4, -3e-6] {
        let k2 = analyze2(&(Matrix2::identity() * e), &opts()).expect("valid");
        assert!(k2.principal.isotropic);
        assert!(k2.principal.theta1.is_none() && k2.principal.n1.is_none());
        assert!(k2.max_shear.plane_normals.is_none());
        assert!(k2.mohr.principal_angle.is_none());
        let k3 = analyze3(&(Matrix3::identity() * e), &opts()).expect("valid");
        assert!(k3.principal.isotropic && k3.principal.degenerate);
        assert!(k3.principal.n1.is_none() && k3.principal.n2.is_none());
        assert!(k3.principal.n3.is_none());
        assert!(k3.finite.rotation_axis.is_none());
    }
}

/// Adequacy: rigid rotation of 0.3° (ω = 5.2360e-3 rad) puts ω²/2 = 1.3708e-5
/// (≈ 14 microstrain) of spurious strain into ε (Source: expansion cos ω − 1 ≈ −ω²/2,
/// e.g. Malvern, Introduction to the Mechanics of a Continuous Medium, §4.6, from memory).
#[test]
fn adequacy_rotation_and_gradient() {
    let th = 0.3f64.to_radians();
    let r = Rotation2::new(th).into_inner();
    let g = r - Matrix2::identity();
    let k = analyze2(&g, &opts()).expect("valid");
    assert!(!k.adequacy.adequate);
    assert_close(k.adequacy.rotation_spurious_strain, 1.3708e-5, 1e-8, "ω²/2");
    // The spurious strain shows up in ε itself: εxx = cos ω − 1.
    assert_close(k.strain.exx, th.cos() - 1.0, 1e-18, "spurious εxx");
    assert_eq!(k.adequacy.reasons.len(), 1);
    assert!(matches!(
        k.adequacy.reasons[0],
        AdequacyReason::RotationTooLarge { .. }
    ));
    assert!(
        k.adequacy.reasons[0]
            .to_string()
            .contains("rotation too large")
    );
    // 0.01° gives 1.5e-8: adequate at 1 microstrain.
    let g = Rotation2::new(0.01f64.to_radians()).into_inner() - Matrix2::identity();
    assert!(analyze2(&g, &opts()).expect("valid").adequacy.adequate);
    // A pure stretch of 1 % has a quadratic term of 5e-5: gradient too large.
    let g = Matrix3::from_diagonal(&Vector3::new(0.01, 0.0, 0.0));
    let k = analyze3(&g, &opts()).expect("valid");
    assert!(!k.adequacy.adequate);
    assert_eq!(k.adequacy.reasons.len(), 1);
    match &k.adequacy.reasons[0] {
        AdequacyReason::GradientTooLarge {
            quadratic_strain, ..
        } => assert_close(*quadratic_strain, 5e-5, 1e-18, "ε²/2"),
        other => panic!("expected gradient reason, got {other:?}"),
    }
    // A coarser resolution accepts the same gradient.
    let coarse = KinematicsOptions {
        strain_resolution: 1e-4,
        ..opts()
    };
    assert!(analyze3(&g, &coarse).expect("valid").adequacy.adequate);
}

/// Change of angle between two non-perpendicular material lines, checked against the
/// exact angle after deformation (Source: definition of shear strain as the change of
/// angle, e.g. Malvern §4.6, from memory; exact geometry by vectors, first order in ε).
#[test]
fn shear_between_general_pair_matches_geometry() {
    let g = Matrix2::new(1e-5, 4e-6, -2e-6, -3e-6);
    let eps = (g + g.transpose()) * 0.5;
    let a = Vector2::new(1.0, 0.2).normalize();
    let b = Vector2::new(0.3, 1.0).normalize();
    let before = a.angle(&b);
    let s = shear_between(&eps, &[a[0], a[1]], &[b[0], b[1]]).expect("pair");
    assert_close(s.initial_angle, before, 1e-15, "θ0");
    assert_close(
        s.tensor_shear,
        0.5 * s.engineering_shear,
        0.0,
        "tensor = γ/2",
    );
    // First-order formula: the error against the exact angle change is O(|G|²) and
    // shrinks quadratically when G is scaled down.
    let mut last_err = f64::INFINITY;
    for scale in [1.0, 0.1, 0.01] {
        let gs = g * scale;
        let after = ((Matrix2::identity() + gs) * a).angle(&((Matrix2::identity() + gs) * b));
        let es = (gs + gs.transpose()) * 0.5;
        let s = shear_between(&es, &[a[0], a[1]], &[b[0], b[1]]).expect("pair");
        let err = (s.engineering_shear - (before - after)).abs();
        assert!(
            err <= 2.0 * (1e-5 * scale).powi(2),
            "second-order error {err:e}"
        );
        assert!(
            err < last_err / 50.0,
            "error shrinks quadratically: {err:e} vs {last_err:e}"
        );
        last_err = err;
    }
    // Perpendicular pair x, y gives the engineering shear γxy.
    let s = shear_between(&eps, &[1.0, 0.0], &[0.0, 2.0]).expect("pair");
    assert_close(s.engineering_shear, 2.0 * eps[(0, 1)], 1e-20, "γxy");
    assert!(shear_between(&eps, &[1.0, 0.0], &[2.0, 0.0]).is_err());
    assert!(normal_strain(&eps, &[0.0, 0.0]).is_err());
    assert!(normal_strain(&eps, &[f64::NAN, 1.0]).is_err());
    let nan = Matrix2::new(f64::NAN, 0.0, 0.0, 0.0);
    assert!(normal_strain(&nan, &[1.0, 0.0]).is_err());
    assert!(matches!(
        sym_eigen2(&nan, 1e-10),
        Err(CoreError::NonFinite { ref id, .. }) if id == "tensor"
    ));
    assert!(sym_eigen3(&Matrix3::from_element(f64::INFINITY), 1e-10).is_err());
}

/// A deck-axis frame: rows orthonormal and right-handed; z′ along the vertical.
#[test]
fn frame3_is_right_handed() {
    let q = frame3(&[3.0, 4.0, 0.1], &[0.0, 0.0, 1.0]).expect("frame");
    assert!((q * q.transpose() - Matrix3::identity()).abs().max() < 1e-14);
    assert_close(q.determinant(), 1.0, 1e-14, "det");
    assert!(q[(2, 2)] > 0.99);
    let eps = Matrix3::new(1.0, 2.0, 0.0, 2.0, -1.0, 0.5, 0.0, 0.5, 3.0) * 1e-5;
    let t = transform3(&eps, &q).expect("rotation");
    let along = normal_strain(&eps, &[3.0, 4.0, 0.1]).expect("direction");
    assert_close(t[(0, 0)], along, 1e-20, "ε along deck axis");
    assert!(frame3(&[1.0, 0.0, 0.0], &[2.0, 0.0, 0.0]).is_err());
}

#[test]
fn bad_input_gets_typed_errors() {
    let mut g = Matrix2::zeros();
    g[(0, 1)] = f64::NAN;
    assert!(matches!(
        analyze2(&g, &opts()),
        Err(CoreError::NonFinite { ref id, .. }) if id == "gradient"
    ));
    let mut g3 = Matrix3::zeros();
    g3[(2, 2)] = f64::INFINITY;
    assert!(matches!(
        analyze3(&g3, &opts()),
        Err(CoreError::NonFinite { ref id, .. }) if id == "gradient"
    ));
    // J = det(I + G) = 0: inadmissible.
    let g = Matrix2::new(-1.0, 0.0, 0.0, 0.0);
    assert!(matches!(
        analyze2(&g, &opts()),
        Err(CoreError::InvalidParameter {
            name: "gradient",
            ..
        })
    ));
    let g3 = Matrix3::from_diagonal(&Vector3::new(-2.0, 0.0, 0.0));
    assert!(analyze3(&g3, &opts()).is_err());
    let bad = KinematicsOptions {
        strain_resolution: 0.0,
        ..opts()
    };
    assert!(matches!(
        analyze2(&Matrix2::zeros(), &bad),
        Err(CoreError::InvalidParameter {
            name: "strain_resolution",
            ..
        })
    ));
    let bad = KinematicsOptions {
        degenerate_tol: f64::NAN,
        ..opts()
    };
    assert!(analyze3(&Matrix3::zeros(), &bad).is_err());
    assert!(analyze2(&Matrix2::new(1e7, 0.0, 0.0, 0.0), &opts()).is_err());
}

#[test]
fn serialises_to_json() {
    let g = Matrix3::new(1e-4, 2e-5, 0.0, 0.0, -5e-5, 1e-5, 3e-6, 0.0, 2e-5);
    let k = analyze3(&g, &opts()).expect("valid");
    let v = serde_json::to_value(&k).expect("serialise");
    assert!(v["principal"]["e1"].is_number());
    assert!(v["strain"]["gxy"].is_number());
    assert!(v["finite"]["right_stretch"][2][2].is_number());
    assert_eq!(v["adequacy"]["adequate"], serde_json::Value::Bool(true));
}

// ---------------------------------------------------------------------------------
// Property laws
// ---------------------------------------------------------------------------------

fn strain_entry() -> impl Strategy<Value = f64> {
    -1e-3..1e-3f64
}

fn sym2() -> impl Strategy<Value = Matrix2<f64>> {
    (strain_entry(), strain_entry(), strain_entry()).prop_map(|(a, b, c)| Matrix2::new(a, b, b, c))
}

fn sym3() -> impl Strategy<Value = Matrix3<f64>> {
    proptest::array::uniform6(strain_entry())
        .prop_map(|e| Matrix3::new(e[0], e[3], e[5], e[3], e[1], e[4], e[5], e[4], e[2]))
}

fn rotation3() -> impl Strategy<Value = Rotation3<f64>> {
    (
        proptest::array::uniform3(-1.0..1.0f64),
        0.0..std::f64::consts::PI,
    )
        .prop_filter("axis must be non-zero", |(a, _)| {
            Vector3::from(*a).norm() > 1e-3
        })
        .prop_map(|(a, angle)| {
            Rotation3::from_axis_angle(&nalgebra::Unit::new_normalize(Vector3::from(a)), angle)
        })
}

/// Tensors with (near-)repeated principal values: Q·diag(a, a+δ, b)·Qᵀ.
fn repeated3() -> impl Strategy<Value = Matrix3<f64>> {
    (
        rotation3(),
        strain_entry(),
        strain_entry(),
        prop_oneof![Just(0.0), 0.0..1e-12f64, 0.0..5e-11f64],
        0usize..3,
    )
        .prop_map(|(r, a, b, d, case)| {
            let diag = match case {
                0 => Vector3::new(a, a + d, b),
                1 => Vector3::new(a, a + d, a - d),
                _ => Vector3::new(0.0, 0.0, 0.0),
            };
            let q = r.into_inner();
            q * Matrix3::from_diagonal(&diag) * q.transpose()
        })
}

fn has_rotation_reason(a: &kinema_core::kinematics::Adequacy) -> bool {
    a.reasons
        .iter()
        .any(|x| matches!(x, AdequacyReason::RotationTooLarge { .. }))
}

fn has_gradient_reason(a: &kinema_core::kinematics::Adequacy) -> bool {
    a.reasons
        .iter()
        .any(|x| matches!(x, AdequacyReason::GradientTooLarge { .. }))
}

fn no_nan<T: std::fmt::Debug>(x: &T) -> bool {
    let s = format!("{x:?}");
    !s.contains("NaN") && !s.contains("inf")
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(256))]

    /// Principal values are invariant under a frame rotation (2D).
    /// Source: invariance of eigenvalues under similarity, any linear algebra text.
    #[test]
    fn principal_invariant_under_rotation_2d(eps in sym2(), angle in -3.2..3.2f64) {
        let a = sym_eigen2(&eps, 1e-10).expect("finite");
        let t = transform2(&eps, &frame2(angle)).expect("rotation");
        let b = sym_eigen2(&t, 1e-10).expect("finite");
        let scale = eps.norm().max(1e-300);
        prop_assert!(close(a.values[0], b.values[0], 1e-14 * scale));
        prop_assert!(close(a.values[1], b.values[1], 1e-14 * scale));
        // The principal angle turns with the frame (mod π) when distinct.
        if let (Some(t1), Some(t2)) = (a.angle, b.angle)
            && a.gap > 1e-9
        {
            let d = (t1 - angle - t2).rem_euclid(std::f64::consts::PI);
            prop_assert!(d < 1e-6 || std::f64::consts::PI - d < 1e-6, "angle moved by {d}");
        }
    }

    /// Principal values are invariant under a frame rotation (3D).
    #[test]
    fn principal_invariant_under_rotation_3d(eps in sym3(), r in rotation3()) {
        let a = sym_eigen3(&eps, 1e-10).expect("converges");
        let t = transform3(&eps, r.matrix()).expect("rotation");
        let b = sym_eigen3(&t, 1e-10).expect("converges");
        let scale = eps.norm().max(1e-300);
        for i in 0..3 {
            prop_assert!(close(a.values[i], b.values[i], 1e-13 * scale));
        }
    }

    /// Trace = volumetric strain = e1 + e2 (+ e3) = I1.
    /// Source: trace invariance (sum of eigenvalues), any linear algebra text.
    #[test]
    fn trace_is_volumetric(g2 in sym2(), w in strain_entry(), g3 in sym3(), w3 in proptest::array::uniform3(strain_entry())) {
        let g = g2 + Matrix2::new(0.0, -w, w, 0.0);
        let k = analyze2(&g, &opts()).expect("valid");
        prop_assert!(close(k.volumetric, g.trace(), 1e-18));
        prop_assert!(close(k.volumetric, k.principal.e1 + k.principal.e2, 1e-17));
        prop_assert!(close(k.invariants.i1, k.volumetric, 0.0));
        prop_assert!(close(k.rotation, w, 1e-18));
        let ws = Matrix3::new(0.0, -w3[2], w3[1], w3[2], 0.0, -w3[0], -w3[1], w3[0], 0.0);
        let g = g3 + ws;
        let k = analyze3(&g, &opts()).expect("valid");
        let p = k.principal;
        prop_assert!(close(k.volumetric, g.trace(), 1e-18));
        prop_assert!(close(k.volumetric, p.e1 + p.e2 + p.e3, 1e-17));
        for (got, want) in k.rotation_vector.iter().zip(w3) {
            prop_assert!(close(*got, want, 1e-18));
        }
        prop_assert!(p.e1 >= p.e2 && p.e2 >= p.e3);
    }

    /// Rigid motion gives zero Green–Lagrange strain, J = 1, U = I, and the finite
    /// rotation is recovered. Source: E = ½(RᵀR − I) = 0 for any rotation (Holzapfel ch. 2, from memory).
    #[test]
    fn rigid_rotation_2d(theta in -3.1..3.1f64) {
        let r = Rotation2::new(theta).into_inner();
        let k = analyze2(&(r - Matrix2::identity()), &opts()).expect("valid");
        let f = &k.finite;
        prop_assert!(m2(&f.green_lagrange).abs().max() < 1e-12);
        prop_assert!(m2(&f.euler_almansi).abs().max() < 1e-12);
        prop_assert!(close(f.jacobian, 1.0, 1e-12));
        prop_assert!((m2(&f.right_stretch) - Matrix2::identity()).abs().max() < 1e-12);
        prop_assert!((m2(&f.rotation) - r).abs().max() < 1e-12);
        prop_assert!(close(f.rotation_angle, theta, 1e-12));
        prop_assert!(m2(&f.hencky).abs().max() < 1e-12);
    }

    #[test]
    fn rigid_rotation_3d(r in rotation3()) {
        let rm = r.into_inner();
        let k = analyze3(&(rm - Matrix3::identity()), &opts()).expect("valid");
        let f = &k.finite;
        prop_assert!(m3(&f.green_lagrange).abs().max() < 1e-12);
        prop_assert!(close(f.jacobian, 1.0, 1e-12));
        prop_assert!((m3(&f.right_stretch) - Matrix3::identity()).abs().max() < 1e-12);
        prop_assert!((m3(&f.left_stretch) - Matrix3::identity()).abs().max() < 1e-12);
        prop_assert!((m3(&f.rotation) - rm).abs().max() < 1e-12);
        prop_assert!(close(f.rotation_angle, r.angle(), 1e-9));
        for l in f.principal_stretches {
            prop_assert!(close(l, 1.0, 1e-12));
        }
    }

    /// F = RU = VR, R proper orthogonal, U and V symmetric positive definite, and
    /// ln λ matches the Hencky principal values. Source: polar decomposition theorem
    /// (Holzapfel ch. 2; Ogden §2.2; chapters from memory).
    #[test]
    fn polar_decomposition_reconstructs(e in proptest::array::uniform9(-0.3..0.3f64)) {
        let g = Matrix3::from_row_slice(&e);
        let f = Matrix3::identity() + g;
        prop_assume!(f.determinant() > 0.05);
        let k = analyze3(&g, &opts()).expect("valid");
        let fs = &k.finite;
        let (r, u, v) = (m3(&fs.rotation), m3(&fs.right_stretch), m3(&fs.left_stretch));
        prop_assert!((r * u - f).abs().max() < 1e-12);
        prop_assert!((v * r - f).abs().max() < 1e-12);
        prop_assert!((r.transpose() * r - Matrix3::identity()).abs().max() < 1e-12);
        prop_assert!(close(r.determinant(), 1.0, 1e-12));
        for i in 0..3 {
            prop_assert!(close(fs.hencky_principal[i], fs.principal_stretches[i].ln(), 1e-12));
        }
        prop_assert!(fs.principal_stretches[0] >= fs.principal_stretches[1]);
        prop_assert!(fs.principal_stretches[1] >= fs.principal_stretches[2]);
        prop_assert!(close(fs.jacobian, fs.principal_stretches.iter().product::<f64>(), 1e-12));
    }

    /// 2D polar decomposition likewise.
    #[test]
    fn polar_decomposition_reconstructs_2d(e in proptest::array::uniform4(-0.5..0.5f64)) {
        let g = Matrix2::new(e[0], e[1], e[2], e[3]);
        let f = Matrix2::identity() + g;
        prop_assume!(f.determinant() > 0.05);
        let k = analyze2(&g, &opts()).expect("valid");
        let fs = &k.finite;
        let (r, u, v) = (m2(&fs.rotation), m2(&fs.right_stretch), m2(&fs.left_stretch));
        prop_assert!((r * u - f).abs().max() < 1e-12);
        prop_assert!((v * r - f).abs().max() < 1e-12);
        let ue = sym_eigen2(&u, 0.0).expect("finite");
        prop_assert!(close(ue.values[0], fs.principal_stretches[0], 1e-12));
        prop_assert!(close(ue.values[1], fs.principal_stretches[1], 1e-12));
        prop_assert!(ue.values[1] > 0.0);
    }

    /// The eigen-decomposition reconstructs ε: Σ ei·ni⊗ni = ε (2D, 3D distinct).
    #[test]
    fn eigen_reconstructs(e2 in sym2(), e3 in sym3()) {
        let s = sym_eigen2(&e2, 1e-10).expect("finite");
        if let Some(d) = s.directions {
            let mut m = Matrix2::zeros();
            for (dir, value) in d.iter().zip(s.values) {
                let n = Vector2::from(*dir);
                m += n * n.transpose() * value;
            }
            prop_assert!((m - e2).abs().max() < 1e-15);
        }
        let s = sym_eigen3(&e3, 1e-10).expect("converges");
        if s.degeneracy == Degeneracy3::Distinct {
            let mut m = Matrix3::zeros();
            for i in 0..3 {
                let n = Vector3::from(s.directions[i].expect("distinct"));
                prop_assert!(close(n.norm(), 1.0, 1e-14));
                m += n * n.transpose() * s.values[i];
            }
            prop_assert!((m - e3).abs().max() < 1e-15);
            let n1 = Vector3::from(s.directions[0].expect("n1"));
            let n2 = Vector3::from(s.directions[1].expect("n2"));
            let n3 = Vector3::from(s.directions[2].expect("n3"));
            prop_assert!(close(n1.cross(&n2).dot(&n3), 1.0, 1e-12), "right-handed");
        }
    }

    /// Repeated and near-repeated tensors: flagged, never NaN, the unique direction
    /// still an eigenvector; analyse never yields NaN or infinity.
    #[test]
    fn repeated_values_never_nan(m in repeated3()) {
        let s = sym_eigen3(&m, 1e-10).expect("converges");
        prop_assert!(s.degeneracy != Degeneracy3::Distinct);
        for (i, d) in s.directions.iter().enumerate() {
            if let Some(n) = d {
                let n = Vector3::from(*n);
                prop_assert!(((m * n) - n * s.values[i]).norm() <= 1e-14);
            }
        }
        let k = analyze3(&m, &opts()).expect("valid");
        prop_assert!(no_nan(&k));
        prop_assert!(k.principal.degenerate);
        prop_assert!(k.max_shear.plane_normals.is_none());
        // The same in 2D with the upper-left block.
        let b = Matrix2::new(m[(0, 0)], m[(0, 1)], m[(1, 0)], m[(1, 1)]);
        prop_assert!(no_nan(&analyze2(&b, &opts()).expect("valid")));
    }

    /// Finite input of any scale, zero and tiny included: never NaN, never a panic.
    #[test]
    fn never_nan_for_finite_input(
        e in proptest::array::uniform9(prop_oneof![
            Just(0.0), -1e-300..1e-300f64, -1e-3..1e-3f64, -0.5..0.5f64, Just(1e-9)
        ])
    ) {
        let g3 = Matrix3::from_row_slice(&e);
        if let Ok(k) = analyze3(&g3, &opts()) {
            prop_assert!(no_nan(&k));
        }
        let g2 = Matrix2::new(e[0], e[1], e[3], e[4]);
        if let Ok(k) = analyze2(&g2, &opts()) {
            prop_assert!(no_nan(&k));
        }
    }

    /// A rigid rotation of at least 0.3° is flagged at resolution 1e-6, with the
    /// rotation reason and no gradient reason.
    #[test]
    fn adequacy_flags_rotation(deg in 0.3..10.0f64, sign in prop_oneof![Just(1.0), Just(-1.0)],
                               r in rotation3()) {
        let th = sign * deg.to_radians();
        let g = Rotation2::new(th).into_inner() - Matrix2::identity();
        let a = analyze2(&g, &opts()).expect("valid").adequacy;
        prop_assert!(!a.adequate);
        prop_assert!(has_rotation_reason(&a));
        prop_assert!(!has_gradient_reason(&a));
        prop_assert!(close(a.rotation_spurious_strain, 0.5 * th.sin().powi(2), 1e-15));
        // 3D: same angle about a random axis.
        let axis = r.axis().unwrap_or_else(Vector3::z_axis);
        let g3 = Rotation3::from_axis_angle(&axis, th).into_inner() - Matrix3::identity();
        let a3 = analyze3(&g3, &opts()).expect("valid").adequacy;
        prop_assert!(!a3.adequate);
        prop_assert!(has_rotation_reason(&a3));
    }

    /// Normal strain along θ follows the transformation equation
    /// ε(θ) = (εx+εy)/2 + (εx−εy)/2·cos 2θ + εxy·sin 2θ (Gere & Goodno ch. 7), and
    /// the shear on a plane equals the shear of the rotated frame.
    #[test]
    fn normal_strain_transformation(eps in sym2(), th in -3.2..3.2f64) {
        let (exx, eyy, exy) = (eps[(0, 0)], eps[(1, 1)], eps[(0, 1)]);
        let expected = (exx + eyy) / 2.0 + (exx - eyy) / 2.0 * (2.0 * th).cos() + exy * (2.0 * th).sin();
        let n = normal_strain(&eps, &[th.cos(), th.sin()]).expect("direction");
        prop_assert!(close(n, expected, 1e-18));
        let t = transform2(&eps, &frame2(th)).expect("rotation");
        prop_assert!(close(t[(0, 0)], expected, 1e-18));
        let p = on_plane2(&eps, &[th.cos(), th.sin()]).expect("normal");
        prop_assert!(close(p.tensor_shear, t[(0, 1)], 1e-18));
        let expected_shear = -(exx - eyy) / 2.0 * (2.0 * th).sin() + exy * (2.0 * th).cos();
        prop_assert!(close(p.tensor_shear, expected_shear, 1e-18));
    }
}
