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
