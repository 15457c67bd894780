//! Repeated patches across a folder: pixels that hold the same value at the same place in many
//! images (a logo or tag the digitiser always burns at one position). Real anatomy and film noise
//! differ from image to image, so a pixel that agrees across most of a folder was put there by
//! the machine, not the patient.
//!
//! No front end calls this yet: the sweep (issue 13) runs it over each group's folder.

use anyhow::{Result, bail};
use ndarray::Array2;

use super::grid::{components, dilate, to_mask};
use super::{RepeatedPatchSettings, Region, RegionKind};

/// Finds repeated patches in a set of luminance images of equal size (H×W, 0..1).
///
/// A pixel is static when at least `min_share` of the images (and at least `min_images`) agree
/// on its value within `equal_tolerance`. Static pixels within `join_px` of each other form one
/// region (the letters of one tag); its mask is the static pixels grown by one pixel.
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
            best = best.max(i - j + 1);
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
        let share = members.iter().map(|&p| agree[p] as f32).sum::<f32>() / members.len() as f32 / n as f32;
        let reason = format!(
            "{} pixels keep the same value (±{:.4}) in {:.0}% of the {} images on average",
            members.len(),
            s.equal_tolerance,
            100.0 * share,
            n
        );
        if let Some(r) = Region::from_mask(RegionKind::RepeatedPatch, to_mask(h, w, mask), share.min(1.0), "", reason) {
            out.push(r);
        }
    }
    Ok(out)
}
