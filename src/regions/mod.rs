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
mod field;
mod fill;
pub mod figures;
pub mod flag;
mod grid;
pub mod grow;
pub mod hotspot;
mod mark;
mod measure;
mod repeated;
mod ruler;
mod settings;

use ndarray::{Array2, Array3, Axis};
use serde::{Deserialize, Serialize};

pub use border::find_border_bands;
pub use command::{FoundRegion, RegionsFile, load_luminance, regions_file, write_regions};
pub use drawn::{DrawnFile, DrawnShape, Shape, load_drawn, save_drawn};
pub use figures::Figures;
pub use field::find_field_marks;
pub use fill::{Fill, paint_out, paint_out_all};
pub use grow::{Grown, MaskUsed, grow_mask};
pub use hotspot::{Hotspot, HotspotReport, HotspotRole, HotspotSettings, find_hotspots};
pub use flag::{Assessment, Evidence, FlagSettings, RegionReport, Removal, Removals, assess, assess_regions, assess_with_removals};
pub use mark::find_burned_in_marks;
pub use repeated::find_repeated_patches;
pub use settings::{BorderSettings, FieldMarkSettings, FinderSettings, GrowSettings, MarkSettings, RepeatedPatchSettings};

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

/// What shape of burned-in mark a finder saw (`mark` in `regions.json` and `reading.json`).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum MarkShape {
    /// Several glyphs on a common line, as a digitiser writes a tag.
    Text,
    /// A lone letter or symbol, or a few glyphs with no plate (a side marker).
    Glyph,
    /// Text or glyphs on a flat plate of their own: growth took in a flat band around them.
    PlateTag,
    /// A reader's marking drawn on the image: a ring, a line, an arrow, a cross.
    DrawnAnnotation,
    /// Evenly spaced ticks along a line.
    Ruler,
    /// A compact flat blob: a sticker, a label, a pen mark.
    Sticker,
}

impl MarkShape {
    pub fn name(self) -> &'static str {
        match self {
            MarkShape::Text => "text",
            MarkShape::Glyph => "glyph",
            MarkShape::PlateTag => "plate tag",
            MarkShape::DrawnAnnotation => "drawn annotation",
            MarkShape::Ruler => "ruler",
            MarkShape::Sticker => "sticker",
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
    /// "text-like tag", "symbol", "ring", or whatever a drawn region was called.
    pub detail: String,
    /// Burned-in marks: the shape the finder saw. `None` for other kinds.
    pub mark: Option<MarkShape>,
    /// The mask a removal paints out, grown from `mask` to the whole mark ([`grow`]); `None`
    /// when it was not grown (drawn regions: a person's outline is used as drawn).
    pub grown: Option<Grown>,
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
            mark: None,
            grown: None,
        })
    }

    /// The mask a removal paints out: the grown one when there is one.
    pub fn removal_mask(&self) -> &Array2<bool> {
        self.grown.as_ref().map_or(&self.mask, |g| &g.mask)
    }

    /// What [`Region::removal_mask`] holds, for the record.
    pub fn mask_used(&self) -> MaskUsed {
        match &self.grown {
            Some(g) => g.used.clone(),
            None => grow::union_used(&self.mask, &[]),
        }
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

/// Runs the single-image finders on a luminance image (H×W, 0..1); see [`find_regions_in`].
pub fn find_regions(image: &Array2<f32>, settings: &FinderSettings) -> Vec<Region> {
    find_regions_in(&image.view().insert_axis(Axis(2)).to_owned(), settings)
}

/// Runs the single-image finders on a picture's pixels (H×W×C, 0..1; colour pictures are also
/// searched for saturated marks): border bands first, then (when on) the field's other marks
/// outside the bands, then text tags outside both (a frame line is sharp and extreme too, and
/// would otherwise be taken for a stroke). Each found region's removal mask is grown
/// ([`grow`]) before the next finder looks.
pub fn find_regions_in(pixels: &Array3<f32>, settings: &FinderSettings) -> Vec<Region> {
    let image = crate::feed::luminance(pixels);
    let mut out: Vec<Region> = Vec::new();
    // Each finder looks outside the grown masks of the regions found before it.
    let grown = |found: &mut [Region]| {
        for r in found.iter_mut() {
            let g = grow_mask(pixels, &r.mask, &settings.grow);
            if r.mark.is_some_and(|m| matches!(m, MarkShape::Text | MarkShape::Glyph)) && on_plate(&image, r, &g) {
                r.mark = Some(MarkShape::PlateTag);
            }
            r.grown = Some(g);
        }
    };
    let exclude = |found: &[Region]| {
        let mut ex = Array2::from_elem(image.dim(), false);
        for r in found {
            ex.zip_mut_with(r.removal_mask(), |e, &m| *e |= m);
        }
        ex
    };
    if settings.border.enabled {
        let mut bands = find_border_bands(&image, &settings.border);
        grown(&mut bands);
        out.extend(bands);
    }
    // The field's marks before the text tags when they are on: a ruler's separate ticks would
    // otherwise pass as letters on a line.
    if settings.field_marks.enabled || settings.field_marks.rulers {
        let mut marks = find_field_marks(pixels, &image, Some(&exclude(&out)), &settings.field_marks);
        grown(&mut marks);
        out.extend(marks);
    }
    if settings.mark.enabled {
        let mut marks = find_burned_in_marks(&image, Some(&exclude(&out)), &settings.mark);
        grown(&mut marks);
        out.extend(marks);
    }
    out
}

/// Text sits on a plate of its own when the outermost pixels of its found box (one pixel beyond
/// the strokes) are flat (robust spread at most 0.05 of 0..1) and differ from the pixels just
/// outside the grown mask by at least 0.2: the strokes are not on the image's own ground.
fn on_plate(image: &Array2<f32>, r: &Region, g: &Grown) -> bool {
    let b = r.bbox;
    let edge: Vec<f32> = image
        .indexed_iter()
        .filter(|((y, x), _)| (b[1]..b[3]).contains(y) && (b[0]..b[2]).contains(x) && (*y == b[1] || *y + 1 == b[3] || *x == b[0] || *x + 1 == b[2]))
        .map(|(_, v)| *v)
        .collect();
    let (h, w) = image.dim();
    let around = grid::dilate(h, w, &g.mask.iter().copied().collect::<Vec<_>>(), 2);
    let outside: Vec<f32> = image.iter().zip(around.iter().zip(g.mask.iter())).filter(|(_, (a, m))| **a && !**m).map(|(v, _)| *v).collect();
    !edge.is_empty()
        && !outside.is_empty()
        && measure::robust_spread(&edge) <= 0.05
        && (grid::median(&edge) - grid::median(&outside)).abs() >= 0.2
}
