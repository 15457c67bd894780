//! Hand-worked figures on small arrays. The definitions:
//! - mark share and lift: spurion's vocabulary (../shared/VOCABULARY.md beside the repo): share of the
//!   supporting attribution inside the region; share / (region area / image area).
//! - relevance mass accuracy = R_within / R_total, and relevance rank accuracy =
//!   |top-K pixels ∩ ground truth| / K with K = |ground truth|: Arras, Osman, Samek (2022),
//!   "CLEVR-XAI: a benchmark dataset for the ground truth evaluation of neural network
//!   explanations", Information Fusion (definitions recalled from memory; positive relevance).
//! - pointing game: a hit when the map's maximum falls in the ground-truth region, optionally
//!   within a tolerance: Zhang et al. (2018), "Top-down neural attention by excitation
//!   backprop", IJCV (their 15-pixel tolerance recalled from memory, not checked).

use ndarray::{Array2, array};
use spurion::sign::Sign;
use spurion::regions::figures::{
    figures, lift, mark_share, pointing_hit, relevance_mass_accuracy, relevance_rank_accuracy,
};

fn close(a: Option<f64>, b: f64) -> bool {
    a.is_some_and(|a| (a - b).abs() < 1e-12)
}

/// map:            mask:
///  1  -2   3       #  .  .
///  0   4  -1       .  #  .
fn example() -> (Array2<f32>, Array2<bool>) {
    (array![[1.0, -2.0, 3.0], [0.0, 4.0, -1.0]], array![[true, false, false], [false, true, false]])
}

#[test]
fn mark_share_and_lift_by_part() {
    let (map, mask) = example();
    // Supporting: positives 1, 3, 4 sum to 8; inside the mask 1 + 4 = 5 → share 5/8 = 0.625.
    // Area share 2/6 = 1/3 → lift 0.625 · 3 = 1.875.
    assert!(close(mark_share(&map, &mask, Sign::Supporting).unwrap(), 0.625));
    assert!(close(lift(&map, &mask, Sign::Supporting).unwrap(), 1.875));
    // Opposing: magnitudes of the negatives 2 and 1 sum to 3; none lies in the mask → 0, lift 0.
    assert!(close(mark_share(&map, &mask, Sign::Opposing).unwrap(), 0.0));
    assert!(close(lift(&map, &mask, Sign::Opposing).unwrap(), 0.0));
    // Magnitude: 1+2+3+0+4+1 = 11; inside 5 → 5/11; lift 15/11.
    assert!(close(mark_share(&map, &mask, Sign::Magnitude).unwrap(), 5.0 / 11.0));
    assert!(close(lift(&map, &mask, Sign::Magnitude).unwrap(), 15.0 / 11.0));
    // Both (signed): total 1−2+3+0+4−1 = 5; inside 1+4 = 5 → 1; lift 3.
    assert!(close(mark_share(&map, &mask, Sign::Both).unwrap(), 1.0));
    assert!(close(lift(&map, &mask, Sign::Both).unwrap(), 3.0));
}

#[test]
fn relevance_mass_accuracy_hand_worked() {
    let (map, mask) = example();
    // Arras et al. 2022: R_within / R_total on positive relevance = 5 / 8.
    assert!(close(relevance_mass_accuracy(&map, &mask, Sign::Supporting).unwrap(), 0.625));
    // A map whose whole support lies in the mask scores 1.
    let inside = array![[2.0f32, -1.0, 0.0], [0.0, 6.0, -3.0]];
    assert!(close(relevance_mass_accuracy(&inside, &mask, Sign::Supporting).unwrap(), 1.0));
}

#[test]
fn relevance_rank_accuracy_hand_worked() {
    let (map, mask) = example();
    // K = 2 mask pixels. Top-2 supporting pixels: 4 at (1,1) and 3 at (0,2); only (1,1) is in
    // the mask → 1/2.
    assert!(close(relevance_rank_accuracy(&map, &mask, Sign::Supporting).unwrap(), 0.5));
    // Opposing: ranked pixels 2 at (0,1) and 1 at (1,2), neither in the mask → 0.
    assert!(close(relevance_rank_accuracy(&map, &mask, Sign::Opposing).unwrap(), 0.0));
    // 3×3 map, mask of 3 pixels (the middle row). Supporting values ranked: 9 (1,1), 8 (1,0),
    // 7 (0,0), ...; top-3 = (1,1), (1,0), (0,0): two in the mask → 2/3.
    let m3 = array![[7.0f32, 1.0, 2.0], [8.0, 9.0, 0.5], [3.0, 0.0, -5.0]];
    let row = array![[false, false, false], [true, true, true], [false, false, false]];
    assert!(close(relevance_rank_accuracy(&m3, &row, Sign::Supporting).unwrap(), 2.0 / 3.0));
    // Ties go by raster order (the paper leaves them open): four equal values, K = 1, the first
    // pixel (0,0) is taken, and it is not the masked (0,1) → 0.
    let flat = array![[1.0f32, 1.0], [1.0, 1.0]];
    let one = array![[false, true], [false, false]];
    assert!(close(relevance_rank_accuracy(&flat, &one, Sign::Supporting).unwrap(), 0.0));
}

#[test]
fn pointing_game_hand_worked() {
    let (map, mask) = example();
    // Supporting maximum 4 at (1,1), inside the mask → hit.
    assert_eq!(pointing_hit(&map, &mask, Sign::Supporting, 0.0).unwrap(), Some(true));
    // Opposing maximum 2 at (0,1): not in the mask → miss at tolerance 0; the masked (0,0) is
    // 1 px away, so a 1-px tolerance makes it a hit (Zhang et al. allow a tolerance).
    assert_eq!(pointing_hit(&map, &mask, Sign::Opposing, 0.0).unwrap(), Some(false));
    assert_eq!(pointing_hit(&map, &mask, Sign::Opposing, 1.0).unwrap(), Some(true));
    // (1,2) to the nearest mask pixel (1,1) is 1 px; to (0,0) √5. A map peaking at (1,2) hits at
    // tolerance 1 but not 0.9.
    let right = array![[0.0f32, 0.0, 0.0], [0.0, 0.0, 5.0]];
    assert_eq!(pointing_hit(&right, &mask, Sign::Supporting, 0.9).unwrap(), Some(false));
    assert_eq!(pointing_hit(&right, &mask, Sign::Supporting, 1.0).unwrap(), Some(true));
}

#[test]
fn undefined_figures_and_bad_input() {
    let (_, mask) = example();
    let zero = Array2::<f32>::zeros((2, 3));
    // No support anywhere: every share is undefined, and there is no maximum to point with.
    let f = figures(&zero, &mask, Sign::Supporting, 0.0).unwrap();
    assert_eq!((f.mark_share, f.lift, f.relevance_rank_accuracy, f.pointing_hit), (None, None, None, None));
    assert!(close(Some(f.area_fraction), 1.0 / 3.0));
    // Map and mask on different grids is an error that says so, not a panic.
    let err = mark_share(&Array2::zeros((3, 3)), &mask, Sign::Supporting).unwrap_err();
    assert!(err.to_string().contains("image grid"), "{err}");
    let mut nan = Array2::<f32>::zeros((2, 3));
    nan[(0, 0)] = f32::NAN;
    assert!(mark_share(&nan, &mask, Sign::Supporting).is_err());
}

#[test]
fn all_figures_at_once_agree_with_the_single_ones() {
    let (map, mask) = example();
    let f = figures(&map, &mask, Sign::Supporting, 0.0).unwrap();
    assert!(close(f.mark_share, 0.625) && close(f.lift, 1.875));
    assert!(close(f.relevance_mass_accuracy, 0.625) && close(f.relevance_rank_accuracy, 0.5));
    assert_eq!(f.pointing_hit, Some(true));
}
