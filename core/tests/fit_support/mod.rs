//! Shared helpers of the estimator tests: a seeded generator and field builders.
#![allow(dead_code)]

use kinema_core::{Point, PointSet};

/// SplitMix64 (Steele, Lea & Flood, "Fast splittable pseudorandom number generators",
/// OOPSLA 2014) with Box–Muller normals (Box & Muller, Ann. Math. Stat. 29, 1958).
pub struct Rng(u64);

impl Rng {
    pub fn new(seed: u64) -> Self {
        Self(seed)
    }

    pub fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform in [0, 1).
    pub fn uniform(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }

    /// Uniform in [a, b).
    pub fn range(&mut self, a: f64, b: f64) -> f64 {
        a + (b - a) * self.uniform()
    }

    /// Standard normal.
    pub fn normal(&mut self) -> f64 {
        let u1 = 1.0 - self.uniform(); // (0, 1]
        let u2 = self.uniform();
        (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
    }
}

/// Uniform field `u = t + G·(x − x_ref)`, metres.
pub fn uniform_u<const D: usize>(
    g: &[[f64; D]; D],
    t: &[f64; D],
    x_ref: &[f64; D],
    x: &[f64; D],
) -> [f64; D] {
    let mut u = *t;
    for i in 0..D {
        for j in 0..D {
            u[i] += g[i][j] * (x[j] - x_ref[j]);
        }
    }
    u
}

/// Points `P0, P1, …` at `xs`, displaced by the uniform field, optional sigma.
pub fn uniform_set<const D: usize>(
    xs: &[[f64; D]],
    sigmas: Option<&[[f64; D]]>,
    g: &[[f64; D]; D],
    t: &[f64; D],
    x_ref: &[f64; D],
) -> PointSet<D> {
    let pts = xs
        .iter()
        .enumerate()
        .map(|(k, x)| {
            let p = Point::new(format!("P{k}"), *x, uniform_u(g, t, x_ref, x));
            match sigmas {
                Some(s) => p.with_sigma(s[k]),
                None => p,
            }
        })
        .collect();
    PointSet::new(pts).expect("valid generated points")
}

/// Largest absolute difference between an estimated gradient and `g`.
pub fn max_gradient_error<const D: usize>(
    est: &nalgebra::SMatrix<f64, D, D>,
    g: &[[f64; D]; D],
) -> f64 {
    let mut e: f64 = 0.0;
    for i in 0..D {
        for j in 0..D {
            e = e.max((est[(i, j)] - g[i][j]).abs());
        }
    }
    e
}
