//! `regions.json` of `spurion regions`: the regions found in one image without any model, and
//! one mask PNG per region.

use std::path::Path;

use anyhow::{Context, Result};
use ndarray::Array2;
use serde::{Deserialize, Serialize};

use super::{FinderSettings, MarkShape, MaskUsed, Region, RegionKind, Side, find_regions_in};

/// One found region as written to `regions.json`.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FoundRegion {
    pub kind: RegionKind,
    /// Burned-in marks: the shape the finder saw.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub mark: Option<MarkShape>,
    pub label: String,
    pub detail: String,
    #[serde(rename = "box")]
    pub bbox: [usize; 4],
    pub area_fraction: f64,
    pub confidence: f32,
    pub reason: String,
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub sides: Vec<Side>,
    /// File name of the mask PNG (white = region), relative to `regions.json`.
    pub mask: Option<String>,
    /// The mask a removal would paint out: the region grown to the whole mark.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub removal_mask: Option<MaskUsed>,
}

/// The content of `regions.json`.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct RegionsFile {
    pub image: String,
    pub width: usize,
    pub height: usize,
    pub settings: FinderSettings,
    pub regions: Vec<FoundRegion>,
    pub caution: String,
}

/// What the file says of itself: how the regions were found, then the caution every output carries.
fn caution() -> String {
    format!("Regions are found by simple image processing and are hints for a person to check, not verdicts. {}", crate::CAUTION)
}

/// Loads an image file as luminance (H×W, 0..1), 8- or 16-bit, grey or colour, the way the
/// rest of spurion reads pictures.
pub fn load_luminance(path: &Path) -> Result<Array2<f32>> {
    Ok(crate::feed::Picture::open(path)?.luminance())
}

/// Builds the `regions.json` content (mask names filled in by the caller that writes them).
pub fn regions_file(image: &Path, luma: &Array2<f32>, regions: &[Region], settings: &FinderSettings) -> RegionsFile {
    RegionsFile {
        image: image.display().to_string(),
        width: luma.dim().1,
        height: luma.dim().0,
        settings: settings.clone(),
        regions: regions
            .iter()
            .map(|r| FoundRegion {
                kind: r.kind,
                mark: r.mark,
                removal_mask: r.grown.as_ref().map(|g| g.used.clone()),
                label: r.label(),
                detail: r.detail.clone(),
                bbox: r.bbox,
                area_fraction: r.area_fraction(),
                confidence: r.confidence,
                reason: r.reason.clone(),
                sides: r.sides.clone(),
                mask: None,
            })
            .collect(),
        caution: caution(),
    }
}

fn write_mask(path: &Path, mask: &Array2<bool>) -> Result<()> {
    let (h, w) = mask.dim();
    let px: Vec<u8> = mask.iter().map(|&m| if m { 255 } else { 0 }).collect();
    let buf = image::GrayImage::from_raw(w as u32, h as u32, px).context("mask buffer size")?;
    buf.save(path).with_context(|| format!("cannot write mask {}", path.display()))
}

/// Finds regions in `image` and writes the mask PNGs and `regions.json` into `dir` (created if
/// missing). Returns what `regions.json` holds.
pub fn write_regions(image: &Path, dir: &Path, settings: &FinderSettings) -> Result<RegionsFile> {
    let picture = crate::feed::Picture::open(image)?;
    let luma = picture.luminance();
    let regions = find_regions_in(&picture.pixels, settings);
    std::fs::create_dir_all(dir)
        .with_context(|| format!("cannot create output folder {} (check permissions or choose another --out)", dir.display()))?;
    let mut file = regions_file(image, &luma, &regions, settings);
    for (i, (r, f)) in regions.iter().zip(file.regions.iter_mut()).enumerate() {
        let name = format!("region-{:02}-{}.png", i + 1, r.kind.slug());
        write_mask(&dir.join(&name), &r.mask)?;
        f.mask = Some(name);
    }
    let json = dir.join("regions.json");
    std::fs::write(&json, serde_json::to_string_pretty(&file)? + "\n")
        .with_context(|| format!("cannot write {}", json.display()))?;
    Ok(file)
}
