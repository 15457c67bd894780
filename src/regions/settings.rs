//! Thresholds of the region finders. Every value is in image units (luminance 0..1) or pixels
//! unless its name says it is a fraction. All fields have defaults, so a TOML or JSON file may
//! set only the ones it changes.
//!
//! The defaults are common practice for this kind of simple detector, tuned on the demo
//! phantoms and checked against clean scikit-image/pydicom test images (see
//! tests/regions_clean.rs); they are not taken from a publication.

use serde::{Deserialize, Serialize};

/// All finder thresholds.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, Default)]
#[serde(default, deny_unknown_fields)]
pub struct FinderSettings {
    pub border: BorderSettings,
    pub mark: MarkSettings,
    /// Bare glyphs, drawn annotations, rulers, stickers and pen marks.
    pub field_marks: FieldMarkSettings,
    /// How a found region's mask is grown for removal.
    pub grow: GrowSettings,
    pub repeated_patch: RepeatedPatchSettings,
}

impl FinderSettings {
    /// The settings for an image whose file declares burned-in text (DICOM's Burned In
    /// Annotation YES): marks are looked for with a lower confidence bar, since the file says
    /// they are there. The bar is ours (0.4 instead of 0.6), not a published value.
    pub fn for_declared_text(&self) -> FinderSettings {
        let mut s = self.clone();
        s.mark.min_confidence = s.mark.min_confidence.min(0.4);
        s
    }

    /// The settings for one picture: [`FinderSettings::for_declared_text`] when its file says
    /// it carries burned-in text, else these.
    pub fn for_picture(&self, declared: Option<bool>) -> FinderSettings {
        if declared == Some(true) { self.for_declared_text() } else { self.clone() }
    }
}

/// Border bands: a margin along a side whose pixels stay within a tolerance of one value, ending
/// in a sharp straight (possibly tilted) edge.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct BorderSettings {
    pub enabled: bool,
    /// Deepest band looked for, as a fraction of the image size across the side. Default 0.25.
    pub max_depth_fraction: f32,
    /// Smallest tolerance on band values. Default 0.02 (about 5 grey levels of 255).
    pub flat_tolerance: f32,
    /// The tolerance grows to this many times the noise of the outermost line (1.4826·MAD), so
    /// a noisy exposed margin still counts as flat. Default 3.
    pub noise_factor: f32,
    /// Smallest step between the band value and the content just inside the edge. Default 0.05
    /// (about 13 grey levels of 255); the step used is at least twice the tolerance.
    pub edge_contrast: f32,
    /// Share of positions along the side whose edge must agree with the fitted straight edge.
    /// Default 0.8.
    pub min_coverage: f32,
    /// Largest RMS distance (pixels) of the edge positions from the fitted line. Default 1.5.
    pub max_edge_residual: f32,
    /// Largest tilt of a collimation-like edge, in pixels of depth per pixel along the side
    /// (0.25 ≈ 14°). Default 0.25.
    pub max_tilt: f32,
    /// Bands this wide or thinner (pixels) are called a frame. Default 6.
    pub frame_max_width: usize,
    /// A wider band whose standard deviation is at most this is called padding (digitally
    /// constant, as letterboxing leaves). Default 0.004 (about one grey level of 255).
    pub padding_tolerance: f32,
}

impl Default for BorderSettings {
    fn default() -> Self {
        BorderSettings {
            enabled: true,
            max_depth_fraction: 0.25,
            flat_tolerance: 0.02,
            noise_factor: 3.0,
            edge_contrast: 0.05,
            min_coverage: 0.8,
            max_edge_residual: 1.5,
            max_tilt: 0.25,
            frame_max_width: 6,
            padding_tolerance: 0.004,
        }
    }
}

/// Burned-in marks: small, sharp-edged components at an intensity extreme, grouped when they lie
/// side by side like the letters of a tag.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct MarkSettings {
    pub enabled: bool,
    /// A candidate pixel lies within this fraction of the image's value range from its maximum
    /// (bright marks) or minimum (dark marks). Default 0.2.
    pub extreme_margin: f32,
    /// ... and differs from the mean of its neighbourhood by at least this fraction of the range.
    /// Default 0.25.
    pub local_contrast: f32,
    /// Side of the square neighbourhood (pixels, odd) for that mean. Default 21.
    pub window: usize,
    /// Mean step across a component's outline, as a fraction of the range: burned-in pixels end
    /// abruptly, soft highlights do not. Default 0.3.
    pub min_edge_step: f32,
    /// A mark whose mean edge step reaches this is "crisp" (drawn pixels next to untouched
    /// ones) and believed more. Default 0.6.
    pub crisp_edge_step: f32,
    /// Smallest glyph size (longer side of its box, pixels). Default 3.
    pub min_glyph_px: usize,
    /// Largest glyph size, as a fraction of the image's shorter side. Default 0.15.
    pub max_glyph_fraction: f32,
    /// Largest stroke width (pixels), estimated as 2·area / outline length. Default 3.5.
    pub max_stroke_px: f32,
    /// ... or, for larger glyphs, this fraction of the glyph size (text strokes are thin next to
    /// the letter; a filled disc or square has 2·area / outline = half its size). Default 0.3.
    pub max_stroke_fraction: f32,
    /// Glyphs join one mark when the gap between their boxes is at most this many glyph sizes.
    /// Default 1.2.
    pub group_gap: f32,
    /// A mark is "near the edge" when its box lies within this fraction of the shorter side
    /// from an image edge. Default 0.25.
    pub edge_zone: f32,
    /// Marks away from the edges need at least this many aligned glyphs. Default 3.
    pub interior_min_glyphs: usize,
    /// Marks below this confidence are dropped. Default 0.6.
    pub min_confidence: f32,
    /// The region mask is the mark's box grown by this many pixels (attribution lands on the
    /// strokes and just around them). Default 1.
    pub grow_px: usize,
}

impl Default for MarkSettings {
    fn default() -> Self {
        MarkSettings {
            enabled: true,
            extreme_margin: 0.2,
            local_contrast: 0.25,
            window: 21,
            min_edge_step: 0.3,
            crisp_edge_step: 0.6,
            min_glyph_px: 3,
            max_glyph_fraction: 0.15,
            max_stroke_px: 3.5,
            max_stroke_fraction: 0.3,
            group_gap: 1.2,
            edge_zone: 0.25,
            interior_min_glyphs: 3,
            min_confidence: 0.6,
            grow_px: 1,
        }
    }
}

/// Repeated patches across a folder.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct RepeatedPatchSettings {
    /// Two values count as identical within this. Default 0.5/255.
    pub equal_tolerance: f32,
    /// A pixel is static when this share of the images agree on its value. Default 0.5.
    pub min_share: f32,
    /// ... and at least this many images. Default 3.
    pub min_images: usize,
    /// Static pixels closer than this (pixels) join one region. Default 3.
    pub join_px: usize,
    /// Small parts (longer box side at most `max_part_fraction` of the image's shorter side)
    /// join one region when the gap between their boxes is at most this many part sizes, like
    /// the glyphs of a burned-in mark. Default 1.2.
    pub group_gap: f32,
    /// See `group_gap`. Default 0.15.
    pub max_part_fraction: f32,
    /// Regions smaller than this many pixels are dropped (isolated coincidences). Default 6.
    pub min_area: usize,
    /// A repeated patch is compact: the longer side of its box is at most this fraction of the
    /// image's shorter side. Larger static structures (a frame, a letterbox, an empty background
    /// around the field of view) are border bands or background, which the border finder looks
    /// for image by image. Default 0.4.
    pub max_extent_fraction: f32,
    /// A patch must stand out from what each image's own surroundings predict: the median, over
    /// the images that carry it, of the mean distance between its static pixels and the median
    /// of a ring around it in the same image is at least this. Film that saturates at one value
    /// in a bright place, or grain that happens to agree, looks like its neighbourhood; a burned-in
    /// tag does not. Default 0.1 (about 25 grey levels of 255; our choice, not a published value).
    pub min_contrast: f32,
    /// Width in pixels of that ring around the patch's mask. Default 3.
    pub ring_px: usize,
}

impl Default for RepeatedPatchSettings {
    fn default() -> Self {
        RepeatedPatchSettings {
            equal_tolerance: 0.5 / 255.0,
            min_share: 0.5,
            min_images: 3,
            join_px: 3,
            group_gap: 1.2,
            max_part_fraction: 0.15,
            min_area: 6,
            max_extent_fraction: 0.4,
            min_contrast: 0.1,
            ring_px: 3,
        }
    }
}

/// The finders of the field's other marks ([`super::field`], [`super::ruler`]): bare glyphs and
/// letters with no plate, drawn annotations (rings, lines, arrows, crosses), rulers (periodic
/// ticks) and stickers or pen marks (compact flat blobs). Every test is on a generic property of
/// a mark drawn over an image: it stands out from the pixels right around it (contrast and
/// isolation), it ends abruptly (fade), and its strokes have a width (distance transform).
///
/// These numbers are a starting point, not a calibration. They were set on marks drawn by the
/// tests over synthetic texture (tests/suite/regions_marks.rs) and checked against the clean
/// scikit-image and pydicom photographs and the demo's mark-free sites, where they must find
/// nothing; those two checks are regression checks, not evidence that the numbers are right for
/// other images.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct FieldMarkSettings {
    /// The glyph, drawn-annotation and sticker finders. Off by default: on clean photographs
    /// they still find marks that are not there (tests/suite/regions_precision.rs: 31 false
    /// finds on 26 tuning pictures, 10 on 10 held-out ones); `{"field_marks": {"enabled": true}}`
    /// turns them on (rulers too).
    pub enabled: bool,
    /// The ruler finder ([`super::ruler`]), on by default whatever `enabled` says: it found no
    /// ruler on any of the 36 clean real pictures of tests/suite/regions_precision.rs (26
    /// tuning, 10 held-out) nor on the 72 mark-free demo phantoms, and finds 96 % of the rulers
    /// drawn along rows and columns and 88 % of tilted ones (regions_marks.rs,
    /// regions_precision.rs). `{"field_marks": {"rulers": false}}` turns it off.
    pub rulers: bool,
    /// Widest stroke (pixels) a glyph, annotation or ruler tick may have: the top-hat that
    /// lifts strokes off their background uses a square of this side plus one, so wider
    /// structures (anatomy, shading) go to zero. Default 8.
    pub max_stroke_px: usize,
    /// Smallest rise of a stroke above its surroundings (median inside minus median of the
    /// ring 3..6 px out), as a share of the image's value range. Default 0.25: a mark is drawn
    /// to be seen, and a quarter of the range is what the existing tag finder asks too.
    pub min_contrast: f32,
    /// Stroke pixels lie within this share of the value range of the image's brightest (or
    /// darkest) value: marks are drawn to be seen, in the brightest or darkest ink the picture
    /// holds; a photograph's own thin structures mostly are not. Default 0.25 (the tag finder
    /// uses 0.2 on crisp pixels; 0.25 leaves room for an anti-aliased stroke's core).
    pub extreme_margin: f32,
    /// The same for the saturation channel (max − min of R, G, B; absolute, 0..1): a coloured
    /// pen line or ring on grey or differently coloured ground. Default 0.2.
    pub min_colour_contrast: f32,
    /// ... whose pixels are at least this saturated. Default 0.4.
    pub min_saturation: f32,
    /// The rise must be at least this many times the robust spread of the surroundings ring:
    /// a mark is drawn over the image and stands out from whatever lies under it; a bright
    /// grain of gravel or a blade of grass does not stand out from its like neighbours. Default 4.
    pub min_isolation: f32,
    /// At most this share of the rise may remain 2 px outside the stroke: rendered pixels end
    /// within their anti-aliased rim, highlights and anatomy fade. Default 0.12: on ground
    /// whose noise is even about its median the lower quartile 2 px out lies at or below the
    /// ring's median, so a drawn mark's fade is about 0 (0.01 or less for 95 in 100 of the
    /// test-drawn marks); 0.12 leaves room for a mark blurred by a resize (regions_precision.rs
    /// draws some so). It was 0.25; 0.12 was chosen with the tuning set of clean photographs in
    /// view (its lone glyph-like false finds fade by 0.10 to 0.16).
    pub max_fade: f32,
    /// The brighter half of a mark's pixels (its core, drawn in one ink) spreads by at most
    /// this (robust spread, in units of the value range; absolute for saturation). Default 0.02
    /// (about 5 grey levels of 255): a photograph's highlights, mortar lines and coin reliefs
    /// vary along their length; a clipped highlight may not, and is the known weak spot. The
    /// value was chosen on the tuning set of tests/suite/regions_precision.rs (false finds'
    /// cores spread by 0.012 at the median, 95 in 100 drawn marks' by at most 0.015; it was
    /// 0.03 before), so only the held-out set there says how it carries to other pictures.
    pub max_core_spread: f32,
    /// Smallest glyph or sticker (longer box side, pixels). Default 5.
    pub min_px: usize,
    /// A glyph's box is at least this many pixels on its shorter side too: the smallest legible
    /// pixel fonts are 3 px wide and 5 px high (common practice; the demo's font is 3×5), so a
    /// component 1 or 2 px across is a scratch, a hair or a highlight's streak, not a letter.
    /// Default 3.
    pub glyph_min_side_px: usize,
    /// Largest glyph, as a share of the image's shorter side. Default 0.2.
    pub glyph_max_fraction: f32,
    /// A glyph's stroke is at most this share of its size (letters are stroked, a filled disc
    /// has a stroke as wide as itself). Default 0.35.
    pub glyph_max_thinness: f32,
    /// Glyphs join one region when the gap between their boxes is at most this many glyph
    /// sizes (the letters of one marker). Default 1.2.
    pub group_gap: f32,
    /// A channel with more components than this (of at least `min_px`) that rise clearly over
    /// an even surrounding (contrast and isolation, whatever their core) is texture, not marks,
    /// and gives no glyphs or annotations (rulers, found first, are kept). Default 12.
    pub max_marks_per_channel: usize,
    /// Drawn annotations are at least this long (longer box side, pixels). Default 16.
    pub annotation_min_px: usize,
    /// ... and stroked at most this share of their size: a reader's line or ring is thin next
    /// to its length (the pixel font's letters are 1/7, so they stay glyphs). Default 0.1.
    pub annotation_max_thinness: f32,
    /// An annotation whose largest enclosed hole is at least this share of its box is a ring.
    /// Default 0.3.
    pub ring_min_hole: f32,
    /// Largest annotation, ruler or sticker, as a share of the image's shorter side: a ring
    /// around the whole picture is the picture's own outline (the Shepp-Logan skull). Default 0.6.
    pub max_size_fraction: f32,
    /// Rulers: at least this many ticks ... Default 5.
    pub ruler_min_ticks: usize,
    /// ... on a run at least this long (pixels) ... Default 24.
    pub ruler_min_len: usize,
    /// ... spaced evenly: every gap within this share of the median gap. Default 0.2.
    pub ruler_spacing_tolerance: f32,
    /// Separate ticks (no baseline) join one ruler when their boxes are at most this many
    /// pixels apart. Default 6.
    pub ruler_gap_px: usize,
    /// Stickers and pen blobs: the largest, as a share of the image's shorter side (also the
    /// top-hat that lifts them off their background). Default 0.3.
    pub sticker_max_fraction: f32,
    /// ... filled: area at least this share of the box (a disc is 0.79). Default 0.5.
    pub sticker_min_fill: f32,
    /// ... flat inside: robust spread inside at most this share of the rise (a printed or
    /// inked blob is one colour; a coin, a stone or a star is shaded). Default 0.12.
    pub sticker_max_inner_spread: f32,
    /// ... and, for bright or dark blobs on a grey image, within this share of the value range
    /// of the image's extreme (lead markers and labels are the brightest or darkest thing in a
    /// radiograph). Default 0.15.
    pub sticker_extreme_margin: f32,
}

impl Default for FieldMarkSettings {
    fn default() -> Self {
        FieldMarkSettings {
            enabled: false,
            rulers: true,
            max_stroke_px: 8,
            min_contrast: 0.25,
            extreme_margin: 0.25,
            min_colour_contrast: 0.2,
            min_saturation: 0.4,
            min_isolation: 4.0,
            max_fade: 0.12,
            max_core_spread: 0.02,
            min_px: 5,
            glyph_min_side_px: 3,
            glyph_max_fraction: 0.2,
            glyph_max_thinness: 0.35,
            group_gap: 1.2,
            max_marks_per_channel: 12,
            annotation_min_px: 16,
            annotation_max_thinness: 0.1,
            ring_min_hole: 0.3,
            max_size_fraction: 0.6,
            ruler_min_ticks: 5,
            ruler_min_len: 24,
            ruler_spacing_tolerance: 0.2,
            ruler_gap_px: 6,
            sticker_max_fraction: 0.3,
            sticker_min_fill: 0.5,
            sticker_max_inner_spread: 0.12,
            sticker_extreme_margin: 0.15,
        }
    }
}

/// Growing a found region's mask for removal ([`super::grow`]): outward from the region, one
/// pixel ring at a time, taking the ring's pixels that do not look like the surroundings (a
/// plate's edge, an anti-aliased rim), until the ring looks like the surroundings or the limit
/// is reached. A fill then starts from pixels the mark never touched.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct GrowSettings {
    pub enabled: bool,
    /// Growth stops after this many rings (pixels) whatever the rings look like. Default 8:
    /// a plate or rim a few pixels wider than the found strokes is covered; growth never runs
    /// far into the anatomy next to a mark.
    pub max_px: usize,
    /// The surroundings are the ring this many pixels wide just beyond the farthest growth
    /// (`max_px` + 2 px from the found region). Default 4.
    pub outer_width_px: usize,
    /// A ring pixel is unlike the surroundings when it differs from their median by more than
    /// this many robust spreads ... Default 3 (common practice for an outlier under a
    /// Gaussian-like spread).
    pub tolerance: f32,
    /// ... and by more than this (0..1 units), so flat ground does not make every tiny
    /// difference an outlier. Default 0.03 (about 8 grey levels of 255).
    pub min_step: f32,
    /// The ring looks like the surroundings when at most this share of its pixels are unlike
    /// them (texture has a tail; a plate's side or a rim does not hide in it). Default 0.05.
    pub noise_share: f32,
    /// The grown mask is widened by this many pixels at the end, so the fill's boundary lies
    /// beyond a faint rim too small to count as unlike. Default 1.
    pub margin_px: usize,
}

impl Default for GrowSettings {
    fn default() -> Self {
        GrowSettings { enabled: true, max_px: 8, outer_width_px: 4, tolerance: 3.0, min_step: 0.03, noise_share: 0.05, margin_px: 1 }
    }
}
