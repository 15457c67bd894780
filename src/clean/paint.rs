//! Painting regions out of stored pixel values: the fills removal uses
//! ([`crate::regions::paint_out_all`]: edge-carry for border bands, then harmonic for every other
//! region), run on the file's own sample values (not on the windowed picture), rounded and
//! clamped to what the file can store. Only pixels under a region get a new value, so every
//! other sample keeps its bits.

use ndarray::{Array2, Array3};

use crate::regions::{Region, paint_out_all};

/// One frame's samples after painting.
pub struct Painted {
    /// The new value of every sample under the regions, as (sample index, value); samples
    /// elsewhere are untouched.
    pub changes: Vec<(usize, i64)>,
    /// Pixels under the regions (each counted once, whatever the samples per pixel).
    pub painted: usize,
    /// Of those, pixels where at least one sample's value changed.
    pub changed: usize,
    /// The fills used, e.g. "edge-carry then harmonic".
    pub fill: String,
}

/// The union of the regions' masks.
pub fn union_mask(regions: &[Region], h: usize, w: usize) -> Array2<bool> {
    let mut m = Array2::from_elem((h, w), false);
    for r in regions {
        m.zip_mut_with(&r.mask, |a, &b| *a |= b);
    }
    m
}

/// Paints `regions` out of `values` (H×W×C samples, interleaved), whose samples may hold
/// `low..=high`.
pub fn paint(values: &[i64], h: usize, w: usize, c: usize, regions: &[Region], (low, high): (i64, i64)) -> Painted {
    assert_eq!(values.len(), h * w * c, "samples and grid agree");
    let px = Array3::from_shape_fn((h, w, c), |(y, x, k)| values[(y * w + x) * c + k] as f32);
    let (out, fill) = paint_out_all(&px, regions);
    let mask = union_mask(regions, h, w);
    let mut changes = vec![];
    let (mut painted, mut changed) = (0, 0);
    for ((y, x), &m) in mask.indexed_iter() {
        if !m {
            continue;
        }
        painted += 1;
        let mut any = false;
        for k in 0..c {
            let i = (y * w + x) * c + k;
            let v = (out[[y, x, k]].round() as i64).clamp(low, high);
            any |= v != values[i];
            changes.push((i, v));
        }
        changed += any as usize;
    }
    Painted { changes, painted, changed, fill }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::regions::RegionKind;

    #[test]
    fn only_samples_under_the_region_change_and_they_stay_in_range() {
        let (h, w) = (12, 10);
        let mut v: Vec<i64> = (0..h * w).map(|i| 100 + (i % 7) as i64).collect();
        let mask = Array2::from_shape_fn((h, w), |(y, x)| (3..6).contains(&y) && (4..8).contains(&x));
        for ((y, x), &m) in mask.indexed_iter() {
            if m {
                v[y * w + x] = 4095;
            }
        }
        let r = Region::from_mask(RegionKind::BurnedInMark, mask.clone(), 1.0, "tag", "test").unwrap();
        let p = paint(&v, h, w, 1, &[r], (0, 4095));
        assert_eq!(p.painted, 12);
        assert_eq!(p.changed, 12);
        assert_eq!(p.fill, "harmonic");
        for (i, val) in &p.changes {
            assert!(mask[[i / w, i % w]], "sample {i} is outside the region");
            assert!((100..=106).contains(val), "filled from the surroundings: {val}");
        }
    }
}
