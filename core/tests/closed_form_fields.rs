//! Element estimators (Delaunay triangles, user triangles and tetrahedra) against
//! closed-form displacement fields, and the quality screen / input errors.

mod fields;

use fields::{
    Cantilever, Field, Kirsch, Lame, RigidRotation, Uniform, cartesian_to_polar, fd_strain,
    hooke_plane_strain, jittered_grid, ring_mesh, sample, sample_named, scattered,
    stress_plane_stress,
};
use kinema_core::estimate::GradientEstimate;
use kinema_core::estimate::delaunay::{
    ElementOutcome, delaunay_strain, delaunay_triangles, triangle_strains_with,
};
use kinema_core::estimate::elements::{ElementSpec, OrientationPolicy, element_strains};
use kinema_core::estimate::quality::{QualityThresholds, TriangleQuality};
use kinema_core::{CoreError, Point, PointSet};
use nalgebra::{Matrix2, Matrix3};
use proptest::prelude::*;

/// Survey-style offset of every test geometry, metres.
const OFFSET: [f64; 2] = [1.0e5, 2.0e5];

fn add(a: [f64; 2], b: [f64; 2]) -> [f64; 2] {
    [a[0] + b[0], a[1] + b[1]]
}

fn max_abs(m: &Matrix2<f64>) -> f64 {
    m.abs().max()
}

fn sym(g: &Matrix2<f64>) -> Matrix2<f64> {
    (g + g.transpose()) * 0.5
}

fn median(mut v: Vec<f64>) -> f64 {
    assert!(!v.is_empty(), "no values");
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

/// Median over elements of max|ε_est − ε_exact(centroid)|, divided by `scale`.
fn median_error(est: &[GradientEstimate<2>], field: &dyn Field, scale: f64) -> f64 {
    median(
        est.iter()
            .map(|e| max_abs(&(sym(&e.gradient) - field.strain(e.centroid))) / scale)
            .collect(),
    )
}

// ------------------------------------------------------------------ uniform fields

fn uniform_fields() -> Vec<(&'static str, Uniform)> {
    let origin = add(OFFSET, [30.0, 20.0]);
    vec![
        // Source: homogeneous deformation, exact for linear elements (any FE text).
        ("uniform stretch", Uniform::stretch(250e-6, -120e-6, origin)),
        ("pure shear", Uniform::pure_shear(180e-6, origin)),
        ("simple shear", Uniform::simple_shear(400e-6, origin)),
    ]
}

#[test]
fn delaunay_recovers_uniform_fields_exactly_with_offsets() {
    let xs = scattered(OFFSET, add(OFFSET, [60.0, 40.0]), 300, 7);
    for (name, field) in uniform_fields() {
        let pts = sample(&xs, &field);
        let (acc, rej) =
            delaunay_strain(&pts, &QualityThresholds::default()).expect("triangulates");
        let n_tri = delaunay_triangles(&pts).expect("triangulates").len();
        assert_eq!(acc.len() + rej.len(), n_tri, "{name}: nothing dropped");
        assert!(acc.len() > n_tri / 2, "{name}: most triangles pass");
        for e in &acc {
            let err = max_abs(&(e.gradient - field.gradient));
            assert!(err <= 1e-12, "{name} {}: |ΔG| = {err:e}", e.label);
            // The centroid displacement of an affine field is the field at the centroid.
            let u = field.displacement(e.centroid);
            let t = e.translation.expect("triangles give a translation");
            assert!((t[0] - u[0]).abs() < 1e-12 && (t[1] - u[1]).abs() < 1e-12);
        }
    }
}

#[test]
fn delaunay_triangles_are_ccw_and_obey_euler_count() {
    // Source: Euler's formula for a triangulation of n points of which b lie on the
    // boundary of the convex hull: T = 2n − 2 − b.
    let (nx, ny) = (13, 8);
    let xs = jittered_grid(OFFSET, add(OFFSET, [12.0, 7.0]), nx, ny, 0.2, 3);
    let pts = sample(&xs, &Uniform::stretch(1e-4, 1e-4, OFFSET));
    let tris = delaunay_triangles(&pts).expect("triangulates");
    let b = 2 * (nx + ny) - 4;
    assert_eq!(tris.len(), 2 * nx * ny - 2 - b);
    for t in &tris {
        let x = t.map(|i| pts.points()[i as usize].x);
        assert!(TriangleQuality::from_vertices(x).signed_area > 0.0);
    }
    // The streaming form hands out one outcome per triangle, in order.
    let mut seen = Vec::new();
    triangle_strains_with(&pts, &tris, &QualityThresholds::default(), |o| {
        seen.push(match o {
            ElementOutcome::Accepted(a) => a.index,
            ElementOutcome::Rejected(r) => r.index,
        })
    })
    .expect("valid input");
    assert_eq!(seen, (0..tris.len()).collect::<Vec<_>>());
}

/// Nodes and CCW/CW triangles of a ring sector, sampled from `field`.
fn ring_points(field: &dyn Field, centre: [f64; 2]) -> (PointSet<2>, Vec<ElementSpec>) {
    let (nodes, els) = ring_mesh(centre, [2.0, 6.0], [0.2, 1.4], 6, 7);
    (sample_named(&nodes, field), els)
}

#[test]
fn user_triangles_recover_uniform_fields_exactly() {
    for (name, field) in uniform_fields() {
        let (pts, els) = ring_points(&field, add(OFFSET, [30.0, 20.0]));
        let (acc, rej) = element_strains(
            &pts,
            &els,
            OrientationPolicy::Require,
            &QualityThresholds::default(),
        )
        .expect("valid mesh");
        assert!(rej.is_empty(), "{name}: {rej:?}");
        assert_eq!(acc.len(), els.len());
        for e in &acc {
            let err = max_abs(&(e.gradient - field.gradient));
            assert!(err <= 1e-12, "{name} {}: |ΔG| = {err:e}", e.label);
        }
        // Reversed vertex order with Fix: the same gradient, members back in CCW order.
        let reversed: Vec<ElementSpec> = els
            .iter()
            .map(|e| ElementSpec {
                id: e.id.clone(),
                vertices: e.vertices.iter().rev().cloned().collect(),
            })
            .collect();
        let (fixed, _) = element_strains(
            &pts,
            &reversed,
            OrientationPolicy::Fix,
            &QualityThresholds::default(),
        )
        .expect("Fix reorders");
        for (a, b) in acc.iter().zip(&fixed) {
            assert!(max_abs(&(a.gradient - b.gradient)) <= 1e-12);
            let x = [0, 1, 2].map(|k| pts.points()[b.members[k]].x);
            assert!(TriangleQuality::from_vertices(x).signed_area > 0.0);
        }
    }
}

/// Kuhn (Freudenthal) subdivision of an `n³` cube grid into 6 tetrahedra per cube,
/// listed in raw (mixed) orientation.
fn kuhn_mesh(
    origin: [f64; 3],
    h: f64,
    n: usize,
    g: &Matrix3<f64>,
) -> (PointSet<3>, Vec<ElementSpec>) {
    let id = |i: usize, j: usize, k: usize| format!("V{i}.{j}.{k}");
    let mut pts = Vec::new();
    for k in 0..=n {
        for j in 0..=n {
            for i in 0..=n {
                let d = [i as f64 * h, j as f64 * h, k as f64 * h];
                let u = g * nalgebra::Vector3::from(d);
                let x = [origin[0] + d[0], origin[1] + d[1], origin[2] + d[2]];
                pts.push(Point::new(id(i, j, k), x, [u[0], u[1], u[2]]));
            }
        }
    }
    let perms = [
        [0, 1, 2],
        [0, 2, 1],
        [1, 0, 2],
        [1, 2, 0],
        [2, 0, 1],
        [2, 1, 0],
    ];
    let mut els = Vec::new();
    for k in 0..n {
        for j in 0..n {
            for i in 0..n {
                for p in perms {
                    let mut c = [i, j, k];
                    let mut v = vec![id(c[0], c[1], c[2])];
                    for axis in p {
                        c[axis] += 1;
                        v.push(id(c[0], c[1], c[2]));
                    }
                    els.push(ElementSpec {
                        id: format!("K{}", els.len() + 1),
                        vertices: v,
                    });
                }
            }
        }
    }
    (PointSet::new(pts).expect("valid points"), els)
}

#[test]
fn user_tetrahedra_recover_uniform_gradient_exactly() {
    // Source: homogeneous deformation, exact for linear tetrahedra.
    let g = Matrix3::new(
        2e-4, 5e-5, -3e-5, //
        -1e-5, -8e-5, 4e-5, //
        6e-5, 2e-5, 1.5e-4,
    );
    let (pts, els) = kuhn_mesh([1e5, 2e5, 350.0], 1.5, 3, &g);
    // Half of the Kuhn tetrahedra are left-handed as listed.
    assert!(matches!(
        element_strains(
            &pts,
            &els,
            OrientationPolicy::Require,
            &QualityThresholds::default()
        ),
        Err(CoreError::InvalidParameter {
            name: "vertices",
            ..
        })
    ));
    let (acc, rej) = element_strains(
        &pts,
        &els,
        OrientationPolicy::Fix,
        &QualityThresholds::default(),
    )
    .expect("Fix reorders");
    assert!(rej.is_empty(), "{rej:?}");
    assert_eq!(acc.len(), 6 * 27);
    for e in &acc {
        assert!((e.gradient - g).abs().max() <= 1e-12, "{}", e.label);
        assert_eq!(e.kind, kinema_core::estimate::RegionKind::Tetrahedron);
        let x = |m: usize| nalgebra::Vector3::from(pts.points()[e.members[m]].x);
        let vol = (x(1) - x(0)).dot(&(x(2) - x(0)).cross(&(x(3) - x(0))));
        assert!(vol > 0.0, "members in positive order");
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(24))]

    /// Every element estimator recovers any uniform gradient exactly.
    /// Source: linear interpolation reproduces affine fields (patch test).
    #[test]
    fn uniform_gradient_recovered(
        g in prop::array::uniform4(-5e-3f64..5e-3),
        seed in any::<u64>(),
    ) {
        let field = Uniform::with_gradient(
            Matrix2::new(g[0], g[1], g[2], g[3]),
            add(OFFSET, [10.0, 10.0]),
        );
        let xs = scattered(OFFSET, add(OFFSET, [20.0, 20.0]), 60, seed);
        let pts = sample(&xs, &field);
        let (acc, _) = delaunay_strain(&pts, &QualityThresholds::default())
            .expect("triangulates");
        prop_assert!(!acc.is_empty());
        for e in &acc {
            prop_assert!(max_abs(&(e.gradient - field.gradient)) <= 1e-12);
        }
        let (pts, els) = ring_points(&field, add(OFFSET, [10.0, 10.0]));
        let (acc, _) = element_strains(&pts, &els, OrientationPolicy::Require,
            &QualityThresholds::default()).expect("valid mesh");
        for e in &acc {
            prop_assert!(max_abs(&(e.gradient - field.gradient)) <= 1e-12);
        }
    }
}

// --------------------------------------------------------------- rigid rotation

#[test]
fn finite_rigid_rotation_gives_sym_r_minus_i_and_sin_theta() {
    // Source: exact plane rotation R(θ); small strain sym(R − I) = (cos θ − 1)·I and
    // small rotation (G10 − G01)/2 = sin θ, exact for linear elements since the field
    // is affine.
    let xs = scattered(OFFSET, add(OFFSET, [50.0, 30.0]), 200, 11);
    for theta in [50e-6, 0.3, 2.0] {
        let field = RigidRotation {
            origin: add(OFFSET, [25.0, 15.0]),
            theta,
        };
        let pts = sample(&xs, &field);
        let (acc, _) = delaunay_strain(&pts, &QualityThresholds::default()).expect("ok");
        let (nodes, els) = ring_mesh(add(OFFSET, [25.0, 15.0]), [3.0, 9.0], [0.0, 2.0], 5, 9);
        let (acc_el, _) = element_strains(
            &sample_named(&nodes, &field),
            &els,
            OrientationPolicy::Require,
            &QualityThresholds::default(),
        )
        .expect("valid mesh");
        let expect = Matrix2::identity() * (theta.cos() - 1.0);
        for e in acc.iter().chain(&acc_el) {
            let g = &e.gradient;
            assert!(
                max_abs(&(sym(g) - expect)) <= 1e-12,
                "θ={theta} {}",
                e.label
            );
            let omega = 0.5 * (g[(1, 0)] - g[(0, 1)]);
            assert!(
                (omega - theta.sin()).abs() <= 1e-12,
                "θ={theta} {}",
                e.label
            );
        }
    }
}

// ------------------------------------------------------ elasticity closed forms

fn cantilever_at(lo: [f64; 2]) -> Cantilever {
    // 10 m × 2 m beam, 10 mm tip deflection; E and ν of concrete (common practice).
    Cantilever::with_tip(lo, add(lo, [10.0, 2.0]), 0.010, 30e9, 0.2)
}

fn lame_at(centre: [f64; 2]) -> Lame {
    Lame {
        centre,
        a: 0.5,
        b: 1.5,
        p_in: 10e6,
        p_out: 2e6,
        e: 30e9,
        nu: 0.2,
    }
}

fn kirsch_at(centre: [f64; 2]) -> Kirsch {
    // Steel plate (E, ν common practice), 100 MPa remote tension, 100 mm hole.
    Kirsch {
        centre,
        a: 0.1,
        s: 100e6,
        e: 200e9,
        nu: 0.3,
    }
}

#[test]
fn cantilever_displacement_matches_published_strain_and_stress() {
    // Source: Timoshenko & Goodier, Theory of Elasticity, 3rd ed., Art. 21:
    // εx = −P x y/(EI), εy = ν P x y/(EI), γxy = −P (c² − y²)/(2IG).
    let f = cantilever_at([0.0, 0.0]);
    let k = f.load / (f.e * f.inertia());
    let mut rng = fields::Rng::new(5);
    for _ in 0..20 {
        let x = [rng.range(0.5, 9.5), rng.range(0.0, 2.0)];
        let (s, t) = (x[0], x[1] - 1.0);
        // The strain of the displacement formula (by central differences) against the
        // published strains written out here, not through `Field::strain`. The
        // displacement is cubic: the central-difference error is h²·u'''/6 ≈ 2e-7·k.
        let fd = fd_strain(&f, x, 1e-3);
        let tol = 1e-6 * k * 10.0;
        assert!((fd[(0, 0)] + k * s * t).abs() < tol, "εx {fd}");
        assert!((fd[(1, 1)] - f.nu * k * s * t).abs() < tol, "εy {fd}");
        let p_over_ig = 2.0 * (1.0 + f.nu) * k;
        assert!(
            (2.0 * fd[(0, 1)] + p_over_ig * (1.0 - t * t) / 2.0).abs() < tol,
            "γxy {fd}"
        );
        // And `Field::strain` (published stresses through Hooke's law) agrees.
        let ex = f.strain(x);
        assert!(max_abs(&(fd - ex)) < tol, "{fd} vs {ex}");
    }
    // Boundary conditions of Art. 21: clamped end s = L on the axis, tip deflection.
    let tip = f.displacement([0.0, 1.0]);
    assert!((tip[1] - 0.010).abs() < 1e-15);
    let root = f.displacement([10.0, 1.0]);
    assert!(root[0].abs() < 1e-15 && root[1].abs() < 1e-15);
}

#[test]
fn lame_displacement_matches_published_stresses() {
    // Source: Timoshenko & Goodier, 3rd ed., Art. 28: σr = A − B/r², σθ = A + B/r²;
    // the boundary conditions σr(a) = −p_i, σr(b) = −p_o; plane-strain Hooke's law.
    let f = lame_at([0.0, 0.0]);
    let [sa, _] = f.stress_polar(f.a);
    let [sb, _] = f.stress_polar(f.b);
    assert!((sa + f.p_in).abs() < 1e-6 && (sb + f.p_out).abs() < 1e-6);
    for (r, th) in [(0.55f64, 0.3f64), (0.9, 1.1), (1.4, 2.5), (1.0, -0.7)] {
        let x = [r * th.cos(), r * th.sin()];
        let fd = fd_strain(&f, x, 1e-5);
        let [sr, st] = f.stress_polar(r);
        let p = hooke_plane_strain(sr, st, 0.0, f.e, f.nu);
        let polar = cartesian_to_polar(&fd, th);
        let scale = 1e-4;
        assert!((polar[0] - p[(0, 0)]).abs() < 1e-6 * scale, "εrr at r={r}");
        assert!((polar[1] - p[(1, 1)]).abs() < 1e-6 * scale, "εθθ at r={r}");
        assert!(polar[2].abs() < 1e-6 * scale, "εrθ at r={r}");
        assert!(max_abs(&(fd - f.strain(x))) < 1e-6 * scale);
    }
}

#[test]
fn kirsch_displacement_reproduces_published_stresses() {
    // Source: Kirsch (1898); Timoshenko & Goodier, 3rd ed., Art. 35. The displacement
    // formula (Barber, Elasticity, from memory) is verified here: its finite-difference
    // strain, through plane-stress Hooke's law, must give the published σr, σθ, τrθ.
    let f = kirsch_at([0.0, 0.0]);
    let mut rng = fields::Rng::new(9);
    let mut samples: Vec<(f64, f64)> = (0..25)
        .map(|_| (rng.range(f.a, 5.0 * f.a), rng.range(-3.1, 3.1)))
        .collect();
    samples.push((f.a, std::f64::consts::FRAC_PI_2));
    for (r, th) in samples {
        let x = [r * th.cos(), r * th.sin()];
        let fd = fd_strain(&f, x, 1e-6 * f.a);
        let [sxx, syy, sxy] = stress_plane_stress(&fd, f.e, f.nu);
        let got = cartesian_to_polar(&Matrix2::new(sxx, sxy, sxy, syy), th);
        let want = f.stress_polar(r, th);
        for c in 0..3 {
            assert!(
                (got[c] - want[c]).abs() < 1e-5 * f.s,
                "r={r} θ={th} component {c}: {} vs {}",
                got[c],
                want[c]
            );
        }
        assert!(max_abs(&(fd - f.strain(x))) < 1e-5 * f.s / f.e);
    }
    // Stress concentration factor 3 at the edge of the hole, θ = 90°.
    let [sr, st, srt] = f.stress_polar(f.a, std::f64::consts::FRAC_PI_2);
    assert!((st - 3.0 * f.s).abs() < 1e-6 * f.s);
    assert!(sr.abs() < 1e-6 * f.s && srt.abs() < 1e-6 * f.s);
    // … and −S at θ = 0 (Timoshenko & Goodier, Art. 35).
    let [_, st0, _] = f.stress_polar(f.a, 0.0);
    assert!((st0 + f.s).abs() < 1e-6 * f.s);
    // Far away the plate is in uniaxial tension: σr → S at θ = 0.
    let [sfar, _, _] = f.stress_polar(1e4 * f.a, 0.0);
    assert!((sfar - f.s).abs() < 1e-6 * f.s);
}

/// Median relative error per level, asserting the O(h) convergence of linear elements.
fn assert_converges(name: &str, errors: &[f64], finest_max: f64) {
    for w in errors.windows(2) {
        let ratio = w[0] / w[1];
        assert!(
            ratio >= 1.7,
            "{name}: error ratio {ratio:.2} < 1.7 when h halves ({errors:?})"
        );
    }
    eprintln!("{name}: median relative errors {errors:?}");
    let last = *errors.last().expect("levels");
    assert!(
        last < finest_max,
        "{name}: finest median error {last:e} ≥ {finest_max:e}"
    );
}

fn delaunay_levels(
    field: &dyn Field,
    lo: [f64; 2],
    hi: [f64; 2],
    n: [usize; 2],
    scale: f64,
) -> Vec<f64> {
    (0..3)
        .map(|level| {
            let m = 1 << level;
            let (nx, ny) = ((n[0] - 1) * m + 1, (n[1] - 1) * m + 1);
            let xs = jittered_grid(lo, hi, nx, ny, 0.2, 17 + level as u64);
            let (acc, rej) =
                delaunay_strain(&sample(&xs, field), &QualityThresholds::default()).expect("ok");
            assert!(
                rej.len() * 10 < acc.len(),
                "few rejections on a jittered grid"
            );
            median_error(&acc, field, scale)
        })
        .collect()
}

fn ring_levels(
    field: &dyn Field,
    centre: [f64; 2],
    r: [f64; 2],
    n: [usize; 2],
    scale: f64,
) -> Vec<f64> {
    (0..3)
        .map(|level| {
            let m = 1 << level;
            let (nr, nt) = ((n[0] - 1) * m + 1, (n[1] - 1) * m + 1);
            let (nodes, els) = ring_mesh(centre, r, [0.0, std::f64::consts::FRAC_PI_2], nr, nt);
            let (acc, rej) = element_strains(
                &sample_named(&nodes, field),
                &els,
                OrientationPolicy::Require,
                &QualityThresholds::default(),
            )
            .expect("valid mesh");
            assert!(rej.is_empty(), "{rej:?}");
            median_error(&acc, field, scale)
        })
        .collect()
}

#[test]
fn cantilever_centroid_strain_converges() {
    // Source: Timoshenko & Goodier, 3rd ed., Art. 21 (exact strain at the centroid);
    // linear elements are first order in h for strain.
    let f = cantilever_at(OFFSET);
    let scale = f.load / (f.e * f.inertia()) * f.length * f.half_depth; // max |εx|
    let errs = delaunay_levels(&f, OFFSET, add(OFFSET, [10.0, 2.0]), [21, 5], scale);
    // At h = L/80 the median error is below 3 % of the peak bending strain.
    assert_converges("cantilever (Delaunay)", &errs, 0.03);
}

#[test]
fn lame_centroid_strain_converges() {
    // Source: Timoshenko & Goodier, 3rd ed., Art. 28 (plane strain).
    let f = lame_at(OFFSET);
    let scale = max_abs(&f.strain(add(OFFSET, [f.a, 0.0])));
    let errs = delaunay_levels(
        &f,
        add(OFFSET, [0.6, 0.1]),
        add(OFFSET, [1.2, 0.7]),
        [7, 7],
        scale,
    );
    assert_converges("Lamé (Delaunay)", &errs, 0.01);
    let errs = ring_levels(&f, OFFSET, [f.a, f.b], [5, 9], scale);
    assert_converges("Lamé (ring mesh)", &errs, 0.02);
}

#[test]
fn kirsch_centroid_strain_converges() {
    // Source: Kirsch (1898); Timoshenko & Goodier, 3rd ed., Art. 35 (plane stress).
    let f = kirsch_at(OFFSET);
    let scale = 3.0 * f.s / f.e; // peak hoop strain order at the hole edge
    let errs = delaunay_levels(
        &f,
        add(OFFSET, [-0.2, 0.12]),
        add(OFFSET, [0.2, 0.32]),
        [9, 5],
        scale,
    );
    assert_converges("Kirsch (Delaunay)", &errs, 0.01);
    let errs = ring_levels(&f, OFFSET, [f.a, 4.0 * f.a], [7, 9], scale);
    assert_converges("Kirsch (ring mesh)", &errs, 0.01);
}

// ------------------------------------------------------- screen and input errors

fn set(xs: &[[f64; 2]]) -> PointSet<2> {
    PointSet::new(
        xs.iter()
            .enumerate()
            .map(|(i, &x)| Point::new(format!("P{}", i + 1), x, [0.0, 0.0]))
            .collect(),
    )
    .expect("valid points")
}

#[test]
fn sliver_triangle_is_rejected_with_its_reason() {
    // Smallest angle of the sliver (0,0), (10,0), (5,0.2): atan(0.2/5) = 2.29°.
    let pts = set(&[[0.0, 0.0], [10.0, 0.0], [5.0, 0.2], [5.0, 10.0]]);
    let (acc, rej) = delaunay_strain(&pts, &QualityThresholds::default()).expect("ok");
    assert_eq!(acc.len(), 2);
    assert_eq!(rej.len(), 1);
    let mut m = rej[0].members.clone();
    m.sort();
    assert_eq!(m, vec![0, 1, 2]);
    assert!(
        rej[0].reason.starts_with("minimum angle 2.29° < 10.00°"),
        "{}",
        rej[0].reason
    );
    let mut labels: Vec<&str> = acc.iter().map(|e| e.label.as_str()).collect();
    labels.push(&rej[0].label);
    labels.sort();
    assert_eq!(labels, vec!["T1", "T2", "T3"]);
    // With the screen off the sliver gets a gradient too.
    let (acc, rej) = delaunay_strain(&pts, &QualityThresholds::off()).expect("ok");
    assert_eq!((acc.len(), rej.len()), (3, 0));

    // The same sliver as a user element is rejected, not an error.
    let els = vec![ElementSpec::new("S1", ["P1", "P2", "P3"])];
    let (acc, rej) = element_strains(
        &pts,
        &els,
        OrientationPolicy::Require,
        &QualityThresholds::default(),
    )
    .expect("screened, not an error");
    assert!(acc.is_empty());
    assert_eq!(rej[0].label, "S1");
    assert!(
        rej[0].reason.contains("minimum angle 2.29°"),
        "{}",
        rej[0].reason
    );
}

#[test]
fn invalid_thresholds_are_errors() {
    let pts = set(&[[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]]);
    let bad = QualityThresholds {
        min_angle_rad: f64::NAN,
        max_aspect_ratio: 5.0,
    };
    assert!(matches!(
        delaunay_strain(&pts, &bad),
        Err(CoreError::InvalidParameter {
            name: "min_angle",
            ..
        })
    ));
    let bad = QualityThresholds {
        min_angle_rad: 0.1,
        max_aspect_ratio: -2.0,
    };
    let els = vec![ElementSpec::new("E1", ["P1", "P2", "P3"])];
    assert!(matches!(
        element_strains(&pts, &els, OrientationPolicy::Fix, &bad),
        Err(CoreError::InvalidParameter {
            name: "max_aspect_ratio",
            ..
        })
    ));
}

#[test]
fn duplicate_positions_collinear_and_too_few_points() {
    let pts = set(&[
        [1e5, 2e5],
        [1e5 + 1.0, 2e5],
        [1e5 + 0.5, 2e5 + 1.0],
        [1e5 + 1.0, 2e5],
    ]);
    match delaunay_triangles(&pts) {
        Err(CoreError::DegenerateGeometry { context, shape, .. }) => {
            assert_eq!(shape, "coincident");
            assert!(context.contains("`P2` and `P4`"), "{context}");
        }
        other => panic!("expected coincident points, got {other:?}"),
    }
    let pts = set(&[[0.0, 0.0], [1.0, 1.0], [2.0, 2.0], [3.5, 3.5]]);
    assert!(matches!(
        delaunay_strain(&pts, &QualityThresholds::default()),
        Err(CoreError::DegenerateGeometry {
            shape: "collinear",
            ..
        })
    ));
    let pts = set(&[[0.0, 0.0], [1.0, 1.0]]);
    assert!(matches!(
        delaunay_triangles(&pts),
        Err(CoreError::TooFewPoints {
            needed: 3,
            got: 2,
            ..
        })
    ));
}

#[test]
fn user_element_errors_name_the_element() {
    let pts = set(&[[0.0, 0.0], [1.0, 0.0], [0.0, 1.0], [2.0, 0.0]]);
    let t = QualityThresholds::default();
    let run = |els: Vec<ElementSpec>, policy| element_strains(&pts, &els, policy, &t);
    let req = OrientationPolicy::Require;

    assert_eq!(
        run(vec![ElementSpec::new("E1", ["P1", "P2", "Q9"])], req),
        Err(CoreError::UnknownPoint {
            context: "element `E1`".into(),
            id: "Q9".into()
        })
    );
    assert!(matches!(
        run(vec![ElementSpec::new("E1", ["P1", "P2", "P1"])], req),
        Err(CoreError::DegenerateElement { element, .. }) if element == "E1"
    ));
    assert!(matches!(
        run(vec![ElementSpec::new("E1", ["P1", "P2", "P4"])], req),
        Err(CoreError::DegenerateElement { element, reason }) if element == "E1" && reason.starts_with("zero area")
    ));
    assert!(matches!(
        run(vec![ElementSpec::new("E1", ["P1", "P2"])], req),
        Err(CoreError::TooFewPoints {
            needed: 3,
            got: 2,
            ..
        })
    ));
    assert!(matches!(
        run(vec![ElementSpec::new("E1", ["P1", "P2", "P3", "P4"])], req),
        Err(CoreError::InvalidParameter {
            name: "vertices",
            ..
        })
    ));
    match run(vec![ElementSpec::new("E7", ["P1", "P3", "P2"])], req) {
        Err(CoreError::InvalidParameter {
            name: "vertices",
            reason,
        }) => {
            assert!(
                reason.contains("`E7`") && reason.contains("clockwise"),
                "{reason}"
            );
        }
        other => panic!("expected a clockwise error, got {other:?}"),
    }
    let (acc, _) = run(
        vec![ElementSpec::new("E7", ["P1", "P3", "P2"])],
        OrientationPolicy::Fix,
    )
    .expect("Fix reorders");
    assert_eq!(acc[0].members, vec![0, 1, 2]);
    assert!(matches!(
        run(
            vec![
                ElementSpec::new("E1", ["P1", "P2", "P3"]),
                ElementSpec::new("E1", ["P2", "P4", "P3"]),
            ],
            req
        ),
        Err(CoreError::InvalidParameter {
            name: "element_id",
            ..
        })
    ));
    assert!(matches!(
        run(vec![ElementSpec::new("E 1", ["P1", "P2", "P3"])], req),
        Err(CoreError::InvalidId { .. })
    ));
    assert_eq!(run(vec![], req), Err(CoreError::Empty { what: "elements" }));

    // 3D: a tetrahedron needs four vertices.
    let p3 = PointSet::new(vec![
        Point::new("A", [0.0, 0.0, 0.0], [0.0; 3]),
        Point::new("B", [1.0, 0.0, 0.0], [0.0; 3]),
        Point::new("C", [0.0, 1.0, 0.0], [0.0; 3]),
        Point::new("D", [0.0, 0.0, 1.0], [0.0; 3]),
    ])
    .expect("valid points");
    assert!(matches!(
        element_strains(&p3, &[ElementSpec::new("K1", ["A", "B", "C"])], req, &t),
        Err(CoreError::TooFewPoints {
            needed: 4,
            got: 3,
            ..
        })
    ));
    assert!(matches!(
        element_strains(
            &p3,
            &[ElementSpec::new("K1", ["A", "C", "B", "D"])],
            req,
            &t
        ),
        Err(CoreError::InvalidParameter {
            name: "vertices",
            ..
        })
    ));
}

fn set3(xs: &[[f64; 3]]) -> PointSet<3> {
    PointSet::new(
        xs.iter()
            .enumerate()
            .map(|(k, &x)| {
                // u = G·x with a fixed G, to check the gradient where one is formed.
                let u = [
                    1e-3 * x[0] + 2e-4 * x[1],
                    -3e-4 * x[2],
                    5e-4 * x[0] + 1e-4 * x[2],
                ];
                Point::new(format!("P{}", k + 1), x, u)
            })
            .collect(),
    )
    .expect("valid points")
}

#[test]
fn flat_and_sliver_tetrahedra_are_refused() {
    let t = QualityThresholds::default();
    let tet = [ElementSpec::new("T1", ["P1", "P2", "P3", "P4"])];
    // Flat: the fourth vertex in the plane of the other three (zero volume).
    let flat = set3(&[
        [0.0, 0.0, 0.0],
        [1.0, 0.0, 0.0],
        [0.0, 1.0, 0.0],
        [0.4, 0.4, 0.0],
    ]);
    match element_strains(&flat, &tet, OrientationPolicy::Fix, &t) {
        Err(CoreError::DegenerateElement { element, reason }) => {
            assert_eq!(element, "T1");
            assert!(reason.starts_with("zero volume"), "{reason}");
        }
        other => panic!("expected DegenerateElement, got {other:?}"),
    }
    // Sliver: four nearly coplanar vertices at the corners of a unit square, two of
    // them lifted by ±0.01 m. Non-zero volume, but the dihedral angles along the two
    // diagonals are near 0 and 180°: the smallest is about 2·atan(0.01·√2) ≈ 1.6°
    // (elementary geometry).
    let sliver = set3(&[
        [0.0, 0.0, 0.0],
        [1.0, 0.0, 0.01],
        [1.0, 1.0, 0.0],
        [0.0, 1.0, 0.01],
    ]);
    let (acc, rej) = element_strains(&sliver, &tet, OrientationPolicy::Fix, &t)
        .expect("a sliver is screened, not an error");
    assert!(acc.is_empty());
    assert_eq!(rej.len(), 1);
    assert!(
        rej[0].reason.starts_with("minimum dihedral angle"),
        "{}",
        rej[0].reason
    );
    // The same sliver with the screen off is accepted and its gradient is exact.
    let (acc, _) = element_strains(
        &sliver,
        &tet,
        OrientationPolicy::Fix,
        &QualityThresholds::off(),
    )
    .expect("accepted");
    let want = Matrix3::new(1e-3, 2e-4, 0.0, 0.0, 0.0, -3e-4, 5e-4, 0.0, 1e-4);
    assert!(
        (acc[0].gradient - want).abs().max() < 1e-12,
        "{}",
        acc[0].gradient
    );
}

#[test]
fn huge_and_tiny_elements_keep_their_quality_and_gradient() {
    // Source: elementary geometry: the regular tetrahedron (±1, ±1, ±1 with an even
    // number of minus signs) and the equilateral triangle are ideal at every size; a
    // linear field u = G·x gives G exactly on every element. 1e±150 m overflows or
    // underflows squared edge lengths cubed without scaling.
    for size in [1e150, 1e-150] {
        let reg = set3(&[
            [size, size, size],
            [size, -size, -size],
            [-size, size, -size],
            [-size, -size, size],
        ]);
        let (acc, rej) = element_strains(
            &reg,
            &[ElementSpec::new("T1", ["P1", "P2", "P3", "P4"])],
            OrientationPolicy::Fix,
            &QualityThresholds::default(),
        )
        .expect("regular tetrahedron");
        assert!(rej.is_empty(), "{size}: {rej:?}");
        let want = Matrix3::new(1e-3, 2e-4, 0.0, 0.0, 0.0, -3e-4, 5e-4, 0.0, 1e-4);
        assert!(
            (acc[0].gradient - want).abs().max() < 1e-15,
            "{size}: {}",
            acc[0].gradient
        );
        let h = 3f64.sqrt() / 2.0;
        let tri = PointSet::new(
            [[0.0, 0.0], [size, 0.0], [0.5 * size, h * size]]
                .iter()
                .enumerate()
                .map(|(k, &x)| Point::new(format!("P{}", k + 1), x, [2e-3 * x[1], -1e-3 * x[0]]))
                .collect(),
        )
        .expect("valid");
        let (acc, rej) = element_strains(
            &tri,
            &[ElementSpec::new("E1", ["P1", "P2", "P3"])],
            OrientationPolicy::Require,
            &QualityThresholds::default(),
        )
        .expect("equilateral triangle");
        assert!(rej.is_empty(), "{size}: {rej:?}");
        let want = Matrix2::new(0.0, 2e-3, -1e-3, 0.0);
        assert!((acc[0].gradient - want).abs().max() < 1e-15, "{size}");
    }
}
