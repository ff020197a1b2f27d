//! The fitting estimators (automatic neighbourhoods, regular-grid finite differences)
//! on curved closed-form elasticity fields: the error at the centres against the exact
//! strain, and its order of convergence as the spacing halves.
//!
//! Fields (see `fields/mod.rs`, with the strain from the published stresses):
//! - end-loaded cantilever, Timoshenko & Goodier, Theory of Elasticity, 3rd ed., Art. 21;
//! - Lamé thick-walled cylinder, same text, Art. 28;
//! - Kirsch plate with a circular hole, Kirsch (1898) and the same text, Art. 35.
//!
//! Expected orders (Taylor series): a linear least-squares fit over an asymmetric
//! neighbourhood of size `h` has a gradient error `O(h)` on a curved field (the
//! quadratic term leaks into the gradient through the third moments of the points, and
//! the centre is not the centroid); second-order finite differences (central, or the
//! one-sided three-point formulas) have error `O(h²)`.

mod fields;

use fields::{Cantilever, Field, Kirsch, Lame, Rng};
use kinema_core::PointSet;
use kinema_core::estimate::GradientEstimate;
use kinema_core::estimate::grid::{GridField2, grid_gradients};
use kinema_core::estimate::lsq::FitOptions;
use kinema_core::estimate::neighbourhood::{Centres, Selection, fit_neighbourhoods};
use nalgebra::Matrix2;

/// Survey-style offset of every geometry, metres.
const OFFSET: [f64; 2] = [1.0e5, 2.0e5];

/// Neighbours per fit (the 3×3 block of a regular grid).
const K: usize = 9;

/// A field on its domain: bounding box, membership test, and the strain scale
/// (largest |ε| component over the domain) for relative errors.
struct Case {
    name: &'static str,
    field: Box<dyn Field>,
    lo: [f64; 2],
    hi: [f64; 2],
    inside: Box<dyn Fn([f64; 2]) -> bool>,
    /// Coarsest spacing, metres.
    h0: f64,
}

fn cases() -> Vec<Case> {
    let beam_lo = OFFSET;
    let beam_hi = [OFFSET[0] + 10.0, OFFSET[1] + 2.0];
    // 10 m × 2 m concrete beam, 10 mm tip deflection (E, ν common practice).
    let cantilever = Cantilever::with_tip(beam_lo, beam_hi, 0.010, 30e9, 0.2);
    let lame = Lame {
        centre: OFFSET,
        a: 0.5,
        b: 1.5,
        p_in: 10e6,
        p_out: 2e6,
        e: 30e9,
        nu: 0.2,
    };
    // Steel plate (E, ν common practice), 100 MPa remote tension, 100 mm hole.
    let kirsch = Kirsch {
        centre: OFFSET,
        a: 0.1,
        s: 100e6,
        e: 200e9,
        nu: 0.3,
    };
    let r = |x: [f64; 2]| (x[0] - OFFSET[0]).hypot(x[1] - OFFSET[1]);
    vec![
        Case {
            name: "cantilever",
            field: Box::new(cantilever),
            lo: beam_lo,
            hi: beam_hi,
            inside: Box::new(|_| true),
            h0: 0.5,
        },
        Case {
            name: "Lamé",
            field: Box::new(lame),
            lo: [OFFSET[0] - 1.5, OFFSET[1] - 1.5],
            hi: [OFFSET[0] + 1.5, OFFSET[1] + 1.5],
            inside: Box::new(move |x| (0.5..=1.5).contains(&r(x))),
            h0: 0.2,
        },
        Case {
            name: "Kirsch",
            field: Box::new(kirsch),
            lo: [OFFSET[0] - 0.6, OFFSET[1] - 0.6],
            hi: [OFFSET[0] + 0.6, OFFSET[1] + 0.6],
            inside: Box::new(move |x| r(x) >= 0.1),
            h0: 0.04,
        },
    ]
}

/// Nodes `lo + (i, j)·h` of the box that lie in the domain.
fn nodes(c: &Case, h: f64) -> (usize, usize, Vec<[f64; 2]>) {
    let nx = ((c.hi[0] - c.lo[0]) / h).round() as usize + 1;
    let ny = ((c.hi[1] - c.lo[1]) / h).round() as usize + 1;
    let mut out = Vec::new();
    for j in 0..ny {
        for i in 0..nx {
            out.push([c.lo[0] + i as f64 * h, c.lo[1] + j as f64 * h]);
        }
    }
    (nx, ny, out)
}

/// Points on the grid of spacing `h`, each moved by up to ±0.3·h per axis (so that
/// no neighbourhood is symmetric), kept where inside the domain.
fn jittered_points(c: &Case, h: f64, seed: u64) -> PointSet<2> {
    let mut rng = Rng::new(seed);
    let (_, _, xs) = nodes(c, h);
    let xs: Vec<[f64; 2]> = xs
        .into_iter()
        .map(|x| {
            [
                x[0] + rng.range(-0.3, 0.3) * h,
                x[1] + rng.range(-0.3, 0.3) * h,
            ]
        })
        .filter(|&x| {
            (c.inside)(x)
                && x[0] >= c.lo[0]
                && x[0] <= c.hi[0]
                && x[1] >= c.lo[1]
                && x[1] <= c.hi[1]
        })
        .collect();
    fields::sample(&xs, c.field.as_ref())
}

fn sym(g: &Matrix2<f64>) -> Matrix2<f64> {
    (g + g.transpose()) * 0.5
}

fn median(mut v: Vec<f64>) -> f64 {
    assert!(!v.is_empty(), "no values");
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

/// Largest |ε| component of the exact strain over the domain nodes at spacing `h`.
fn strain_scale(c: &Case, h: f64) -> f64 {
    let (_, _, xs) = nodes(c, h);
    xs.into_iter()
        .filter(|&x| (c.inside)(x))
        .map(|x| c.field.strain(x).abs().max())
        .fold(0.0, f64::max)
}

/// Median over the estimates of max |sym(G) − ε(centre)| / scale, the centre of each
/// estimate given by `centre`.
fn median_error(
    c: &Case,
    est: &[GradientEstimate<2>],
    centre: impl Fn(&GradientEstimate<2>) -> Option<[f64; 2]>,
    scale: f64,
) -> f64 {
    median(
        est.iter()
            .filter_map(|e| {
                let x = centre(e)?;
                Some((sym(&e.gradient) - c.field.strain(x)).abs().max() / scale)
            })
            .collect(),
    )
}

/// Observed orders `log2(e(h)/e(h/2))` of a sequence of errors at halving spacings.
fn orders(errors: &[f64]) -> Vec<f64> {
    errors.windows(2).map(|w| (w[0] / w[1]).log2()).collect()
}

/// Node `(i, j)` of a label `"i,j"`.
fn label_ij(label: &str) -> (usize, usize) {
    let mut it = label.split(',').map(|v| v.parse::<usize>().expect("index"));
    (it.next().expect("i"), it.next().expect("j"))
}

const LEVELS: usize = 3;

#[test]
fn neighbourhood_fits_converge_at_first_order_on_curved_fields() {
    for c in cases() {
        let scale = strain_scale(&c, c.h0 / 4.0);
        let mut at_points = Vec::new();
        let mut at_nodes = Vec::new();
        for level in 0..LEVELS {
            let h = c.h0 / (1 << level) as f64;
            let set = jittered_points(&c, h, 100 + level as u64);
            let o = FitOptions::default();
            let sel = Selection::Nearest { k: K };
            // Centred at every point: the centre is the point itself.
            let (good, bad) =
                fit_neighbourhoods(&set, &Centres::AtPoints, &sel, &o).expect("valid run");
            assert!(bad.is_empty(), "{} h={h}: {:?}", c.name, bad.first());
            let pts = set.points();
            let by_id = |e: &GradientEstimate<2>| pts.iter().find(|p| p.id == e.label).map(|p| p.x);
            at_points.push(median_error(&c, &good, by_id, scale));
            // Centred at the nodes of a grid offset by h/2 from the point grid: only
            // nodes inside the domain are scored.
            let origin = [c.lo[0] + 0.5 * h, c.lo[1] + 0.5 * h];
            let counts = [
                ((c.hi[0] - c.lo[0]) / h).round() as usize,
                ((c.hi[1] - c.lo[1]) / h).round() as usize,
            ];
            let grid = Centres::Grid {
                origin,
                spacing: [h, h],
                counts,
            };
            let (good, _) = fit_neighbourhoods(&set, &grid, &sel, &o).expect("valid run");
            let node = |e: &GradientEstimate<2>| {
                let (i, j) = label_ij(&e.label);
                let x = [origin[0] + i as f64 * h, origin[1] + j as f64 * h];
                (c.inside)(x).then_some(x)
            };
            at_nodes.push(median_error(&c, &good, node, scale));
        }
        for (what, errs) in [("at points", &at_points), ("at grid nodes", &at_nodes)] {
            let ord = orders(errs);
            eprintln!("{} {what}: errors {errs:.3?}, orders {ord:.2?}", c.name);
            // Accuracy: 2 % of the largest strain at the finest spacing.
            assert!(errs[LEVELS - 1] < 0.02, "{} {what}: {errs:?}", c.name);
            for o in &ord {
                assert!(
                    (0.7..1.6).contains(o),
                    "{} {what}: observed orders {ord:?} (errors {errs:?}), expected ≈ 1",
                    c.name
                );
            }
        }
    }
}

#[test]
fn grid_differences_converge_at_second_order_on_curved_fields() {
    for c in cases() {
        let scale = strain_scale(&c, c.h0 / 4.0);
        let mut errs = Vec::new();
        for level in 0..LEVELS {
            let h = c.h0 / (1 << level) as f64;
            let (nx, ny, xs) = nodes(&c, h);
            // Cells outside the domain (the hole, beyond the cylinder) have no data.
            let u = xs
                .iter()
                .map(|&x| (c.inside)(x).then(|| c.field.displacement(x)))
                .collect();
            let field = GridField2 {
                origin: c.lo,
                spacing: [h, h],
                nx,
                ny,
                u,
            };
            let (good, bad) = grid_gradients(&field).expect("valid grid");
            // Only cells squeezed between the domain boundaries may lack a stencil.
            assert!(
                bad.len() * 20 <= good.len(),
                "{} h={h}: {} rejected, {:?}",
                c.name,
                bad.len(),
                bad.first()
            );
            errs.push(median_error(&c, &good, |e| Some(e.centroid), scale));
        }
        let ord = orders(&errs);
        eprintln!("{} grid: errors {errs:.3?}, orders {ord:.2?}", c.name);
        assert!(errs[LEVELS - 1] < 1e-3, "{}: {errs:?}", c.name);
        for o in &ord {
            assert!(
                (1.7..2.4).contains(o),
                "{}: observed orders {ord:?} (errors {errs:?}), expected ≈ 2",
                c.name
            );
        }
    }
}
