//! What a sweep says of each group: how many of its images are suspect, how much of the
//! attribution sits on marks, how often painting the regions out flips the answer, each against
//! the other groups with an interval; where the model looks across the group (the atlas); and
//! the patches repeated at one place across the group's images.

use std::collections::BTreeMap;
use std::path::Path;

use anyhow::{Context, Result};
use ndarray::Array2;
use serde::{Deserialize, Serialize};

use super::recurring::RecurringHotspot;
use super::row::Row;
use super::stats::{Interval, bootstrap_difference, bootstrap_mean, newcombe, wilson};
use crate::feed::Picture;
use crate::regions::{RepeatedPatchSettings, find_repeated_patches};

/// The running sum of a group's supporting-share maps on the model grid, in fixed point
/// (units of 2⁻⁴⁰), so that sums add up to the same bits in any order: shards merged give the
/// atlas of the whole sweep exactly.
#[derive(Clone, Debug, PartialEq)]
pub struct AtlasSum {
    pub sum: Array2<i64>,
    pub count: usize,
}

/// One share is this many units of an [`AtlasSum`].
pub const ATLAS_UNIT: f64 = (1u64 << 40) as f64;

impl AtlasSum {
    /// Adds one image's map: its supporting part as shares of the image's total support, so
    /// every image weighs the same whatever its score's scale. A map with no support adds zeros.
    pub fn add(&mut self, grid: &Array2<f32>) {
        let total: f64 = grid.iter().map(|v| v.max(0.0) as f64).sum();
        if total > 0.0 {
            self.sum.zip_mut_with(grid, |s, &v| *s += (v.max(0.0) as f64 / total * ATLAS_UNIT).round() as i64);
        }
        self.count += 1;
    }

    /// Adds another sum (a shard's) to this one.
    pub fn merge(&mut self, other: &AtlasSum) {
        self.sum += &other.sum;
        self.count += other.count;
    }

    pub fn new(dim: (usize, usize)) -> AtlasSum {
        AtlasSum { sum: Array2::zeros(dim), count: 0 }
    }

    /// The atlas: the mean supporting share at each position of the model grid.
    pub fn mean(&self) -> Array2<f64> {
        self.sum.mapv(|v| v as f64 / ATLAS_UNIT / self.count.max(1) as f64)
    }
}

/// The place of an atlas that holds the most support: a square box on the model grid.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct HotBox {
    /// `[x0, y0, x1, y1]` on the model grid, far edges exclusive.
    #[serde(rename = "box")]
    pub bbox: [usize; 4],
    /// Share of the atlas's total in the box.
    pub share: f64,
    /// The box's share of the grid's area, for comparison.
    pub area_share: f64,
}

/// The box of side `side` holding the largest sum of `atlas` (first in raster order on ties).
pub fn hottest(atlas: &Array2<f64>, side: usize) -> Option<HotBox> {
    let (h, w) = atlas.dim();
    let side = side.clamp(1, h.min(w).max(1));
    let total: f64 = atlas.sum();
    if total <= 0.0 || h == 0 || w == 0 {
        return None;
    }
    // Integral image: ii[y][x] = sum of atlas[..y, ..x].
    let mut ii = Array2::<f64>::zeros((h + 1, w + 1));
    for y in 0..h {
        for x in 0..w {
            ii[[y + 1, x + 1]] = atlas[[y, x]] + ii[[y, x + 1]] + ii[[y + 1, x]] - ii[[y, x]];
        }
    }
    let mut best = (f64::NEG_INFINITY, 0, 0);
    for y in 0..=h - side {
        for x in 0..=w - side {
            let s = ii[[y + side, x + side]] - ii[[y, x + side]] - ii[[y + side, x]] + ii[[y, x]];
            if s > best.0 {
                best = (s, x, y);
            }
        }
    }
    let (s, x, y) = best;
    Some(HotBox { bbox: [x, y, x + side, y + side], share: s / total, area_share: (side * side) as f64 / (h * w) as f64 })
}

/// A repeated patch found in a group.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct PatchFound {
    /// `[x0, y0, x1, y1]` in image pixels.
    #[serde(rename = "box")]
    pub bbox: [usize; 4],
    pub area: usize,
    /// Share of the compared images that agree there.
    pub share: f32,
}

/// At most this many images of a group are compared for repeated patches (the first in path
/// order), to bound memory on large folders.
pub const PATCH_IMAGES: usize = 200;

/// One group's figures.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct GroupSummary {
    pub group: String,
    pub images: usize,
    pub suspect: usize,
    pub suspect_rate: Option<Interval>,
    /// This group's suspect rate minus the other groups' (Newcombe's interval).
    pub suspect_rate_vs_others: Option<Interval>,
    pub mean_mark_share: Option<Interval>,
    /// This group's mean mark share minus the other groups' (bootstrap interval).
    pub mark_share_vs_others: Option<Interval>,
    /// Images whose top class changes when their found regions are painted out.
    pub flips: usize,
    pub flip_rate: Option<Interval>,
    pub flip_rate_vs_others: Option<Interval>,
    /// Where the group's atlas holds the most support.
    pub atlas_hottest: Option<HotBox>,
    pub repeated_patches: Vec<PatchFound>,
    /// How many images were compared for repeated patches (same size as the group's first).
    pub repeated_patch_images: usize,
}

/// What `groups.json` holds: each group's figures, and the hotspots that recur across the
/// sweep's images (see [`super::recurring`]).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct GroupsFile {
    pub groups: Vec<GroupSummary>,
    #[serde(default)]
    pub recurring_hotspots: Vec<RecurringHotspot>,
}

impl GroupsFile {
    /// Reads `groups.json` from a sweep's output folder.
    pub fn read(dir: &Path) -> Result<GroupsFile> {
        let path = dir.join("groups.json");
        let text = std::fs::read_to_string(&path)
            .with_context(|| format!("cannot read {}: is {} the output folder of a sweep?", path.display(), dir.display()))?;
        serde_json::from_str(&text).with_context(|| {
            format!("{} is not a groups file of this spurion (damaged, or from a version before recurring hotspots: run the sweep again)", path.display())
        })
    }
}

/// The figures of every group, in name order. `root` is the images folder (repeated patches
/// are looked for in the images themselves).
pub fn summarise(rows: &[Row], atlas: &BTreeMap<String, AtlasSum>, root: &Path) -> Result<Vec<GroupSummary>> {
    let mut groups: BTreeMap<&str, Vec<&Row>> = BTreeMap::new();
    for r in rows {
        groups.entry(&r.group).or_default().push(r);
    }
    let mut out = vec![];
    for (i, (g, members)) in groups.iter().enumerate() {
        let others: Vec<&Row> = rows.iter().filter(|r| r.group != *g).collect();
        let count = |v: &[&Row], f: &dyn Fn(&Row) -> bool| v.iter().filter(|r| f(r)).count();
        let shares = |v: &[&Row]| v.iter().map(|r| r.mark_share.unwrap_or(0.0)).collect::<Vec<f64>>();
        let suspect = |r: &Row| r.suspect;
        let flipped = |r: &Row| r.flipped() == Some(true);
        let (n, m) = (members.len(), others.len());
        let seed = 1000 + i as u64;
        let atlas_hottest = atlas.get(*g).and_then(|a| {
            let side = (a.sum.dim().0.min(a.sum.dim().1) / 16).max(4);
            hottest(&a.mean(), side)
        });
        let (repeated_patches, repeated_patch_images) = repeated(root, members)?;
        out.push(GroupSummary {
            group: g.to_string(),
            images: n,
            suspect: count(members, &suspect),
            suspect_rate: wilson(count(members, &suspect), n),
            suspect_rate_vs_others: newcombe(count(members, &suspect), n, count(&others, &suspect), m),
            mean_mark_share: bootstrap_mean(&shares(members), seed),
            mark_share_vs_others: bootstrap_difference(&shares(members), &shares(&others), seed),
            flips: count(members, &flipped),
            flip_rate: wilson(count(members, &flipped), n),
            flip_rate_vs_others: newcombe(count(members, &flipped), n, count(&others, &flipped), m),
            atlas_hottest,
            repeated_patches,
            repeated_patch_images,
        });
    }
    Ok(out)
}

/// Repeated patches among a group's first [`PATCH_IMAGES`] images of one size. Images that no
/// longer open are left out (the sweep lists the ones it could not read).
fn repeated(root: &Path, members: &[&Row]) -> Result<(Vec<PatchFound>, usize)> {
    let mut lum: Vec<Array2<f32>> = vec![];
    for r in members.iter().take(PATCH_IMAGES) {
        let Ok(p) = Picture::open(&root.join(&r.path)) else { continue };
        let l = p.luminance();
        if lum.first().is_none_or(|f| f.dim() == l.dim()) {
            lum.push(l);
        }
    }
    if lum.len() < 2 {
        return Ok((vec![], lum.len()));
    }
    let found = find_repeated_patches(&lum, &RepeatedPatchSettings::default())?;
    let patches = found.into_iter().map(|r| PatchFound { bbox: r.bbox, area: r.area(), share: r.confidence }).collect();
    Ok((patches, lum.len()))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_hottest_box_is_where_the_mass_is() {
        let mut a = Array2::<f64>::from_elem((32, 32), 0.001);
        for y in 2..6 {
            for x in 3..7 {
                a[[y, x]] = 1.0;
            }
        }
        let hb = hottest(&a, 4).unwrap();
        assert_eq!(hb.bbox, [3, 2, 7, 6]);
        assert!(hb.share > 0.9 && (hb.area_share - 16.0 / 1024.0).abs() < 1e-12);
    }

    #[test]
    fn atlas_weighs_every_image_the_same() {
        let mut s = AtlasSum::new((1, 2));
        s.add(&ndarray::array![[3.0f32, 1.0]]);
        s.add(&ndarray::array![[-5.0f32, 100.0]]);
        // Shares: (0.75, 0.25) and (0, 1) → mean (0.375, 0.625).
        assert_eq!(s.mean(), ndarray::array![[0.375, 0.625]]);
        // Merging in another order gives the same bits.
        let (mut a, mut b) = (AtlasSum::new((1, 2)), AtlasSum::new((1, 2)));
        a.add(&ndarray::array![[0.3f32, 0.7]]);
        b.add(&ndarray::array![[0.1f32, 0.2]]);
        let (mut ab, mut ba) = (a.clone(), b.clone());
        ab.merge(&b);
        ba.merge(&a);
        assert_eq!(ab, ba);
    }
}
