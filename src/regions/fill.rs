//! Painting a region out: the region's pixels replaced by a fill that imitates its
//! surroundings, so that a forward pass can show what the model makes of the image without it
//! (the counterfactual removal of `methods::removal`).
//!
//! - **harmonic** (marks): each painted pixel becomes the mean of its four neighbours while the
//!   pixels around the region stay as they are — the discrete Laplace equation with the
//!   surroundings as Dirichlet boundary, the smoothest fill that meets them. Harmonic (Laplace)
//!   fill from a region's boundary is a published way to paint a region out (REFERENCES:
//!   Bertalmio et al. 2000, "Image Inpainting", and harmonic fill); solved here by conjugate
//!   gradients, which suit this symmetric positive definite system (common practice).
//! - **edge-carry** (border bands): the content just inside the band carried outward ring by
//!   ring, each painted pixel the mean of its already-known four neighbours, so a frame or a
//!   padding margin takes the values of the image next to it.
//!
//! Both work per channel on H×W×C pixels in 0..1 and leave every pixel outside the mask alone.

use ndarray::{Array2, Array3, Axis};
use serde::{Deserialize, Serialize};

use super::{Region, RegionKind};

/// How a region is painted out.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Fill {
    /// Harmonic (Laplace) fill from the region's boundary.
    Harmonic,
    /// The content next to the region carried outward, ring by ring.
    EdgeCarry,
}

impl Fill {
    /// The fill a region of this kind gets: bands lie on the image edge, where a harmonic fill
    /// has boundary on one side only, so they carry the inner content outward instead.
    pub fn for_kind(kind: RegionKind) -> Fill {
        match kind {
            RegionKind::BorderBand => Fill::EdgeCarry,
            _ => Fill::Harmonic,
        }
    }

    pub fn name(self) -> &'static str {
        match self {
            Fill::Harmonic => "harmonic",
            Fill::EdgeCarry => "edge-carry",
        }
    }
}

/// `pixels` with the pixels under `mask` painted out by `fill`.
pub fn paint_out(pixels: &Array3<f32>, mask: &Array2<bool>, fill: Fill) -> Array3<f32> {
    let (h, w, _) = pixels.dim();
    assert_eq!(mask.dim(), (h, w), "mask and pixels share a grid");
    let on: Vec<bool> = mask.iter().copied().collect();
    let mut out = pixels.clone();
    for mut plane in out.axis_iter_mut(Axis(2)) {
        let mut v: Vec<f32> = plane.iter().copied().collect();
        match fill {
            Fill::Harmonic => harmonic(h, w, &mut v, &on),
            Fill::EdgeCarry => edge_carry(h, w, &mut v, &on),
        }
        for (dst, src) in plane.iter_mut().zip(v) {
            *dst = src;
        }
    }
    out
}

/// All `regions` painted out together (each by its removal mask, grown when the finder grew
/// it): the border bands first (edge-carry from the content inside), then every other region
/// (harmonic, from surroundings that no longer hold a band).
/// Returns the pixels and the name of what was used.
pub fn paint_out_all(pixels: &Array3<f32>, regions: &[Region]) -> (Array3<f32>, String) {
    let (h, w, _) = pixels.dim();
    let mut out = pixels.clone();
    let mut used = vec![];
    for fill in [Fill::EdgeCarry, Fill::Harmonic] {
        let mut mask = Array2::from_elem((h, w), false);
        let mut any = false;
        for r in regions.iter().filter(|r| Fill::for_kind(r.kind) == fill) {
            mask.zip_mut_with(r.removal_mask(), |m, &x| *m |= x);
            any = true;
        }
        if any {
            out = paint_out(&out, &mask, fill);
            used.push(fill.name());
        }
    }
    (out, used.join(" then "))
}

/// The in-image 4-neighbours of pixel `p`.
fn neighbours(h: usize, w: usize, p: usize) -> impl Iterator<Item = usize> {
    let (y, x) = (p / w, p % w);
    [(y > 0).then(|| p - w), (y + 1 < h).then(|| p + w), (x > 0).then(|| p - 1), (x + 1 < w).then(|| p + 1)]
        .into_iter()
        .flatten()
}

fn edge_carry(h: usize, w: usize, v: &mut [f32], on: &[bool]) {
    let mut known: Vec<bool> = on.iter().map(|m| !m).collect();
    let mut ring: Vec<usize> = (0..h * w).filter(|&p| on[p] && neighbours(h, w, p).any(|q| known[q])).collect();
    while !ring.is_empty() {
        // Values of this ring come only from pixels known before it, so the order within a ring
        // does not matter.
        let vals: Vec<f32> = ring
            .iter()
            .map(|&p| {
                let (s, n) = neighbours(h, w, p).filter(|&q| known[q]).fold((0f32, 0u32), |(s, n), q| (s + v[q], n + 1));
                s / n as f32
            })
            .collect();
        for (&p, val) in ring.iter().zip(vals) {
            v[p] = val;
            known[p] = true;
        }
        let mut next: Vec<usize> = ring.iter().flat_map(|&p| neighbours(h, w, p)).filter(|&q| on[q] && !known[q]).collect();
        next.sort_unstable();
        next.dedup();
        ring = next;
    }
}

fn harmonic(h: usize, w: usize, v: &mut [f32], on: &[bool]) {
    let unknown: Vec<usize> = (0..h * w).filter(|&p| on[p]).collect();
    if unknown.is_empty() {
        return;
    }
    let mut index = vec![usize::MAX; h * w];
    for (i, &p) in unknown.iter().enumerate() {
        index[p] = i;
    }
    // A part of the mask that touches no unmasked pixel has no boundary to take values from:
    // it gets the mean of the image outside the mask (or is left alone if there is none).
    let reached = reaches_boundary(h, w, on, &unknown);
    let outside: Vec<f32> = (0..h * w).filter(|&p| !on[p]).map(|p| v[p]).collect();
    let outside_mean = (!outside.is_empty()).then(|| outside.iter().sum::<f32>() / outside.len() as f32);
    let free: Vec<bool> = unknown.iter().map(|&p| reached[p]).collect();
    if let Some(m) = outside_mean {
        for (i, &p) in unknown.iter().enumerate() {
            if !free[i] {
                v[p] = m;
            }
        }
    }
    // A u = b with A = degree − adjacency among the free unknowns; b = the fixed neighbours.
    let n = unknown.len();
    let apply = |u: &[f64], out: &mut [f64]| {
        for (i, &p) in unknown.iter().enumerate() {
            if !free[i] {
                out[i] = 0.0;
                continue;
            }
            let mut s = 0.0;
            let mut deg = 0.0;
            for q in neighbours(h, w, p) {
                deg += 1.0;
                let j = index[q];
                if j != usize::MAX && free[j] {
                    s += u[j];
                }
            }
            out[i] = deg * u[i] - s;
        }
    };
    let mut b = vec![0f64; n];
    for (i, &p) in unknown.iter().enumerate() {
        if free[i] {
            b[i] = neighbours(h, w, p).filter(|&q| index[q] == usize::MAX || !free[index[q]]).map(|q| v[q] as f64).sum();
        }
    }
    let u = conjugate_gradients(&apply, &b, n);
    for (i, &p) in unknown.iter().enumerate() {
        if free[i] {
            v[p] = u[i] as f32;
        }
    }
}

/// For each pixel, whether it is a masked pixel connected (4-neighbourhood, through the mask)
/// to an unmasked pixel.
fn reaches_boundary(h: usize, w: usize, on: &[bool], unknown: &[usize]) -> Vec<bool> {
    let mut reached = vec![false; h * w];
    let mut stack: Vec<usize> =
        unknown.iter().copied().filter(|&p| neighbours(h, w, p).any(|q| !on[q])).collect();
    for &p in &stack {
        reached[p] = true;
    }
    while let Some(p) = stack.pop() {
        for q in neighbours(h, w, p) {
            if on[q] && !reached[q] {
                reached[q] = true;
                stack.push(q);
            }
        }
    }
    reached
}

/// Solves A u = b for a symmetric positive definite A given as `apply` (rows of A with no
/// equation return 0 and are left at 0), to a relative residual of 1e-7.
fn conjugate_gradients(apply: &dyn Fn(&[f64], &mut [f64]), b: &[f64], n: usize) -> Vec<f64> {
    let mut u = vec![0f64; n];
    let mut r = b.to_vec();
    let mut p = r.clone();
    let mut ap = vec![0f64; n];
    let dot = |a: &[f64], b: &[f64]| a.iter().zip(b).map(|(x, y)| x * y).sum::<f64>();
    let mut rr = dot(&r, &r);
    let stop = 1e-14 * dot(b, b).max(1e-300);
    for _ in 0..(4 * n + 100) {
        if rr <= stop {
            break;
        }
        apply(&p, &mut ap);
        let pap = dot(&p, &ap);
        if pap <= 0.0 {
            break;
        }
        let alpha = rr / pap;
        for i in 0..n {
            u[i] += alpha * p[i];
            r[i] -= alpha * ap[i];
        }
        let rr_new = dot(&r, &r);
        let beta = rr_new / rr;
        for i in 0..n {
            p[i] = r[i] + beta * p[i];
        }
        rr = rr_new;
    }
    u
}

#[cfg(test)]
mod tests {
    use super::*;

    fn gray(h: usize, w: usize, f: impl Fn(usize, usize) -> f32) -> Array3<f32> {
        Array3::from_shape_fn((h, w, 1), |(y, x, _)| f(y, x))
    }

    #[test]
    fn harmonic_fill_reproduces_a_linear_ramp() {
        // A linear function is discrete harmonic (each value the mean of its four neighbours),
        // so with its own values around the hole it is the fill's unique solution (common
        // practice). The hole stays off the image edge, where no boundary would hold it.
        let ramp = |y: usize, x: usize| 0.1 + 0.01 * x as f32 + 0.02 * y as f32;
        let px = gray(20, 24, ramp);
        let mask = Array2::from_shape_fn((20, 24), |(y, x)| (5..13).contains(&y) && (6..19).contains(&x));
        let mut holed = px.clone();
        for ((y, x), &m) in mask.indexed_iter() {
            if m {
                holed[[y, x, 0]] = 0.9;
            }
        }
        let filled = paint_out(&holed, &mask, Fill::Harmonic);
        for ((y, x), _) in mask.indexed_iter() {
            assert!((filled[[y, x, 0]] - ramp(y, x)).abs() < 1e-5, "({y},{x}): {} vs {}", filled[[y, x, 0]], ramp(y, x));
        }
    }

    #[test]
    fn harmonic_fill_of_a_bright_tag_on_flat_ground_is_the_ground() {
        let mut px = gray(16, 16, |_, _| 0.3);
        let mask = Array2::from_shape_fn((16, 16), |(y, x)| y < 4 && x < 6);
        for ((y, x), &m) in mask.indexed_iter() {
            if m {
                px[[y, x, 0]] = 1.0;
            }
        }
        let out = paint_out(&px, &mask, Fill::Harmonic);
        assert!(out.iter().all(|v| (v - 0.3).abs() < 1e-5), "a corner tag on flat ground fills with the ground");
    }

    #[test]
    fn edge_carry_gives_a_frame_the_content_next_to_it() {
        // Columns of distinct values; a 2-pixel dark frame on all four sides.
        let col = |x: usize| 0.2 + 0.03 * x as f32;
        let mut px = gray(12, 12, |_, x| col(x));
        let mask = Array2::from_shape_fn((12, 12), |(y, x)| y < 2 || y >= 10 || x < 2 || x >= 10);
        for ((y, x), &m) in mask.indexed_iter() {
            if m {
                px[[y, x, 0]] = 0.0;
            }
        }
        let out = paint_out(&px, &mask, Fill::EdgeCarry);
        // Top and bottom bands, away from the corners: the column's own value, carried out.
        for y in [0, 1, 10, 11] {
            for x in 2..10 {
                assert!((out[[y, x, 0]] - col(x)).abs() < 1e-6, "({y},{x})");
            }
        }
        // Left and right bands take the nearest inner column.
        for y in 2..10 {
            assert!((out[[y, 0, 0]] - col(2)).abs() < 1e-6 && (out[[y, 11, 0]] - col(9)).abs() < 1e-6);
        }
        // Nothing outside the mask moved.
        for ((y, x), &m) in mask.indexed_iter() {
            if !m {
                assert_eq!(out[[y, x, 0]], px[[y, x, 0]]);
            }
        }
    }

    #[test]
    fn a_mask_over_the_whole_image_is_left_as_it_is() {
        let px = gray(4, 4, |y, x| (y * 4 + x) as f32 / 16.0);
        let mask = Array2::from_elem((4, 4), true);
        assert_eq!(paint_out(&px, &mask, Fill::Harmonic), px);
        assert_eq!(paint_out(&px, &mask, Fill::EdgeCarry), px);
    }
}
