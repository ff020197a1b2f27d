//! Reference check of Kinema's bounded symmetric eigen-solver against `numpy.linalg.eigh`
//! (LAPACK `syevd`), on thousands of generated 2×2 and 3×3 strain tensors including
//! near-repeated and exactly repeated eigenvalues.
//!
//! Source of truth: numpy.linalg.eigh (general-purpose reference library, run from the
//! test's Python venv). A missing interpreter or numpy is a loud failure.

use kinema_core::kinematics::nalgebra::{Matrix2, Matrix3, Quaternion, UnitQuaternion, Vector3};
use kinema_core::kinematics::{Degeneracy3, sym_eigen2, sym_eigen3};
use serde::{Deserialize, Serialize};
use std::process::Command;

/// Absolute tolerance for equal eigenvalues used in this test (the core default).
const TOL: f64 = 1e-10;

/// xorshift64* — a small seeded generator, enough for test data.
struct Rng(u64);

impl Rng {
    fn next_u64(&mut self) -> u64 {
        let mut x = self.0;
        x ^= x >> 12;
        x ^= x << 25;
        x ^= x >> 27;
        self.0 = x;
        x.wrapping_mul(0x2545_F491_4F6C_DD1D)
    }
    /// Uniform in [0, 1).
    fn unit(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }
    /// Uniform in [lo, hi).
    fn range(&mut self, lo: f64, hi: f64) -> f64 {
        lo + (hi - lo) * self.unit()
    }
    /// Strain magnitude log-uniform in [1e-6, 1e-3], random sign.
    fn strain(&mut self) -> f64 {
        let m = 10f64.powf(self.range(-6.0, -3.0));
        if self.unit() < 0.5 { -m } else { m }
    }
    fn pick<T: Copy>(&mut self, xs: &[T]) -> T {
        xs[(self.next_u64() % xs.len() as u64) as usize]
    }
    fn rotation3(&mut self) -> Matrix3<f64> {
        let q = Quaternion::new(
            self.range(-1.0, 1.0),
            self.range(-1.0, 1.0),
            self.range(-1.0, 1.0),
            self.range(-1.0, 1.0),
        );
        UnitQuaternion::from_quaternion(q)
            .to_rotation_matrix()
            .into_inner()
    }
}

const DELTAS: [f64; 7] = [1e-9, 1e-10, 1e-11, 1e-12, 1e-14, 1e-16, 0.0];

fn gen2(rng: &mut Rng, n: usize) -> Vec<Matrix2<f64>> {
    (0..n)
        .map(|i| match i % 3 {
            0 => {
                let b = rng.strain();
                Matrix2::new(rng.strain(), b, b, rng.strain())
            }
            _ => {
                let (a, d) = (rng.strain(), rng.pick(&DELTAS));
                let th = rng.range(-3.2, 3.2);
                let (s, c) = f64::sin_cos(th);
                let q = Matrix2::new(c, -s, s, c);
                q * Matrix2::new(a, 0.0, 0.0, a + d) * q.transpose()
            }
        })
        .collect()
}

fn gen3(rng: &mut Rng, n: usize) -> Vec<Matrix3<f64>> {
    (0..n)
        .map(|i| {
            let q = rng.rotation3();
            let (a, b, d) = (rng.strain(), rng.strain(), rng.pick(&DELTAS));
            let diag = match i % 5 {
                0 => {
                    let e: Vec<f64> = (0..6).map(|_| rng.strain()).collect();
                    return Matrix3::new(e[0], e[3], e[5], e[3], e[1], e[4], e[5], e[4], e[2]);
                }
                1 => Vector3::new(a, a + d, b),
                2 => Vector3::new(b, a, a + d),
                3 => Vector3::new(a + d, a, a - d),
                _ => Vector3::new(a, rng.strain(), b),
            };
            q * Matrix3::from_diagonal(&diag) * q.transpose()
        })
        .collect()
}

#[derive(Serialize)]
struct Input {
    t2: Vec<[f64; 4]>,
    t3: Vec<[f64; 9]>,
}

#[derive(Deserialize)]
struct Output {
    /// Eigenvalues ascending, as numpy returns them.
    w2: Vec<[f64; 2]>,
    /// Eigenvectors as columns, row-major flattening of the 2×2 matrix.
    v2: Vec<[f64; 4]>,
    w3: Vec<[f64; 3]>,
    v3: Vec<[f64; 9]>,
}

const SCRIPT: &str = r#"
import json, sys
import numpy as np
with open(sys.argv[1]) as f:
    d = json.load(f)
t2 = np.array(d["t2"], dtype=float).reshape(-1, 2, 2)
t3 = np.array(d["t3"], dtype=float).reshape(-1, 3, 3)
w2, v2 = np.linalg.eigh(t2)
w3, v3 = np.linalg.eigh(t3)
out = {"w2": w2.tolist(), "v2": v2.reshape(-1, 4).tolist(),
       "w3": w3.tolist(), "v3": v3.reshape(-1, 9).tolist()}
with open(sys.argv[2], "w") as f:
    json.dump(out, f)
"#;

fn run_numpy(input: &Input) -> Output {
    let dir = std::env::temp_dir().join(format!("kinema-eigh-{}", std::process::id()));
    std::fs::create_dir_all(&dir).expect("create temp dir");
    let inp = dir.join("tensors.json");
    let out = dir.join("eigh.json");
    std::fs::write(&inp, serde_json::to_vec(input).expect("serialise")).expect("write input");
    let py = kinema_tests::python();
    let res = Command::new(&py)
        .arg("-c")
        .arg(SCRIPT)
        .arg(&inp)
        .arg(&out)
        .output()
        .unwrap_or_else(|e| panic!("cannot run {}: {e}", py.display()));
    assert!(
        res.status.success(),
        "numpy reference failed (is numpy installed in {}?):\n{}",
        py.display(),
        String::from_utf8_lossy(&res.stderr)
    );
    let text = std::fs::read(&out).expect("read numpy output");
    let parsed: Output = serde_json::from_slice(&text).expect("parse numpy output");
    let _ = std::fs::remove_dir_all(&dir);
    parsed
}

/// Distance between two unit vectors with the sign ignored, `min(|a − b|, |a + b|)`
/// (about the angle between the lines, in radians, when small).
fn sin_between(a: &[f64], b: &[f64]) -> f64 {
    let minus: f64 = a.iter().zip(b).map(|(x, y)| (x - y) * (x - y)).sum();
    let plus: f64 = a.iter().zip(b).map(|(x, y)| (x + y) * (x + y)).sum();
    minus.min(plus).sqrt()
}

#[test]
fn eigen_solver_matches_numpy_eigh() {
    let mut rng = Rng(0x5EED_1234_ABCD_0001);
    let t2 = gen2(&mut rng, 3000);
    let t3 = gen3(&mut rng, 5000);
    let input = Input {
        t2: t2
            .iter()
            .map(|m| [m[(0, 0)], m[(0, 1)], m[(1, 0)], m[(1, 1)]])
            .collect(),
        t3: t3
            .iter()
            .map(|m| {
                let mut a = [0.0; 9];
                for i in 0..3 {
                    for j in 0..3 {
                        a[3 * i + j] = m[(i, j)];
                    }
                }
                a
            })
            .collect(),
    };
    let reference = run_numpy(&input);
    assert_eq!(reference.w2.len(), t2.len());
    assert_eq!(reference.w3.len(), t3.len());

    let (mut vec_checks, mut flagged, mut unflagged_checks) = (0usize, 0usize, 0usize);

    for (k, m) in t2.iter().enumerate() {
        let ours = sym_eigen2(m, TOL).expect("finite tensor");
        let w = reference.w2[k];
        let norm = m.norm();
        let desc = [w[1], w[0]];
        for (i, (got, want)) in ours.values.iter().zip(desc).enumerate() {
            assert!(
                (got - want).abs() <= 1e-12 * norm + 1e-300,
                "2D #{k} value {i}: ours {got:e}, numpy {want:e}"
            );
        }
        let gap = desc[0] - desc[1];
        if gap > 10.0 * TOL {
            let dirs = ours
                .directions
                .expect("distinct values must have directions");
            if gap > 1e-6 * norm {
                let v = reference.v2[k];
                // numpy column 1 belongs to the larger value.
                let n1_ref = [v[1], v[3]];
                assert!(
                    sin_between(&dirs[0], &n1_ref) <= 1e-8,
                    "2D #{k} direction differs: {:?} vs {n1_ref:?}, m = {m:?}, gap {gap:e}",
                    dirs[0]
                );
                vec_checks += 1;
            }
        }
        if gap < TOL / 10.0 {
            assert!(
                ours.degenerate,
                "2D #{k}: gap {gap:e} below tolerance not flagged"
            );
            assert!(ours.directions.is_none() && ours.angle.is_none());
            flagged += 1;
        }
    }

    for (k, m) in t3.iter().enumerate() {
        let ours = sym_eigen3(m, TOL).expect("bounded solver converges");
        let w = reference.w3[k];
        let v = reference.v3[k];
        let norm = m.norm();
        let desc = [w[2], w[1], w[0]];
        for (i, (got, want)) in ours.values.iter().zip(desc).enumerate() {
            assert!(
                got.is_finite() && (got - want).abs() <= 1e-12 * norm + 1e-300,
                "3D #{k} value {i}: ours {got:e}, numpy {want:e}"
            );
        }
        let gaps = [desc[0] - desc[1], desc[1] - desc[2]];
        // Gap of each value to its nearest neighbour.
        let isolation = [gaps[0], gaps[0].min(gaps[1]), gaps[1]];
        for (i, &iso) in isolation.iter().enumerate() {
            let col = 2 - i; // numpy is ascending
            let n_ref = [v[col], v[3 + col], v[6 + col]];
            if iso > 10.0 * TOL {
                let n = ours.directions[i]
                    .unwrap_or_else(|| panic!("3D #{k}: isolated value {i} lost its direction"));
                if iso > 1e-6 * norm {
                    assert!(
                        sin_between(&n, &n_ref) <= 1e-8,
                        "3D #{k} direction {i} differs: {n:?} vs {n_ref:?}"
                    );
                    vec_checks += 1;
                    if ours.degeneracy != Degeneracy3::Distinct {
                        unflagged_checks += 1;
                    }
                }
            }
            if iso < TOL / 10.0 {
                assert!(
                    ours.directions[i].is_none(),
                    "3D #{k}: value {i} repeated (gap {iso:e}) but given a direction"
                );
            }
        }
        if gaps[0] < TOL / 10.0 || gaps[1] < TOL / 10.0 {
            assert!(
                ours.degeneracy != Degeneracy3::Distinct,
                "3D #{k}: repeated values not flagged"
            );
            flagged += 1;
        }
    }

    eprintln!(
        "direction checks {vec_checks}, flagged {flagged}, degenerate-unique {unflagged_checks}"
    );
    // The data set really exercised both regimes.
    assert!(vec_checks > 8000, "only {vec_checks} direction comparisons");
    assert!(flagged > 1500, "only {flagged} repeated tensors flagged");
    assert!(
        unflagged_checks > 300,
        "only {unflagged_checks} unique directions of degenerate tensors checked"
    );
}
