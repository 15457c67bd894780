//! Deletion and insertion curves (Petsiuk, Das, Saenko 2018, "RISE", BMVC, section 4.1).
//!
//! - **Deletion**: start from the input and replace its pixels, most attributed first, by the
//!   fill (a baseline), in steps of a fixed share of the pixels; the curve is the target's score
//!   after each step against the share removed. A map that finds what the score rests on makes
//!   it fall fast: a small area under the curve.
//! - **Insertion**: start from the fill and put the input's pixels back in the same order; a
//!   good map makes the score rise fast: a large area.
//!
//! Pixels are the positions of the model's grid (all channels of a position move together) and
//! the order is the map's signed value summed over channels, most supporting first (ties by
//! position, row by row). RISE scored the class probability; here the score is the reading's own
//! (the logits by default). The area is the trapezoid rule over the shares 0..1. The reference is
//! the same curve for seeded random orders, averaged, as RISE's paper compares maps against.

use anyhow::{Result, bail};
use ndarray::{Array2, ArrayD};
use rand::SeedableRng;
use rand::seq::SliceRandom;
use rand_chacha::ChaCha8Rng;
use serde::{Deserialize, Serialize};

use super::GridIndex;
use crate::control::Control;
use crate::methods::Scorer;
use crate::model::Model;

/// How the curves are sampled.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CurveSettings {
    /// The curve has `steps + 1` points at shares 0, 1/steps, …, 1.
    pub steps: usize,
    /// Random orders averaged for the reference.
    pub random_orders: usize,
    pub seed: u64,
    /// Side of the square patches (model-grid pixels) that move together: 1 moves single
    /// pixels, as RISE does; larger patches move as regions, ranked by the map's sum inside
    /// them (the region perturbation of Samek et al. 2017).
    pub patch: usize,
}

impl Default for CurveSettings {
    fn default() -> Self {
        CurveSettings {
            steps: super::defaults::CURVE_STEPS,
            random_orders: super::defaults::RANDOM_ORDERS,
            seed: super::defaults::SEED,
            patch: super::defaults::CURVE_PATCH,
        }
    }
}

/// One curve and its random-order reference.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Curve {
    /// Share of the pixels removed (deletion) or put back (insertion).
    pub fractions: Vec<f64>,
    /// The target's score at each share, in the map's order.
    pub scores: Vec<f64>,
    /// Area under `scores` over the shares (trapezoid rule).
    pub auc: f64,
    /// The mean over the random orders of the score at each share.
    pub random_scores: Vec<f64>,
    /// Area under `random_scores` (the mean of `random_aucs`).
    pub random_auc: f64,
    /// Each random order's area, for its spread.
    pub random_aucs: Vec<f64>,
    /// How far the map's order leads the random one, as a share of |F(x) − F(fill)|: for
    /// deletion (random_auc − auc), for insertion (auc − random_auc). Above 0 the map's order
    /// beats chance. `None` when the two scores are equal.
    pub lead: Option<f64>,
}

/// Both curves of one map with one fill.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Curves {
    /// The fill's canonical text (a baseline form).
    pub fill: String,
    /// The target's score at the input and at the fill.
    pub score_input: f64,
    pub score_fill: f64,
    pub deletion: Curve,
    pub insertion: Curve,
}

/// Trapezoid area under `ys` over `xs`.
pub fn trapezoid(xs: &[f64], ys: &[f64]) -> f64 {
    xs.windows(2).zip(ys.windows(2)).map(|(x, y)| (x[1] - x[0]) * (y[0] + y[1]) / 2.0).sum()
}

/// The square patches of side `side` tiling an h×w grid from its top-left corner (the last row
/// and column of patches may be narrower), each as its positions in row-major order; patches in
/// row-major order.
pub fn patches(h: usize, w: usize, side: usize) -> Vec<Vec<usize>> {
    let side = side.max(1);
    let mut out = vec![];
    for y0 in (0..h).step_by(side) {
        for x0 in (0..w).step_by(side) {
            out.push((y0..(y0 + side).min(h)).flat_map(|y| (x0..(x0 + side).min(w)).map(move |x| y * w + x)).collect());
        }
    }
    out
}

/// Units (patches) most supporting first by the map's sum inside them, ties by unit index;
/// returned as the order of their positions.
pub fn attribution_order(map: &Array2<f32>, units: &[Vec<usize>]) -> Vec<usize> {
    let flat: Vec<f32> = map.iter().copied().collect();
    let sums: Vec<f64> = units.iter().map(|u| u.iter().map(|&p| flat[p] as f64).sum()).collect();
    let mut order: Vec<usize> = (0..units.len()).collect();
    // Stable sort: equal sums keep row-major order.
    order.sort_by(|&a, &b| sums[b].total_cmp(&sums[a]));
    order.iter().flat_map(|&u| units[u].iter().copied()).collect()
}

/// Random order number `k` of the units under `seed` (the reference curves use k = 0..R),
/// returned as the order of their positions.
pub fn random_order(units: &[Vec<usize>], seed: u64, k: usize) -> Vec<usize> {
    shuffled(units.len(), seed, k).iter().flat_map(|&u| units[u].iter().copied()).collect()
}

/// Permutation number `k` of 0..n under `seed`.
pub fn shuffled(n: usize, seed: u64, k: usize) -> Vec<usize> {
    let mut order: Vec<usize> = (0..n).collect();
    let mut rng = ChaCha8Rng::seed_from_u64(seed.wrapping_add(k as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15));
    order.shuffle(&mut rng);
    order
}

/// How many positions of `n` are moved at each point of a curve of `steps` steps:
/// round(k·n/steps) for k = 0..=steps.
pub fn counts(n: usize, steps: usize) -> Vec<usize> {
    (0..=steps).map(|k| ((k as f64 * n as f64 / steps as f64).round() as usize).min(n)).collect()
}

/// Deletion and insertion curves of `map` (on the model grid of `x`, spatial axes `spatial`)
/// with `fill` (a model-input tensor) for the scorer's target. Progress: one unit per forward.
#[allow(clippy::too_many_arguments)]
pub fn curves(
    model: &Model,
    scorer: &Scorer,
    x: &ArrayD<f32>,
    fill: &ArrayD<f32>,
    fill_label: &str,
    spatial: [usize; 2],
    map: &Array2<f32>,
    settings: &CurveSettings,
    ctl: &Control,
) -> Result<Curves> {
    let grid = (x.shape()[spatial[0]], x.shape()[spatial[1]]);
    if map.dim() != grid {
        bail!("the map is {:?} but the model grid is {:?}; curves need the map on the model's grid", map.dim(), grid);
    }
    if settings.steps == 0 {
        bail!("curves need at least one step");
    }
    if fill.shape() != x.shape() {
        bail!("the fill has shape {:?}, the input {:?}", fill.shape(), x.shape());
    }
    let n = grid.0 * grid.1;
    let index = GridIndex::new(x.shape(), spatial);
    let units = patches(grid.0, grid.1, settings.patch);
    let mut orders = vec![attribution_order(map, &units)];
    orders.extend((0..settings.random_orders).map(|k| random_order(&units, settings.seed, k)));
    let counts = counts(n, settings.steps);
    let inner = &counts[1..settings.steps];
    ctl.begin(2 + (orders.len() * inner.len() * 2) as u64);
    let ends = model.forward_many(&[x.clone(), fill.clone()], scorer.tap, ctl)?;
    let (fx, fb) = (scorer.score(&ends[0]) as f64, scorer.score(&ends[1]) as f64);
    // For each order and direction, the scores at the inner points; built and run a few at a
    // time to bound memory.
    let mut runs: Vec<Vec<f64>> = vec![];
    for order in &orders {
        for deleting in [true, false] {
            let mut scores = vec![if deleting { fx } else { fb }];
            for chunk in inner.chunks(16) {
                ctl.check()?;
                let xs: Vec<ArrayD<f32>> = chunk
                    .iter()
                    .map(|&c| {
                        // Share of x kept at each position: deletion keeps all but the first c,
                        // insertion only the first c.
                        let mut keep = vec![if deleting { 1.0f32 } else { 0.0 }; n];
                        for &p in &order[..c] {
                            keep[p] = if deleting { 0.0 } else { 1.0 };
                        }
                        index.blend(x, fill, &keep)
                    })
                    .collect();
                scores.extend(model.forward_many(&xs, scorer.tap, ctl)?.iter().map(|v| scorer.score(v) as f64));
            }
            scores.push(if deleting { fb } else { fx });
            runs.push(scores);
        }
    }
    let fractions: Vec<f64> = counts.iter().map(|&c| c as f64 / n as f64).collect();
    let diff = fx - fb;
    let curve = |direction: usize| -> Curve {
        let scores = runs[direction].clone();
        let random: Vec<&Vec<f64>> = runs.iter().skip(2 + direction).step_by(2).collect();
        let r = random.len().max(1) as f64;
        let random_scores: Vec<f64> = (0..fractions.len()).map(|k| random.iter().map(|s| s[k]).sum::<f64>() / r).collect();
        let random_aucs: Vec<f64> = random.iter().map(|s| trapezoid(&fractions, s)).collect();
        let auc = trapezoid(&fractions, &scores);
        let random_auc = trapezoid(&fractions, &random_scores);
        let ahead = if direction == 0 { random_auc - auc } else { auc - random_auc };
        let lead = (diff.abs() > 1e-12 && !random.is_empty()).then(|| ahead / diff.abs());
        Curve { fractions: fractions.clone(), scores, auc, random_scores, random_auc, random_aucs, lead }
    };
    Ok(Curves { fill: fill_label.to_string(), score_input: fx, score_fill: fb, deletion: curve(0), insertion: curve(1) })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn trapezoid_is_exact_on_lines() {
        // ∫₀¹ (2 − 3t) dt = 2 − 3/2 = 0.5.
        let xs: Vec<f64> = (0..=4).map(|k| k as f64 / 4.0).collect();
        let ys: Vec<f64> = xs.iter().map(|t| 2.0 - 3.0 * t).collect();
        assert!((trapezoid(&xs, &ys) - 0.5).abs() < 1e-15);
    }

    #[test]
    fn orders_and_counts() {
        let m = ndarray::array![[0.5f32, -1.0], [2.0, 0.5]];
        // 2.0 first, then the two 0.5s in row-major order, then −1.
        assert_eq!(attribution_order(&m, &patches(2, 2, 1)), vec![2, 0, 3, 1]);
        let singles = patches(2, 5, 1);
        let r = random_order(&singles, 3, 1);
        let mut s = r.clone();
        s.sort();
        assert_eq!(s, (0..10).collect::<Vec<_>>());
        assert_eq!(r, random_order(&singles, 3, 1), "seeded");
        assert_ne!(r, random_order(&singles, 3, 2));
        // 2-pixel patches of a 3×3 grid holding 0..9: units [0,1,3,4], [2,5], [6,7], [8] with
        // sums 8, 7, 13, 8: unit 2 first, then the two 8s in unit order (0, then 3), then 7.
        let g = Array2::from_shape_vec((3, 3), (0..9).map(|v| v as f32).collect()).unwrap();
        let u = patches(3, 3, 2);
        assert_eq!(u, vec![vec![0, 1, 3, 4], vec![2, 5], vec![6, 7], vec![8]]);
        assert_eq!(attribution_order(&g, &u), vec![6, 7, 0, 1, 3, 4, 8, 2, 5]);
        assert_eq!(counts(10, 4), vec![0, 3, 5, 8, 10]); // 2.5 and 7.5 round away from zero
    }
}
