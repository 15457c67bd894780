//! How far two maps of the same image agree, and the rank figures the slide view shows.
//!
//! Pure functions over `Array2<f32>` maps on one grid. The baseline strip's agreement matrix and
//! the slide view's contour, reveal and hover percentile all come from here, so the GUI draws
//! numbers it did not compute.
//!
//! - Spearman's rank correlation: the Pearson correlation of the two maps' ranks, ties given the
//!   mean of the ranks they span (textbook definition, common practice).
//! - Top-k % overlap: the share of one map's top-k % pixels that are also among the other's.
//!   Both sets have the same size, so the figure is symmetric. Ties at the cut are broken by pixel
//!   order (row-major), so the set always holds exactly k pixels.

use ndarray::Array2;
use serde::{Deserialize, Serialize};

use crate::sign::Sign;

/// The map seen through `sign` (same grid): supporting max(v, 0), opposing max(−v, 0), both v,
/// magnitude |v|.
pub fn view(map: &Array2<f32>, sign: Sign) -> Array2<f32> {
    map.mapv(|v| sign.apply(v))
}

/// Ranks 1..=n of `values`, ties sharing the mean of their ranks. NaN sorts last.
pub fn ranks(values: &[f32]) -> Vec<f64> {
    let n = values.len();
    let mut order: Vec<usize> = (0..n).collect();
    order.sort_by(|&a, &b| values[a].total_cmp(&values[b]));
    let mut out = vec![0.0; n];
    let mut i = 0;
    while i < n {
        let mut j = i + 1;
        while j < n && values[order[j]] == values[order[i]] {
            j += 1;
        }
        // Positions i..j (0-based) hold ranks i+1..=j; their mean is (i+1+j)/2.
        let r = (i + 1 + j) as f64 / 2.0;
        for &k in &order[i..j] {
            out[k] = r;
        }
        i = j;
    }
    out
}

fn pearson(a: &[f64], b: &[f64]) -> Option<f64> {
    let n = a.len() as f64;
    let (ma, mb) = (a.iter().sum::<f64>() / n, b.iter().sum::<f64>() / n);
    let (mut sab, mut saa, mut sbb) = (0.0, 0.0, 0.0);
    for (x, y) in a.iter().zip(b) {
        let (dx, dy) = (x - ma, y - mb);
        sab += dx * dy;
        saa += dx * dx;
        sbb += dy * dy;
    }
    // A constant map has no ranking to compare: say so instead of returning NaN.
    if saa == 0.0 || sbb == 0.0 { None } else { Some(sab / (saa * sbb).sqrt()) }
}

/// Spearman's rank correlation of two maps on the same grid; `None` if the grids differ, the maps
/// are empty or either map is constant.
pub fn spearman(a: &Array2<f32>, b: &Array2<f32>) -> Option<f64> {
    if a.dim() != b.dim() || a.is_empty() {
        return None;
    }
    let ra = ranks(&a.iter().copied().collect::<Vec<_>>());
    let rb = ranks(&b.iter().copied().collect::<Vec<_>>());
    pearson(&ra, &rb)
}

/// Number of pixels in the top `share` (0..=1) of `n`: ceil(share·n), at least 1 when share > 0.
pub fn top_count(n: usize, share: f64) -> usize {
    if share <= 0.0 || n == 0 {
        return 0;
    }
    ((share * n as f64).ceil() as usize).clamp(1, n)
}

/// The top `share` of pixels by value: exactly `top_count` of them, ties at the cut broken by
/// row-major pixel order.
pub fn top_mask(map: &Array2<f32>, share: f64) -> Array2<bool> {
    let flat: Vec<f32> = map.iter().copied().collect();
    let k = top_count(flat.len(), share);
    let mut order: Vec<usize> = (0..flat.len()).collect();
    // Descending by value, ascending by index among equals (sort is stable).
    order.sort_by(|&a, &b| flat[b].total_cmp(&flat[a]));
    let mut mask = vec![false; flat.len()];
    for &i in &order[..k] {
        mask[i] = true;
    }
    Array2::from_shape_vec(map.dim(), mask).expect("same number of pixels")
}

/// Share of map `a`'s top-`share` pixels that are also among map `b`'s (0..=1); `None` if the
/// grids differ or the share selects no pixel.
pub fn top_overlap(a: &Array2<f32>, b: &Array2<f32>, share: f64) -> Option<f64> {
    if a.dim() != b.dim() {
        return None;
    }
    overlap_of_masks(&top_mask(a, share), &top_mask(b, share))
}

fn overlap_of_masks(ma: &Array2<bool>, mb: &Array2<bool>) -> Option<f64> {
    let k = ma.iter().filter(|&&m| m).count();
    if k == 0 {
        return None;
    }
    let both = ma.iter().zip(mb.iter()).filter(|(x, y)| **x && **y).count();
    Some(both as f64 / k as f64)
}

/// Pairwise agreement of several maps (the baseline strip's matrix).
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct Agreement {
    /// The sign the maps were viewed through before ranking.
    pub sign: Sign,
    /// The top share used for `overlap` (e.g. 0.1 for the top 10 %).
    pub share: f64,
    /// `spearman[i][j]`, symmetric, 1 on the diagonal (`None` where a map is constant).
    pub spearman: Vec<Vec<Option<f64>>>,
    /// `overlap[i][j]`, symmetric, 1 on the diagonal.
    pub overlap: Vec<Vec<Option<f64>>>,
}

/// Agreement of every pair among `maps` seen through `sign`, the ranks and top sets computed once
/// per map. Pairs on different grids get `None`.
pub fn agreement(maps: &[&Array2<f32>], sign: Sign, share: f64) -> Agreement {
    let views: Vec<Array2<f32>> = maps.iter().map(|m| view(m, sign)).collect();
    let ranked: Vec<Vec<f64>> = views.iter().map(|v| ranks(&v.iter().copied().collect::<Vec<_>>())).collect();
    let tops: Vec<Array2<bool>> = views.iter().map(|v| top_mask(v, share)).collect();
    let n = maps.len();
    let mut spearman = vec![vec![None; n]; n];
    let mut overlap = vec![vec![None; n]; n];
    for i in 0..n {
        for j in i..n {
            if views[i].dim() != views[j].dim() {
                continue;
            }
            let s = pearson(&ranked[i], &ranked[j]);
            let o = overlap_of_masks(&tops[i], &tops[j]);
            spearman[i][j] = s;
            spearman[j][i] = s;
            overlap[i][j] = o;
            overlap[j][i] = o;
        }
    }
    Agreement { sign, share, spearman, overlap }
}

/// A map's values sorted once, for percentiles of single pixels (the hover readout) and the
/// value at a quantile (colour scale ends).
#[derive(Clone, Debug)]
pub struct Spread {
    sorted: Vec<f32>,
}

impl Spread {
    pub fn of(map: &Array2<f32>) -> Spread {
        let mut sorted: Vec<f32> = map.iter().copied().filter(|v| v.is_finite()).collect();
        sorted.sort_by(f32::total_cmp);
        Spread { sorted }
    }

    /// Percent of pixels whose value is at most `v` (0..=100).
    pub fn percentile_of(&self, v: f32) -> f64 {
        if self.sorted.is_empty() {
            return 0.0;
        }
        let at_most = self.sorted.partition_point(|&s| s <= v);
        100.0 * at_most as f64 / self.sorted.len() as f64
    }

    /// The value at quantile `q` (0..=1), nearest-rank: the smallest value with at least q·n
    /// values at or below it. `None` for an empty map.
    pub fn quantile(&self, q: f64) -> Option<f32> {
        let n = self.sorted.len();
        if n == 0 {
            return None;
        }
        let rank = ((q.clamp(0.0, 1.0) * n as f64).ceil() as usize).clamp(1, n);
        Some(self.sorted[rank - 1])
    }

    pub fn min(&self) -> Option<f32> {
        self.sorted.first().copied()
    }
    pub fn max(&self) -> Option<f32> {
        self.sorted.last().copied()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn ranks_share_ties() {
        // Hand-worked: values 10, 20, 20, 5 → 5 gets rank 1, 10 rank 2, the two 20s share (3+4)/2.
        assert_eq!(ranks(&[10.0, 20.0, 20.0, 5.0]), vec![2.0, 3.5, 3.5, 1.0]);
    }

    #[test]
    fn spearman_hand_worked() {
        // Same order → 1; reversed order → −1.
        let a = array![[1.0f32, 2.0], [3.0, 4.0]];
        let b = array![[10.0f32, 20.0], [30.0, 400.0]];
        let c = array![[4.0f32, 3.0], [2.0, 1.0]];
        assert!((spearman(&a, &b).unwrap() - 1.0).abs() < 1e-12);
        assert!((spearman(&a, &c).unwrap() + 1.0).abs() < 1e-12);
        // Without ties ρ = 1 − 6Σd²/(n(n²−1)). a ranks 1 2 3 4 5, d ranks 2 1 4 3 5:
        // d = −1, 1, −1, 1, 0, Σd² = 4, ρ = 1 − 24/120 = 0.8.
        let a = array![[1.0f32, 2.0, 3.0, 4.0, 5.0]];
        let d = array![[0.2f32, 0.1, 0.4, 0.3, 0.5]];
        assert!((spearman(&a, &d).unwrap() - 0.8).abs() < 1e-12);
    }

    #[test]
    fn spearman_with_ties_hand_worked() {
        // a = 1 2 3 4 → ranks 1 2 3 4 (mean 2.5); b = 0 0 1 1 → ranks 1.5 1.5 3.5 3.5 (mean 2.5).
        // Deviations: a −1.5 −0.5 0.5 1.5; b −1 −1 1 1. Σab = 1.5+0.5+0.5+1.5 = 4,
        // Σa² = 5, Σb² = 4, ρ = 4 / sqrt(20) = 0.894427…
        let a = array![[1.0f32, 2.0, 3.0, 4.0]];
        let b = array![[0.0f32, 0.0, 1.0, 1.0]];
        assert!((spearman(&a, &b).unwrap() - 4.0 / 20f64.sqrt()).abs() < 1e-12);
    }

    #[test]
    fn spearman_refuses_constant_and_mismatched_maps() {
        let a = array![[1.0f32, 2.0], [3.0, 4.0]];
        assert_eq!(spearman(&a, &Array2::zeros((2, 2))), None);
        assert_eq!(spearman(&a, &Array2::zeros((1, 4))), None);
    }

    #[test]
    fn top_overlap_hand_worked() {
        // 10 pixels, top 20 % = 2 pixels. a's top two: indices 9, 8. b's: 9, 0. Shared: 1 → 0.5.
        let a = Array2::from_shape_vec((2, 5), (0..10).map(|i| i as f32).collect()).unwrap();
        let mut bv: Vec<f32> = (0..10).map(|i| i as f32).collect();
        bv[0] = 100.0;
        let b = Array2::from_shape_vec((2, 5), bv).unwrap();
        assert_eq!(top_count(10, 0.2), 2);
        assert_eq!(top_overlap(&a, &b, 0.2), Some(0.5));
        assert_eq!(top_overlap(&a, &a, 0.2), Some(1.0));
        // 5 % of 10 pixels rounds up to one pixel, not zero.
        assert_eq!(top_count(10, 0.05), 1);
    }

    #[test]
    fn top_mask_breaks_ties_by_pixel_order() {
        let m = array![[1.0f32, 1.0, 1.0, 0.0]];
        assert_eq!(top_mask(&m, 0.5), array![[true, true, false, false]]);
    }

    #[test]
    fn sign_views() {
        let m = array![[-2.0f32, 3.0]];
        assert_eq!(view(&m, Sign::Supporting), array![[0.0, 3.0]]);
        assert_eq!(view(&m, Sign::Opposing), array![[2.0, 0.0]]);
        assert_eq!(view(&m, Sign::Both), m);
        assert_eq!(view(&m, Sign::Magnitude), array![[2.0, 3.0]]);
    }

    #[test]
    fn agreement_matrix_matches_pairwise_figures() {
        let a = array![[1.0f32, -2.0, 3.0, 0.5], [0.0, 4.0, -1.0, 2.0]];
        let b = array![[2.0f32, 1.0, -3.0, 0.5], [1.0, 3.0, 1.5, 2.5]];
        let c = array![[0.0f32, 0.0, 0.0, 1.0], [0.0, 0.0, 2.0, 0.0]];
        let ag = agreement(&[&a, &b, &c], Sign::Magnitude, 0.25);
        for (i, x) in [&a, &b, &c].iter().enumerate() {
            for (j, y) in [&a, &b, &c].iter().enumerate() {
                let (vx, vy) = (view(x, Sign::Magnitude), view(y, Sign::Magnitude));
                assert_eq!(ag.spearman[i][j], spearman(&vx, &vy));
                assert_eq!(ag.overlap[i][j], top_overlap(&vx, &vy, 0.25));
            }
        }
        assert_eq!(ag.overlap[0][0], Some(1.0));
    }

    #[test]
    fn spread_percentiles_and_quantiles() {
        let m = array![[4.0f32, 1.0], [3.0, 2.0]];
        let s = Spread::of(&m);
        // Two of four values are ≤ 2 → 50th percentile; everything ≤ 4 → 100.
        assert_eq!(s.percentile_of(2.0), 50.0);
        assert_eq!(s.percentile_of(4.0), 100.0);
        assert_eq!(s.percentile_of(0.0), 0.0);
        // Nearest rank: q = 0.5 of 4 → rank 2 → value 2; q = 0.99 → rank 4 → value 4.
        assert_eq!(s.quantile(0.5), Some(2.0));
        assert_eq!(s.quantile(0.99), Some(4.0));
        assert_eq!(s.quantile(0.0), Some(1.0));
    }
}
