//! Regions: the parts of an image that are not anatomy (border bands, burned-in marks, repeated
//! patches across a folder, drawn regions), and the figures that say how much of an attribution
//! map falls on them.
//!
//! Everything here is plain image processing on a luminance image (`Array2<f32>`, H×W, values in
//! 0..1); no model is needed to find regions. The figures ([`figures`]) and the flag rule
//! ([`flag`]) then take a map on the same grid.
//!
//! A region found here is a hint for a person to look at, not a verdict: a straight flat margin
//! may be a real collimation edge, a small bright glyph may be a real calcification.

mod border;
mod command;
pub mod drawn;
mod fill;
pub mod figures;
pub mod flag;
mod grid;
pub mod hotspot;
mod mark;
mod repeated;
mod settings;

use ndarray::Array2;
use serde::{Deserialize, Serialize};

pub use border::find_border_bands;
pub use command::{FoundRegion, RegionsFile, load_luminance, regions_file, write_regions};
pub use drawn::{DrawnFile, DrawnShape, Shape, load_drawn, save_drawn};
pub use figures::Figures;
pub use fill::{Fill, paint_out, paint_out_all};
pub use hotspot::{Hotspot, HotspotReport, HotspotRole, HotspotSettings, find_hotspots};
pub use flag::{Assessment, Evidence, FlagSettings, RegionReport, Removal, Removals, assess, assess_regions, assess_with_removals};
pub use mark::find_burned_in_marks;
pub use repeated::find_repeated_patches;
pub use settings::{BorderSettings, FinderSettings, MarkSettings, RepeatedPatchSettings};

/// What a region is.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum RegionKind {
    /// A margin of the image: padding, letterbox, a thin frame or a collimation-like edge.
    BorderBand,
    /// Text, a tag, a ruler, an arrow or a symbol burned into the pixels.
    BurnedInMark,
    /// Pixels identical at the same place in many images of a folder.
    RepeatedPatch,
    /// A rectangle or polygon a person drew or loaded from a file.
    DrawnRegion,
}

impl RegionKind {
    /// The plain name used in file names, JSON and the GUI.
    pub fn name(self) -> &'static str {
        match self {
            RegionKind::BorderBand => "border band",
            RegionKind::BurnedInMark => "burned-in mark",
            RegionKind::RepeatedPatch => "repeated patch",
            RegionKind::DrawnRegion => "drawn region",
        }
    }

    /// The kebab-case form (same as the serde form), for file names.
    pub fn slug(self) -> &'static str {
        match self {
            RegionKind::BorderBand => "border-band",
            RegionKind::BurnedInMark => "burned-in-mark",
            RegionKind::RepeatedPatch => "repeated-patch",
            RegionKind::DrawnRegion => "drawn-region",
        }
    }
}

/// A side of the image, for border bands.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Side {
    Top,
    Bottom,
    Left,
    Right,
}

impl Side {
    pub const ALL: [Side; 4] = [Side::Top, Side::Bottom, Side::Left, Side::Right];

    pub fn name(self) -> &'static str {
        match self {
            Side::Top => "top",
            Side::Bottom => "bottom",
            Side::Left => "left",
            Side::Right => "right",
        }
    }
}

/// One region found in (or drawn on) an image.
#[derive(Clone, Debug, PartialEq)]
pub struct Region {
    pub kind: RegionKind,
    /// Box `[x0, y0, x1, y1]` in pixels, end exclusive (x is the column, y the row).
    pub bbox: [usize; 4],
    /// H×W, true inside the region; same grid as the image.
    pub mask: Array2<bool>,
    /// 0..1, how sure the finder is; 1 for drawn regions.
    pub confidence: f32,
    /// One short sentence saying why this is a region, for people.
    pub reason: String,
    /// Border bands: the sides the band lies on. Empty for other kinds.
    pub sides: Vec<Side>,
    /// Sub-kind or a person's label: "frame", "padding", "collimation edge", "flat margin",
    /// "text-like tag", "symbol", or whatever a drawn region was called.
    pub detail: String,
}

impl Region {
    /// Builds a region from a mask, computing its box. `None` when the mask is empty.
    pub fn from_mask(
        kind: RegionKind,
        mask: Array2<bool>,
        confidence: f32,
        detail: impl Into<String>,
        reason: impl Into<String>,
    ) -> Option<Region> {
        let bbox = mask_bbox(&mask)?;
        Some(Region {
            kind,
            bbox,
            mask,
            confidence,
            reason: reason.into(),
            sides: Vec::new(),
            detail: detail.into(),
        })
    }

    /// Short label for tables and file names, e.g. "border band (frame: top, bottom)".
    pub fn label(&self) -> String {
        let mut s = self.kind.name().to_string();
        if !self.detail.is_empty() || !self.sides.is_empty() {
            s.push_str(" (");
            s.push_str(&self.detail);
            if !self.sides.is_empty() {
                if !self.detail.is_empty() {
                    s.push_str(": ");
                }
                let names: Vec<&str> = self.sides.iter().map(|x| x.name()).collect();
                s.push_str(&names.join(", "));
            }
            s.push(')');
        }
        s
    }

    /// Number of pixels in the region.
    pub fn area(&self) -> usize {
        self.mask.iter().filter(|&&m| m).count()
    }

    /// Region area divided by image area.
    pub fn area_fraction(&self) -> f64 {
        let n = self.mask.len();
        if n == 0 { 0.0 } else { self.area() as f64 / n as f64 }
    }
}

/// Box `[x0, y0, x1, y1]` (end exclusive) of the true pixels, `None` if there are none.
pub fn mask_bbox(mask: &Array2<bool>) -> Option<[usize; 4]> {
    let (mut x0, mut y0, mut x1, mut y1) = (usize::MAX, usize::MAX, 0usize, 0usize);
    for ((y, x), &m) in mask.indexed_iter() {
        if m {
            x0 = x0.min(x);
            y0 = y0.min(y);
            x1 = x1.max(x + 1);
            y1 = y1.max(y + 1);
        }
    }
    (x0 != usize::MAX).then_some([x0, y0, x1, y1])
}

/// Intersection over union of two boxes `[x0, y0, x1, y1]` (end exclusive).
pub fn box_iou(a: [usize; 4], b: [usize; 4]) -> f64 {
    let ix = a[2].min(b[2]).saturating_sub(a[0].max(b[0]));
    let iy = a[3].min(b[3]).saturating_sub(a[1].max(b[1]));
    let inter = (ix * iy) as f64;
    let area = |r: [usize; 4]| ((r[2] - r[0]) * (r[3] - r[1])) as f64;
    let union = area(a) + area(b) - inter;
    if union <= 0.0 { 0.0 } else { inter / union }
}

/// Intersection over union of two masks of the same shape.
pub fn mask_iou(a: &Array2<bool>, b: &Array2<bool>) -> f64 {
    let (mut inter, mut union) = (0usize, 0usize);
    for (&p, &q) in a.iter().zip(b.iter()) {
        inter += (p && q) as usize;
        union += (p || q) as usize;
    }
    if union == 0 { 0.0 } else { inter as f64 / union as f64 }
}

/// Runs the single-image finders: border bands first, then burned-in marks outside the bands
/// (a frame line is sharp and extreme too, and would otherwise be taken for a stroke).
pub fn find_regions(image: &Array2<f32>, settings: &FinderSettings) -> Vec<Region> {
    let mut out = Vec::new();
    if settings.border.enabled {
        out.extend(find_border_bands(image, &settings.border));
    }
    if settings.mark.enabled {
        let mut exclude = Array2::from_elem(image.dim(), false);
        for r in &out {
            exclude.zip_mut_with(&r.mask, |e, &m| *e |= m);
        }
        out.extend(find_burned_in_marks(image, Some(&exclude), &settings.mark));
    }
    out
}
