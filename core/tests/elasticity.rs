//! Linear isotropic elasticity: constants, Hooke's law, plane stress/strain, principal
//! and von Mises stress, material presets, bad input.

use kinema_core::CoreError;
use kinema_core::elasticity::{
    CAUTION, Isotropic, Stress3, concrete_ecm, material, material_ids, presets,
    principal_stresses_3d, von_mises,
};
use nalgebra::{Matrix3, Rotation3, Unit, Vector3};

fn close(a: f64, b: f64, rtol: f64) -> bool {
    (a - b).abs() <= rtol * a.abs().max(b.abs()).max(f64::MIN_POSITIVE)
}

fn steel() -> Isotropic {
    Isotropic::new(210e9, 0.3).expect("valid constants")
}

fn sym(a: [f64; 6]) -> Matrix3<f64> {
    let [xx, yy, zz, xy, yz, zx] = a;
    Matrix3::new(xx, xy, zx, xy, yy, yz, zx, yz, zz)
}

// Source: Timoshenko & Goodier, Theory of Elasticity, 3rd ed., §§5–6: λ = Eν/((1+ν)(1−2ν)),
// G = E/(2(1+ν)); and the standard interrelations E = μ(3λ+2μ)/(λ+μ),
// ν = λ/(2(λ+μ)), K = λ + 2μ/3 = E/(3(1−2ν)).
#[test]
fn lame_constants_and_their_relations() {
    let m = steel();
    let (l, mu, k) = (m.lame_lambda(), m.shear_modulus(), m.bulk_modulus());
    // Hand values for E = 210 GPa, ν = 0.3: λ = 63/0.52 GPa, G = 210/2.6 GPa, K = 175 GPa.
    assert!(close(l, 63e9 / 0.52, 1e-14), "λ {l}");
    assert!(close(mu, 210e9 / 2.6, 1e-14), "μ {mu}");
    assert!(close(k, 175e9, 1e-14), "K {k}");
    assert!(close(mu * (3.0 * l + 2.0 * mu) / (l + mu), 210e9, 1e-14));
    assert!(close(l / (2.0 * (l + mu)), 0.3, 1e-14));
    assert!(close(l + 2.0 * mu / 3.0, k, 1e-14));
}

// Inverse Hooke's law (Timoshenko & Goodier §5): ε = ((1+ν)σ − ν·tr(σ)·I)/E undoes
// σ = λ·tr(ε)·I + 2μ·ε.
#[test]
fn strain_stress_round_trip() {
    let m = Isotropic::new(33e9, 0.2).expect("valid");
    let eps = sym([310e-6, -120e-6, 45e-6, 80e-6, -25e-6, 60e-6]);
    let s = m.stress(&eps).expect("stress");
    let back = m.strain(&s.sigma).expect("strain");
    assert!((back - eps).amax() < 1e-18, "{}", (back - eps).amax());
    assert_eq!(s.caution, CAUTION);
    // Mean stress tr(σ)/3 = K·tr(ε) (bulk modulus, Timoshenko & Goodier §6).
    assert!(
        close(s.mean, m.bulk_modulus() * eps.trace(), 1e-12),
        "p = K·tr(ε)"
    );
}

// Uniaxial stress σxx = s (Timoshenko & Goodier §5): εxx = s/E, εyy = εzz = −ν·εxx.
#[test]
fn uniaxial_stress_gives_lateral_contraction() {
    let m = steel();
    let s = 150e6;
    let eps = m
        .strain(&sym([s, 0.0, 0.0, 0.0, 0.0, 0.0]))
        .expect("strain");
    assert!(close(eps[(0, 0)], s / 210e9, 1e-14));
    assert!(close(eps[(1, 1)], -0.3 * eps[(0, 0)], 1e-14));
    assert!(close(eps[(2, 2)], -0.3 * eps[(0, 0)], 1e-14));
    let st = m.stress(&eps).expect("stress");
    assert!(close(st.sigma[(0, 0)], s, 1e-13));
    assert!(st.sigma[(1, 1)].abs() < 1e-6 && st.sigma[(2, 2)].abs() < 1e-6);
    assert!(close(st.von_mises, s, 1e-12), "uniaxial von Mises = |σ|");
    assert!(close(st.principal[0], s, 1e-12));
}

// Plane stress (Timoshenko & Goodier §§7–8): σxx = E/(1−ν²)(εxx + νεyy),
// σyy = E/(1−ν²)(εyy + νεxx), σxy = 2G·exy, εzz = −ν/(1−ν)(εxx+εyy); the 3D law with
// that εzz gives σzz = 0.
#[test]
fn plane_stress_relations() {
    let m = steel();
    let (exx, eyy, exy) = (400e-6, -100e-6, 150e-6);
    let p = m.plane_stress(exx, eyy, exy).expect("plane stress");
    let f = 210e9 / (1.0 - 0.09);
    assert!(close(p.sxx, f * (exx + 0.3 * eyy), 1e-14));
    assert!(close(p.syy, f * (eyy + 0.3 * exx), 1e-14));
    assert!(close(p.sxy, 2.0 * m.shear_modulus() * exy, 1e-14));
    assert!(close(p.ezz, -0.3 / 0.7 * (exx + eyy), 1e-14));
    let s3 = m
        .stress(&sym([exx, eyy, p.ezz, exy, 0.0, 0.0]))
        .expect("3D");
    assert!(s3.sigma[(2, 2)].abs() < 1e-4, "σzz {}", s3.sigma[(2, 2)]);
    assert!(close(s3.sigma[(0, 0)], p.sxx, 1e-12));
    assert!(close(s3.von_mises, p.von_mises, 1e-12));
    assert_eq!(p.caution, CAUTION);
    // In-plane principal values from the Mohr circle, descending.
    let c = 0.5 * (p.sxx + p.syy);
    let r = (0.5 * (p.sxx - p.syy)).hypot(p.sxy);
    assert!(close(p.principal[0], c + r, 1e-14) && close(p.principal[1], c - r, 1e-14));
    assert!(p.theta_p.is_some());
}

// Plane strain (Timoshenko & Goodier §§7–8): σzz = ν(σxx + σyy); and plane-strain
// results equal plane-stress ones with E' = E/(1−ν²), ν' = ν/(1−ν).
#[test]
fn plane_strain_relations_and_equivalence_with_plane_stress() {
    let m = steel();
    let (exx, eyy, exy) = (-220e-6, 340e-6, -70e-6);
    let p = m.plane_strain(exx, eyy, exy).expect("plane strain");
    assert!(close(p.szz, 0.3 * (p.sxx + p.syy), 1e-14));
    let s3 = m.stress(&sym([exx, eyy, 0.0, exy, 0.0, 0.0])).expect("3D");
    assert!(close(s3.sigma[(2, 2)], p.szz, 1e-13));
    assert!(close(s3.von_mises, p.von_mises, 1e-12));
    let equiv = Isotropic::new(210e9 / (1.0 - 0.09), 0.3 / 0.7).expect("valid");
    let q = equiv.plane_stress(exx, eyy, exy).expect("plane stress");
    assert!(close(p.sxx, q.sxx, 1e-13), "{} {}", p.sxx, q.sxx);
    assert!(close(p.syy, q.syy, 1e-13));
    assert!(close(p.sxy, q.sxy, 1e-13));
}

// Von Mises: pure shear τ gives √3·τ, hydrostatic gives 0 (definition of the
// equivalent stress, e.g. Timoshenko & Goodier; common practice).
#[test]
fn von_mises_pure_shear_and_hydrostatic() {
    let tau = 40e6;
    let shear = sym([0.0, 0.0, 0.0, tau, 0.0, 0.0]);
    assert!(close(von_mises(&shear), 3f64.sqrt() * tau, 1e-14));
    let p = principal_stresses_3d(&shear).expect("eigen");
    assert!(close(p[0], tau, 1e-12) && p[1].abs() < 1e-6 && close(p[2], -tau, 1e-12));
    let hydro = sym([-5e6, -5e6, -5e6, 0.0, 0.0, 0.0]);
    assert_eq!(von_mises(&hydro), 0.0);
    let s = Stress3::from_tensor(hydro).expect("stress");
    assert_eq!(s.principal, [-5e6; 3]);
}

// Principal stresses are eigenvalues (sorted descending) and invariant under a frame
// rotation σ' = Q σ Qᵀ; von Mises is invariant too.
#[test]
fn principal_stresses_sorted_and_invariant() {
    let s = sym([30e6, -10e6, 5e6, 12e6, -4e6, 7e6]);
    let p = principal_stresses_3d(&s).expect("eigen");
    assert!(p[0] >= p[1] && p[1] >= p[2]);
    assert!(close(p.iter().sum::<f64>(), s.trace(), 1e-12));
    let q = Rotation3::from_axis_angle(&Unit::new_normalize(Vector3::new(1.0, 2.0, -0.5)), 0.7);
    let q = q.matrix();
    let s2 = q * s * q.transpose();
    let p2 = principal_stresses_3d(&s2).expect("eigen");
    for k in 0..3 {
        assert!((p[k] - p2[k]).abs() < 1e-6, "{p:?} {p2:?}");
    }
    assert!(close(von_mises(&s), von_mises(&s2), 1e-12));
    // Block case with known eigenvalues a ± t and c.
    let b = sym([10e6, 10e6, -3e6, 4e6, 0.0, 0.0]);
    let pb = principal_stresses_3d(&b).expect("eigen");
    assert!(close(pb[0], 14e6, 1e-12) && close(pb[1], 6e6, 1e-12) && close(pb[2], -3e6, 1e-12));
}

#[test]
fn bad_parameters_and_tensors_are_rejected() {
    for (e, nu, name) in [
        (0.0, 0.3, "youngs_modulus"),
        (-1.0, 0.3, "youngs_modulus"),
        (f64::NAN, 0.3, "youngs_modulus"),
        (f64::INFINITY, 0.3, "youngs_modulus"),
        (1e9, 0.5, "poisson_ratio"),
        (1e9, -1.0, "poisson_ratio"),
        (1e9, f64::NAN, "poisson_ratio"),
    ] {
        match Isotropic::new(e, nu) {
            Err(CoreError::InvalidParameter { name: n, .. }) => assert_eq!(n, name),
            other => panic!("E = {e}, ν = {nu}: expected InvalidParameter, got {other:?}"),
        }
    }
    assert!(Isotropic::new(1e9, 0.499).is_ok() && Isotropic::new(1e9, -0.999).is_ok());
    let m = steel();
    let mut bad = Matrix3::zeros();
    bad[(0, 1)] = 1e-4;
    assert!(matches!(
        m.stress(&bad),
        Err(CoreError::InvalidParameter { name: "strain", .. })
    ));
    bad[(1, 0)] = 1e-4;
    bad[(2, 2)] = f64::NAN;
    assert_eq!(
        m.stress(&bad),
        Err(CoreError::NonFinite {
            id: "strain".into(),
            field: "zz"
        })
    );
    assert_eq!(
        m.plane_stress(0.0, f64::INFINITY, 0.0),
        Err(CoreError::NonFinite {
            id: "strain".into(),
            field: "eyy"
        })
    );
}

// Source: EN 1992-1-1 Table 3.1: fcm = fck + 8 MPa, Ecm = 22(fcm/10)^0.3 GPa. The
// tabulated Ecm (rounded to 1 GPa, from memory) must be the formula rounded.
#[test]
fn eurocode_ecm_formula_reproduces_the_table() {
    let mut n = 0;
    for m in presets() {
        let Some(c) = m.concrete.as_ref() else {
            continue;
        };
        n += 1;
        assert!(close(c.fcm, c.fck + 8e6, 1e-15), "{}", c.class);
        let ecm = concrete_ecm(c.fcm);
        assert_eq!(m.youngs_modulus, ecm);
        assert_eq!(
            (ecm / 1e9).round(),
            c.ecm_tabulated / 1e9,
            "{}: formula {} GPa vs table",
            c.class,
            ecm / 1e9
        );
        assert_eq!(m.poisson_ratio, 0.2, "§3.1.3(4)");
        assert_eq!(m.thermal_expansion, 10e-6, "§3.1.3(5)");
    }
    assert_eq!(n, 14, "C12/15 … C90/105");
    // Two values recalled independently (from memory): C30/37 33 GPa, C25/30 31 GPa.
    let c30 = material("concrete-c30-37").expect("preset");
    assert!((c30.youngs_modulus / 1e9 - 32.84).abs() < 0.01);
    assert_eq!((c30.youngs_modulus / 1e9).round(), 33.0);
    let c25 = material("concrete-c25-30").expect("preset");
    assert_eq!((c25.youngs_modulus / 1e9).round(), 31.0);
}

// Source: EN 1993-1-1 §3.2.6 (steel) and EN 1999-1-1 §3.2.5 (aluminium): the stated
// G is E/(2(1+ν)) rounded ("≈"), within 0.5 %.
#[test]
fn metal_presets() {
    let s = material("steel-en1993").expect("preset");
    assert_eq!(
        (s.youngs_modulus, s.poisson_ratio, s.thermal_expansion),
        (210e9, 0.3, 12e-6)
    );
    assert_eq!(s.shear_modulus, 81e9);
    let g = s.elastic().expect("valid").shear_modulus();
    assert!(
        (g - s.shear_modulus).abs() / s.shear_modulus < 5e-3,
        "G {g}"
    );
    let a = material(" Aluminium-EN1999 ").expect("lookup ignores case and spaces");
    assert_eq!(
        (
            a.youngs_modulus,
            a.poisson_ratio,
            a.thermal_expansion,
            a.shear_modulus
        ),
        (70e9, 0.3, 23e-6, 27e9)
    );
    let g = a.elastic().expect("valid").shear_modulus();
    assert!(
        (g - a.shear_modulus).abs() / a.shear_modulus < 5e-3,
        "G {g}"
    );
    for m in presets() {
        assert!(
            m.source.contains('§') || m.source.contains("Table"),
            "{}",
            m.id
        );
        m.elastic().expect("every preset is valid");
    }
}

#[test]
fn unknown_material_lists_known_ids() {
    match material("concrete-c33-40") {
        Err(CoreError::UnknownMaterial { id, known }) => {
            assert_eq!(id, "concrete-c33-40");
            for k in material_ids() {
                assert!(known.contains(&k), "{k} missing from {known}");
            }
            assert!(known.contains("steel-en1993") && known.contains("concrete-c90-105"));
        }
        other => panic!("expected UnknownMaterial, got {other:?}"),
    }
}
