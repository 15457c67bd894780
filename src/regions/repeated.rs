//! Repeated patches across a folder: pixels that hold the same value at the same place in many
//! images (a logo or tag the digitiser always burns at one position). Real anatomy and film noise
//! differ from image to image, so a pixel that agrees across most of a folder was put there by
//! the machine, not the patient.
//!
//! Agreement alone is not enough: film that saturates at one value in a bright place, grain
//! that agrees by chance in a small folder, a frame, an empty mask or a flat background around
//! the field of view all hold one value at one place. So a repeated patch must also be compact
//! (a frame or a letterbox is a border band, which the border finder reports image by image),
//! made of strokes or blocks rather than scattered pixels, and stand out from what each image's
//! own surroundings predict (a ring around it in the same image).
//!
//! The sweep runs this over each group's images (`sweep::summary`).

use anyhow::{Result, bail};
use ndarray::Array2;

use super::grid::{components, dilate, median, to_mask};
use super::{RepeatedPatchSettings, Region, RegionKind};

/// Finds repeated patches in a set of luminance images of equal size (H×W, 0..1).
///
/// A pixel is static when at least `min_share` of the images (and at least `min_images`) agree
/// on its value within `equal_tolerance`. Static pixels within `join_px` of each other form one
/// region (the letters of one tag); its mask is the static pixels grown by one pixel. A region
/// is kept when it is compact (`max_extent_fraction`), is not a flat solid block against the
/// image's edge (background or a border), its static pixels come in strokes or blocks rather
/// than scattered, and it stands out from a ring around it in the images that carry it
/// (`min_contrast`).
pub fn find_repeated_patches(images: &[Array2<f32>], s: &RepeatedPatchSettings) -> Result<Vec<Region>> {
    let Some(first) = images.first() else {
        bail!("repeated patch search needs at least two images of equal size; got none");
    };
    if images.len() < 2 {
        bail!("repeated patch search needs at least two images of equal size; got one");
    }
    let (h, w) = first.dim();
    for (i, im) in images.iter().enumerate() {
        if im.dim() != (h, w) {
            bail!(
                "image {i} of the folder is {}×{} but image 0 is {}×{}; repeated patches are only \
                 looked for among images of one size (resize or split the folder by size)",
                im.dim().1,
                im.dim().0,
                w,
                h
            );
        }
    }
    let n = images.len();
    let need = ((s.min_share * n as f32).ceil() as usize).max(s.min_images).max(2);
    if need > n {
        return Ok(Vec::new());
    }
    let flats: Vec<Vec<f32>> = images
        .iter()
        .map(|im| im.as_standard_layout().iter().copied().collect())
        .collect();
    let mut on = vec![false; h * w];
    let mut agree = vec![0u16; h * w];
    // The value the agreeing images hold at each pixel (the middle of their window).
    let mut mode = vec![0f32; h * w];
    let mut vals = vec![0f32; n];
    for p in 0..h * w {
        for (k, f) in flats.iter().enumerate() {
            vals[k] = f[p];
        }
        vals.sort_by(|a, b| a.total_cmp(b));
        // Largest number of values inside any window of width `equal_tolerance`.
        let (mut best, mut j) = (0usize, 0usize);
        for i in 0..n {
            while vals[i] - vals[j] > s.equal_tolerance {
                j += 1;
            }
            if i - j + 1 > best {
                best = i - j + 1;
                mode[p] = 0.5 * (vals[i] + vals[j]);
            }
        }
        agree[p] = best.min(u16::MAX as usize) as u16;
        on[p] = best >= need;
    }
    let joined = dilate(h, w, &on, s.join_px / 2 + s.join_px % 2);
    let (label, count) = components(h, w, &joined);
    let grown = dilate(h, w, &on, 1);
    // One pass collects each joined group's static pixels and its grown outline.
    let mut statics: Vec<Vec<usize>> = vec![Vec::new(); count + 1];
    let mut cover: Vec<Vec<usize>> = vec![Vec::new(); count + 1];
    for p in 0..h * w {
        let l = label[p] as usize;
        if l == 0 {
            continue;
        }
        if on[p] {
            statics[l].push(p);
        }
        if grown[p] {
            cover[l].push(p);
        }
    }
    // Boxes of the joined parts; small parts side by side (the letters of a tag) form one region,
    // as burned-in marks do; large parts (a frame) stay on their own.
    let mut boxes = vec![[usize::MAX, usize::MAX, 0usize, 0usize]; count + 1];
    for l in 1..=count {
        for &p in &statics[l] {
            let (y, x) = (p / w, p % w);
            let b = &mut boxes[l];
            b[0] = b[0].min(x);
            b[1] = b[1].min(y);
            b[2] = b[2].max(x + 1);
            b[3] = b[3].max(y + 1);
        }
    }
    let size = |b: &[usize; 4]| (b[2] - b[0]).max(b[3] - b[1]) as f32;
    let small_max = s.max_part_fraction * h.min(w) as f32;
    let parts: Vec<usize> = (1..=count).filter(|&l| !statics[l].is_empty()).collect();
    let mut parent: Vec<usize> = (0..=count).collect();
    fn root(parent: &mut [usize], mut i: usize) -> usize {
        while parent[i] != i {
            parent[i] = parent[parent[i]];
            i = parent[i];
        }
        i
    }
    for (k, &i) in parts.iter().enumerate() {
        for &j in &parts[k + 1..] {
            let (a, b) = (&boxes[i], &boxes[j]);
            if size(a) > small_max || size(b) > small_max {
                continue;
            }
            let gap_x = a[0].max(b[0]).saturating_sub(a[2].min(b[2])) as f32;
            let gap_y = a[1].max(b[1]).saturating_sub(a[3].min(b[3])) as f32;
            let reach = s.group_gap * size(a).max(size(b));
            if gap_x <= reach && gap_y <= reach {
                let (ra, rb) = (root(&mut parent, i), root(&mut parent, j));
                parent[ra] = rb;
            }
        }
    }
    let mut groups: std::collections::BTreeMap<usize, Vec<usize>> = Default::default();
    for &l in &parts {
        let r = root(&mut parent, l);
        groups.entry(r).or_default().push(l);
    }
    let mut out = Vec::new();
    let extent_max = s.max_extent_fraction * h.min(w) as f32;
    for ls in groups.values() {
        let members: Vec<usize> = ls.iter().flat_map(|&l| statics[l].iter().copied()).collect();
        if members.len() < s.min_area {
            continue;
        }
        let mut mask = vec![false; h * w];
        for &l in ls {
            for &p in &cover[l] {
                mask[p] = true;
            }
        }
        let Some(bbox) = bbox_of(w, &mask) else { continue };
        if size(&bbox) > extent_max
            || flat_against_edge(h, w, &bbox, &members, &mode, s.equal_tolerance)
            || !coherent(h, w, &members, &on)
        {
            continue;
        }
        let Some(contrast) = contrast(h, w, &flats, &mask, &on, &members, &mode, s) else { continue };
        if contrast < s.min_contrast {
            continue;
        }
        let share = members.iter().map(|&p| agree[p] as f32).sum::<f32>() / members.len() as f32 / n as f32;
        let reason = format!(
            "{} pixels keep the same value (±{:.4}) in {:.0}% of the {} images on average, {:.2} away from their surroundings",
            members.len(),
            s.equal_tolerance,
            100.0 * share,
            n,
            contrast
        );
        if let Some(r) = Region::from_mask(RegionKind::RepeatedPatch, to_mask(h, w, mask), share.min(1.0), "", reason) {
            out.push(r);
        }
    }
    Ok(out)
}

/// Box `[x0, y0, x1, y1]` of the set pixels of a flat mask.
fn bbox_of(w: usize, mask: &[bool]) -> Option<[usize; 4]> {
    let mut b = [usize::MAX, usize::MAX, 0, 0];
    for (p, _) in mask.iter().enumerate().filter(|(_, m)| **m) {
        let (y, x) = (p / w, p % w);
        b = [b[0].min(x), b[1].min(y), b[2].max(x + 1), b[3].max(y + 1)];
    }
    (b[0] != usize::MAX).then_some(b)
}

/// A solid block of one value against the image's edge: a padding corner or an empty
/// background, not a mark drawn on the picture. Solid: the static pixels fill at least 80 % of
/// their box (strokes of text or a ruler's ticks fill far less).
fn flat_against_edge(h: usize, w: usize, b: &[usize; 4], members: &[usize], mode: &[f32], tol: f32) -> bool {
    let touches = b[0] == 0 || b[1] == 0 || b[2] >= w.saturating_sub(1) || b[3] >= h.saturating_sub(1);
    let (lo, hi) = members.iter().fold((f32::MAX, f32::MIN), |(lo, hi), &p| (lo.min(mode[p]), hi.max(mode[p])));
    let solid = members.len() as f32 >= 0.8 * ((b[2] - b[0]) * (b[3] - b[1])) as f32;
    touches && solid && hi - lo <= 2.0 * tol
}

/// Whether the static pixels come in strokes or blocks, as drawn marks do: at least half of
/// them have two or more static 8-neighbours. Grain that agrees by chance in a small folder
/// (with 8-bit film, three of six images share a value at a good share of pixels) is scattered,
/// and joining scattered pixels into a region does not make them a patch.
fn coherent(h: usize, w: usize, members: &[usize], on: &[bool]) -> bool {
    let linked = members
        .iter()
        .filter(|&&p| {
            let (y, x) = (p / w, p % w);
            let mut k = 0;
            for ny in y.saturating_sub(1)..=(y + 1).min(h - 1) {
                for nx in x.saturating_sub(1)..=(x + 1).min(w - 1) {
                    k += ((ny, nx) != (y, x) && on[ny * w + nx]) as usize;
                }
            }
            k >= 2
        })
        .count();
    2 * linked >= members.len()
}

/// How far a patch stands out from its surroundings: for each image that carries it (agrees
/// with the folder's value on at least half its static pixels), the mean distance of those
/// pixels from the median of a ring of `ring_px` around the patch's mask in the same image
/// (static pixels left out of the ring); the median of that over the carrying images. `None`
/// when the ring holds no pixel that varies (the patch is part of a larger static area).
#[allow(clippy::too_many_arguments)]
fn contrast(
    h: usize,
    w: usize,
    images: &[Vec<f32>],
    mask: &[bool],
    on: &[bool],
    members: &[usize],
    mode: &[f32],
    s: &RepeatedPatchSettings,
) -> Option<f32> {
    let grown = dilate(h, w, mask, s.ring_px.max(1));
    let ring: Vec<usize> = (0..h * w).filter(|&p| grown[p] && !mask[p] && !on[p]).collect();
    if ring.is_empty() {
        return None;
    }
    let mut per_image = vec![];
    let mut around = vec![0f32; ring.len()];
    for im in images {
        let carried = members.iter().filter(|&&p| (im[p] - mode[p]).abs() <= s.equal_tolerance).count();
        if 2 * carried < members.len() {
            continue;
        }
        for (a, &p) in around.iter_mut().zip(&ring) {
            *a = im[p];
        }
        let m = median(&around);
        per_image.push(members.iter().map(|&p| (im[p] - m).abs()).sum::<f32>() / members.len() as f32);
    }
    (!per_image.is_empty()).then(|| median(&per_image))
}
