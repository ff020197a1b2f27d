//! Closed-form 2D displacement fields with their exact small strain, and point-set
//! builders, for tests. Use from a test file with `mod fields;`.
//!
//! Every field gives the displacement `u(x)` (metres) and the exact small strain
//! `ε(x)` (dimensionless, tensor shear off the diagonal). For the elasticity
//! solutions the strain is computed from the published STRESSES through Hooke's law,
//! independently of the displacement formula, so a test can check one against the
//! other by differentiating the displacement ([`fd_strain`]).
#![allow(dead_code)]

use kinema_core::estimate::elements::ElementSpec;
use kinema_core::{Point, PointSet};
use nalgebra::Matrix2;

/// A closed-form plane displacement field.
pub trait Field {
    /// Displacement at `x`, metres.
    fn displacement(&self, x: [f64; 2]) -> [f64; 2];
    /// Exact small strain at `x` (`exy` tensor shear off the diagonal).
    fn strain(&self, x: [f64; 2]) -> Matrix2<f64>;
}

/// Affine field `u = t + G·(x − origin)` with constant gradient `G`.
/// Source: definition of a homogeneous deformation (any continuum-mechanics text).
#[derive(Debug, Clone, Copy)]
pub struct Uniform {
    /// Point about which `G` acts, metres.
    pub origin: [f64; 2],
    /// Rigid translation, metres.
    pub translation: [f64; 2],
    /// Displacement gradient.
    pub gradient: Matrix2<f64>,
}

impl Uniform {
    /// Uniform stretch `exx`, `eyy` (no shear, no rotation).
    pub fn stretch(exx: f64, eyy: f64, origin: [f64; 2]) -> Self {
        Self::with_gradient(Matrix2::new(exx, 0.0, 0.0, eyy), origin)
    }

    /// Pure shear with tensor shear `exy` (symmetric gradient, no rotation).
    pub fn pure_shear(exy: f64, origin: [f64; 2]) -> Self {
        Self::with_gradient(Matrix2::new(0.0, exy, exy, 0.0), origin)
    }

    /// Simple shear `u_x = γ·y`: engineering shear `gxy = γ`, tensor shear
    /// `exy = γ/2`, rotation `−γ/2`.
    pub fn simple_shear(gamma: f64, origin: [f64; 2]) -> Self {
        Self::with_gradient(Matrix2::new(0.0, gamma, 0.0, 0.0), origin)
    }

    /// Any constant gradient, with a small translation.
    pub fn with_gradient(gradient: Matrix2<f64>, origin: [f64; 2]) -> Self {
        Self {
            origin,
            translation: [2.0e-3, -1.0e-3],
            gradient,
        }
    }
}

impl Field for Uniform {
    fn displacement(&self, x: [f64; 2]) -> [f64; 2] {
        let d = [x[0] - self.origin[0], x[1] - self.origin[1]];
        let g = &self.gradient;
        [
            self.translation[0] + g[(0, 0)] * d[0] + g[(0, 1)] * d[1],
            self.translation[1] + g[(1, 0)] * d[0] + g[(1, 1)] * d[1],
        ]
    }

    fn strain(&self, _x: [f64; 2]) -> Matrix2<f64> {
        (self.gradient + self.gradient.transpose()) * 0.5
    }
}

/// Exact finite rigid rotation by `theta` (rad, CCW) about `origin`:
/// `u = (R − I)(x − origin)`. Its gradient is `R − I`, its small strain
/// `sym(R − I) = (cos θ − 1)·I` (not zero: the small-strain artefact of a finite
/// rotation), its small rotation `sin θ`.
/// Source: rotation matrix of the plane; definition of small strain.
#[derive(Debug, Clone, Copy)]
pub struct RigidRotation {
    /// Centre of rotation, metres.
    pub origin: [f64; 2],
    /// Angle, radians, counter-clockwise.
    pub theta: f64,
}

impl Field for RigidRotation {
    fn displacement(&self, x: [f64; 2]) -> [f64; 2] {
        let (s, c) = self.theta.sin_cos();
        let d = [x[0] - self.origin[0], x[1] - self.origin[1]];
        [(c - 1.0) * d[0] - s * d[1], s * d[0] + (c - 1.0) * d[1]]
    }

    fn strain(&self, _x: [f64; 2]) -> Matrix2<f64> {
        Matrix2::identity() * (self.theta.cos() - 1.0)
    }
}

/// Plane-stress Hooke's law: strain from stresses (Pa).
/// Source: Timoshenko & Goodier, Theory of Elasticity, 3rd ed., Art. 7 (Hooke's law)
/// with `σz = 0`.
pub fn hooke_plane_stress(sxx: f64, syy: f64, sxy: f64, e: f64, nu: f64) -> Matrix2<f64> {
    let exx = (sxx - nu * syy) / e;
    let eyy = (syy - nu * sxx) / e;
    let exy = (1.0 + nu) * sxy / e; // tensor shear = τ/(2G), G = E/(2(1+ν))
    Matrix2::new(exx, exy, exy, eyy)
}

/// Plane-stress Hooke's law inverted: stresses (Pa) `[σxx, σyy, σxy]` from strain.
pub fn stress_plane_stress(eps: &Matrix2<f64>, e: f64, nu: f64) -> [f64; 3] {
    let f = e / (1.0 - nu * nu);
    [
        f * (eps[(0, 0)] + nu * eps[(1, 1)]),
        f * (eps[(1, 1)] + nu * eps[(0, 0)]),
        e / (1.0 + nu) * eps[(0, 1)],
    ]
}

/// Plane-strain Hooke's law: strain from in-plane stresses (Pa), `εz = 0`.
/// Source: Timoshenko & Goodier, 3rd ed., Art. 8 (plane strain).
pub fn hooke_plane_strain(sxx: f64, syy: f64, sxy: f64, e: f64, nu: f64) -> Matrix2<f64> {
    let f = (1.0 + nu) / e;
    let exx = f * ((1.0 - nu) * sxx - nu * syy);
    let eyy = f * ((1.0 - nu) * syy - nu * sxx);
    let exy = f * sxy;
    Matrix2::new(exx, exy, exy, eyy)
}

/// Tensor given in polar components (r, θ) at angle `theta`, rotated to Cartesian:
/// `Q·T·Qᵀ` with `Q = [[cos, −sin], [sin, cos]]`.
pub fn polar_to_cartesian(trr: f64, ttt: f64, trt: f64, theta: f64) -> Matrix2<f64> {
    let (s, c) = theta.sin_cos();
    let q = Matrix2::new(c, -s, s, c);
    q * Matrix2::new(trr, trt, trt, ttt) * q.transpose()
}

/// Cartesian tensor to polar components `[T_rr, T_θθ, T_rθ]` at angle `theta`.
pub fn cartesian_to_polar(t: &Matrix2<f64>, theta: f64) -> [f64; 3] {
    let (s, c) = theta.sin_cos();
    let q = Matrix2::new(c, -s, s, c);
    let p = q.transpose() * t * q;
    [p[(0, 0)], p[(1, 1)], p[(0, 1)]]
}

/// Small strain of `field` at `x` by central differences of its displacement with
/// step `h` (metres): an independent check of [`Field::strain`].
pub fn fd_strain(field: &dyn Field, x: [f64; 2], h: f64) -> Matrix2<f64> {
    let mut g = Matrix2::zeros();
    for j in 0..2 {
        let mut xp = x;
        let mut xm = x;
        xp[j] += h;
        xm[j] -= h;
        let (up, um) = (field.displacement(xp), field.displacement(xm));
        for i in 0..2 {
            g[(i, j)] = (up[i] - um[i]) / (2.0 * h);
        }
    }
    (g + g.transpose()) * 0.5
}

/// End-loaded cantilever in plane stress, unit thickness.
///
/// Source: Timoshenko & Goodier, Theory of Elasticity, 3rd ed., Art. 21 (bending of a
/// cantilever loaded at the end). Local axes: `s` along the beam from the free end
/// (`0 … L`), `t` from the neutral axis (`−c … c`); `I = 2c³/3`, `k = P/(EI)`,
/// `P/(IG) = 2(1+ν)k`. Stresses `σs = −P s t / I`, `σt = 0`, `τst = −P (c² − t²)/(2I)`.
/// Displacement (clamped at `s = L` with `u_t = 0` and `∂u_t/∂s = 0` on the axis):
/// `u_s = −k s² t/2 − ν k t³/6 + P t³/(6IG) + (k L²/2 − P c²/(2IG)) t`,
/// `u_t = ν k s t²/2 + k s³/6 − k L² s/2 + k L³/3`
/// (the same form as `cantilever` in tests/peer/gen_field.py).
#[derive(Debug, Clone, Copy)]
pub struct Cantilever {
    /// Free end on the neutral axis (s = 0, t = 0), metres.
    pub free_end: [f64; 2],
    /// Length L, metres.
    pub length: f64,
    /// Half depth c, metres.
    pub half_depth: f64,
    /// Young's modulus, Pa.
    pub e: f64,
    /// Poisson's ratio.
    pub nu: f64,
    /// End load P, N per metre of thickness.
    pub load: f64,
}

impl Cantilever {
    /// Beam occupying the box `lo … hi` (free end at `x = lo[0]`), with the load
    /// chosen so that the tip deflection `P L³/(3EI)` equals `tip` metres.
    pub fn with_tip(lo: [f64; 2], hi: [f64; 2], tip: f64, e: f64, nu: f64) -> Self {
        let length = hi[0] - lo[0];
        let half_depth = 0.5 * (hi[1] - lo[1]);
        let i = 2.0 * half_depth.powi(3) / 3.0;
        Self {
            free_end: [lo[0], lo[1] + half_depth],
            length,
            half_depth,
            e,
            nu,
            load: 3.0 * tip * e * i / length.powi(3),
        }
    }

    /// Second moment of area of the unit-thickness section, m⁴.
    pub fn inertia(&self) -> f64 {
        2.0 * self.half_depth.powi(3) / 3.0
    }

    fn local(&self, x: [f64; 2]) -> (f64, f64) {
        (x[0] - self.free_end[0], x[1] - self.free_end[1])
    }

    /// Published stresses `[σxx, σyy, σxy]`, Pa.
    pub fn stress(&self, x: [f64; 2]) -> [f64; 3] {
        let (s, t) = self.local(x);
        let i = self.inertia();
        let c = self.half_depth;
        [
            -self.load * s * t / i,
            0.0,
            -self.load * (c * c - t * t) / (2.0 * i),
        ]
    }
}

impl Field for Cantilever {
    fn displacement(&self, x: [f64; 2]) -> [f64; 2] {
        let (s, t) = self.local(x);
        let (l, c, nu) = (self.length, self.half_depth, self.nu);
        let k = self.load / (self.e * self.inertia());
        let kg = 2.0 * (1.0 + nu) * k;
        let us = -k * s * s * t / 2.0 - nu * k * t.powi(3) / 6.0
            + kg * t.powi(3) / 6.0
            + (k * l * l / 2.0 - kg * c * c / 2.0) * t;
        let ut = nu * k * s * t * t / 2.0 + k * s.powi(3) / 6.0 - k * l * l * s / 2.0
            + k * l.powi(3) / 3.0;
        [us, ut]
    }

    fn strain(&self, x: [f64; 2]) -> Matrix2<f64> {
        let [sxx, syy, sxy] = self.stress(x);
        hooke_plane_stress(sxx, syy, sxy, self.e, self.nu)
    }
}

/// Lamé thick-walled cylinder under internal and external pressure, PLANE STRAIN
/// (long cylinder, `εz = 0`).
///
/// Source: Timoshenko & Goodier, Theory of Elasticity, 3rd ed., Art. 28.
/// With inner radius `a`, outer `b`, pressures `p_i`, `p_o` (positive in compression):
/// `σr = A − B/r²`, `σθ = A + B/r²`, `A = (p_i a² − p_o b²)/(b² − a²)`,
/// `B = (p_i − p_o) a² b²/(b² − a²)`. Radial displacement in plane strain
/// `u_r = (1+ν)/E·((1−2ν) A r + B/r)` (the form `u_r = C₁ r + C₂/r`), `u_θ = 0`.
#[derive(Debug, Clone, Copy)]
pub struct Lame {
    /// Axis of the cylinder, metres.
    pub centre: [f64; 2],
    /// Inner radius, metres.
    pub a: f64,
    /// Outer radius, metres.
    pub b: f64,
    /// Internal pressure, Pa.
    pub p_in: f64,
    /// External pressure, Pa.
    pub p_out: f64,
    /// Young's modulus, Pa.
    pub e: f64,
    /// Poisson's ratio.
    pub nu: f64,
}

impl Lame {
    fn coefficients(&self) -> (f64, f64) {
        let (a2, b2) = (self.a * self.a, self.b * self.b);
        (
            (self.p_in * a2 - self.p_out * b2) / (b2 - a2),
            (self.p_in - self.p_out) * a2 * b2 / (b2 - a2),
        )
    }

    /// Published stresses `[σr, σθ]` at radius `r`, Pa.
    pub fn stress_polar(&self, r: f64) -> [f64; 2] {
        let (a, b) = self.coefficients();
        [a - b / (r * r), a + b / (r * r)]
    }

    /// Polar coordinates `(r, θ)` of `x` about the axis.
    pub fn polar(&self, x: [f64; 2]) -> (f64, f64) {
        let (dx, dy) = (x[0] - self.centre[0], x[1] - self.centre[1]);
        (dx.hypot(dy), dy.atan2(dx))
    }
}

impl Field for Lame {
    fn displacement(&self, x: [f64; 2]) -> [f64; 2] {
        let (r, th) = self.polar(x);
        let (a, b) = self.coefficients();
        let ur = (1.0 + self.nu) / self.e * ((1.0 - 2.0 * self.nu) * a * r + b / r);
        let (s, c) = th.sin_cos();
        [ur * c, ur * s]
    }

    fn strain(&self, x: [f64; 2]) -> Matrix2<f64> {
        let (r, th) = self.polar(x);
        let [sr, st] = self.stress_polar(r);
        // Hooke in the principal (r, θ) frame, then rotate.
        let p = hooke_plane_strain(sr, st, 0.0, self.e, self.nu);
        polar_to_cartesian(p[(0, 0)], p[(1, 1)], 0.0, th)
    }
}

/// Kirsch plate: infinite plate with a circular hole of radius `a`, remote uniaxial
/// tension `S` along x, PLANE STRESS.
///
/// Stresses, Source: Kirsch (1898); Timoshenko & Goodier, Theory of Elasticity,
/// 3rd ed., Art. 35:
/// `σr = S/2 (1 − a²/r²) + S/2 (1 − 4a²/r² + 3a⁴/r⁴) cos 2θ`,
/// `σθ = S/2 (1 + a²/r²) − S/2 (1 + 3a⁴/r⁴) cos 2θ`,
/// `τrθ = −S/2 (1 + 2a²/r² − 3a⁴/r⁴) sin 2θ`.
///
/// Displacement (plane stress, `μ = E/(2(1+ν))`, `κ = (3−ν)/(1+ν)`), derived from the
/// Airy stress function of the solution; the form found in Barber, Elasticity
/// (Kirsch problem) — from memory, and therefore checked numerically against the
/// stresses above in `closed_form_fields.rs`:
/// `u_r = S/(4μ) [ r((κ−1)/2 + cos 2θ) + (a²/r)(1 + (1+κ) cos 2θ) − (a⁴/r³) cos 2θ ]`,
/// `u_θ = −S/(4μ) [ r + (κ−1) a²/r + a⁴/r³ ] sin 2θ`.
#[derive(Debug, Clone, Copy)]
pub struct Kirsch {
    /// Centre of the hole, metres.
    pub centre: [f64; 2],
    /// Hole radius, metres.
    pub a: f64,
    /// Remote tension along x, Pa.
    pub s: f64,
    /// Young's modulus, Pa.
    pub e: f64,
    /// Poisson's ratio.
    pub nu: f64,
}

impl Kirsch {
    /// Polar coordinates `(r, θ)` of `x` about the hole centre.
    pub fn polar(&self, x: [f64; 2]) -> (f64, f64) {
        let (dx, dy) = (x[0] - self.centre[0], x[1] - self.centre[1]);
        (dx.hypot(dy), dy.atan2(dx))
    }

    /// Published stresses `[σr, σθ, τrθ]` at `(r, θ)`, Pa.
    pub fn stress_polar(&self, r: f64, th: f64) -> [f64; 3] {
        let q2 = (self.a / r).powi(2);
        let q4 = q2 * q2;
        let h = 0.5 * self.s;
        let (s2, c2) = (2.0 * th).sin_cos();
        [
            h * (1.0 - q2) + h * (1.0 - 4.0 * q2 + 3.0 * q4) * c2,
            h * (1.0 + q2) - h * (1.0 + 3.0 * q4) * c2,
            -h * (1.0 + 2.0 * q2 - 3.0 * q4) * s2,
        ]
    }
}

impl Field for Kirsch {
    fn displacement(&self, x: [f64; 2]) -> [f64; 2] {
        let (r, th) = self.polar(x);
        let mu = self.e / (2.0 * (1.0 + self.nu));
        let kappa = (3.0 - self.nu) / (1.0 + self.nu);
        let (a2, a4) = (self.a * self.a, self.a.powi(4));
        let f = self.s / (4.0 * mu);
        let (s2, c2) = (2.0 * th).sin_cos();
        let ur = f
            * (r * ((kappa - 1.0) / 2.0 + c2) + a2 / r * (1.0 + (1.0 + kappa) * c2)
                - a4 / r.powi(3) * c2);
        let ut = -f * (r + (kappa - 1.0) * a2 / r + a4 / r.powi(3)) * s2;
        let (s, c) = th.sin_cos();
        [ur * c - ut * s, ur * s + ut * c]
    }

    fn strain(&self, x: [f64; 2]) -> Matrix2<f64> {
        let (r, th) = self.polar(x);
        let [sr, st, srt] = self.stress_polar(r, th);
        let p = hooke_plane_stress(sr, st, srt, self.e, self.nu);
        polar_to_cartesian(p[(0, 0)], p[(1, 1)], p[(0, 1)], th)
    }
}

/// SplitMix64 pseudo-random generator (Steele, Lea & Flood, 2014): deterministic
/// test data without extra dependencies.
#[derive(Debug, Clone)]
pub struct Rng(u64);

impl Rng {
    /// Generator from a seed.
    pub fn new(seed: u64) -> Self {
        Self(seed)
    }

    /// Next 64 random bits.
    pub fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform in `[0, 1)`.
    pub fn uniform(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }

    /// Uniform in `[lo, hi)`.
    pub fn range(&mut self, lo: f64, hi: f64) -> f64 {
        lo + (hi - lo) * self.uniform()
    }
}

/// `n` points uniformly scattered in the box `lo … hi`.
pub fn scattered(lo: [f64; 2], hi: [f64; 2], n: usize, seed: u64) -> Vec<[f64; 2]> {
    let mut rng = Rng::new(seed);
    (0..n)
        .map(|_| [rng.range(lo[0], hi[0]), rng.range(lo[1], hi[1])])
        .collect()
}

/// Grid of `nx × ny` nodes over `lo … hi`; interior nodes moved by up to
/// `±jitter·spacing` in each axis, boundary nodes left in place (so the hull has no
/// slivers).
pub fn jittered_grid(
    lo: [f64; 2],
    hi: [f64; 2],
    nx: usize,
    ny: usize,
    jitter: f64,
    seed: u64,
) -> Vec<[f64; 2]> {
    let mut rng = Rng::new(seed);
    let (hx, hy) = (
        (hi[0] - lo[0]) / (nx - 1) as f64,
        (hi[1] - lo[1]) / (ny - 1) as f64,
    );
    let mut out = Vec::with_capacity(nx * ny);
    for j in 0..ny {
        for i in 0..nx {
            let mut x = [lo[0] + i as f64 * hx, lo[1] + j as f64 * hy];
            if i > 0 && i + 1 < nx && j > 0 && j + 1 < ny {
                x[0] += rng.range(-jitter, jitter) * hx;
                x[1] += rng.range(-jitter, jitter) * hy;
            }
            out.push(x);
        }
    }
    out
}

/// A validated point set `P1, P2, …` sampling `field` at `xs`.
pub fn sample(xs: &[[f64; 2]], field: &dyn Field) -> PointSet<2> {
    let pts = xs
        .iter()
        .enumerate()
        .map(|(i, &x)| Point::new(format!("P{}", i + 1), x, field.displacement(x)))
        .collect();
    PointSet::new(pts).expect("generated points are valid")
}

/// Structured mesh of a ring sector `r0 … r1`, `th0 … th1` (rad) about `centre`:
/// `nr × nt` nodes `N{i}_{j}` and two counter-clockwise triangles per cell, the
/// diagonal alternating from cell to cell. Returns the node positions (in the order
/// of the IDs `N0_0, N1_0, …`) and the elements `E1, E2, …`.
pub fn ring_mesh(
    centre: [f64; 2],
    r: [f64; 2],
    th: [f64; 2],
    nr: usize,
    nt: usize,
) -> (Vec<(String, [f64; 2])>, Vec<ElementSpec>) {
    let mut nodes = Vec::with_capacity(nr * nt);
    for j in 0..nt {
        let t = th[0] + (th[1] - th[0]) * j as f64 / (nt - 1) as f64;
        for i in 0..nr {
            let rad = r[0] + (r[1] - r[0]) * i as f64 / (nr - 1) as f64;
            nodes.push((
                format!("N{i}_{j}"),
                [centre[0] + rad * t.cos(), centre[1] + rad * t.sin()],
            ));
        }
    }
    let id = |i: usize, j: usize| format!("N{i}_{j}");
    let mut elements = Vec::new();
    for j in 0..nt - 1 {
        for i in 0..nr - 1 {
            // (i, j) → (i+1, j) is radial outwards, (i, j) → (i, j+1) is CCW: the
            // cell corners in CCW order are (i,j), (i+1,j), (i+1,j+1), (i,j+1).
            let (a, b, c, d) = (id(i, j), id(i + 1, j), id(i + 1, j + 1), id(i, j + 1));
            let n = elements.len();
            if (i + j) % 2 == 0 {
                elements.push(ElementSpec::new(format!("E{}", n + 1), [&a, &b, &c]));
                elements.push(ElementSpec::new(format!("E{}", n + 2), [&a, &c, &d]));
            } else {
                elements.push(ElementSpec::new(format!("E{}", n + 1), [&a, &b, &d]));
                elements.push(ElementSpec::new(format!("E{}", n + 2), [&b, &c, &d]));
            }
        }
    }
    (nodes, elements)
}

/// A validated point set from named positions, sampling `field`.
pub fn sample_named(nodes: &[(String, [f64; 2])], field: &dyn Field) -> PointSet<2> {
    let pts = nodes
        .iter()
        .map(|(id, x)| Point::new(id.clone(), *x, field.displacement(*x)))
        .collect();
    PointSet::new(pts).expect("generated points are valid")
}
