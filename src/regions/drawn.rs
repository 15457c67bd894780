//! Drawn regions: rectangles and polygons a person draws, or loads from a file.
//!
//! The ledger ([`crate::ledger`]) keeps drawn regions per image in these shapes; `spurion ledger
//! draw` adds them from the command line, and `spurion explain --ledger` reads them alongside
//! the found regions (figures, removal, flag). This file form stays as a way to bring shapes in
//! and out (`spurion ledger draw --from` / `--to`). The inspector draws them on the slide (a box
//! or a freehand outline) and keeps them in its ledger.
//!
//! # File format (`*.drawn.json`, spurion's own; not `spurion regions`' `regions.json`)
//!
//! ```json
//! {
//!   "format": "spurion-drawn-regions",
//!   "version": 1,
//!   "image_size": [256, 256],
//!   "regions": [
//!     { "label": "ruler", "shape": "rect", "box": [200, 10, 250, 30] },
//!     { "label": "arrow", "shape": "polygon", "points": [[20, 20], [60, 24], [22, 40]] }
//!   ]
//! }
//! ```
//!
//! Coordinates are image pixels, x to the right (column), y down (row), with the top-left corner
//! of the image at (0, 0) and pixel (row r, column c) covering the square [c, c+1) × [r, r+1).
//! `box` is `[x0, y0, x1, y1]` with the far edges exclusive, so `[0, 0, 2, 1]` is the two
//! leftmost pixels of the first row. A polygon lists its vertices in order (either direction,
//! closed implicitly); a pixel belongs to it when its centre (c + 0.5, r + 0.5) is inside by the
//! even–odd rule. Numbers may be fractional. `image_size` (`[width, height]`) is optional; when
//! given, loading the file for an image of another size is an error rather than a silent
//! misplacement. Shapes partly outside the image are clipped; a shape with no pixel inside the
//! image is an error naming it.

use std::path::Path;

use anyhow::{Context, Result, bail};
use ndarray::Array2;
use serde::{Deserialize, Serialize};

use super::{Region, RegionKind};

pub const FORMAT: &str = "spurion-drawn-regions";

/// A drawn shape.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "shape", rename_all = "kebab-case")]
pub enum Shape {
    Rect {
        #[serde(rename = "box")]
        bbox: [f64; 4],
    },
    Polygon {
        points: Vec<[f64; 2]>,
    },
}

/// A drawn shape with the person's label.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct DrawnShape {
    #[serde(default)]
    pub label: String,
    #[serde(flatten)]
    pub shape: Shape,
}

/// The file of drawn regions.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DrawnFile {
    pub format: String,
    pub version: u32,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub image_size: Option<[usize; 2]>,
    pub regions: Vec<DrawnShape>,
}

impl DrawnFile {
    pub fn new(image_size: Option<[usize; 2]>, regions: Vec<DrawnShape>) -> DrawnFile {
        DrawnFile { format: FORMAT.to_string(), version: 1, image_size, regions }
    }

    /// Rasterises every shape for an image of `height`×`width`.
    pub fn to_regions(&self, height: usize, width: usize) -> Result<Vec<Region>> {
        if let Some([fw, fh]) = self.image_size
            && (fw, fh) != (width, height)
        {
            bail!(
                "the drawn regions were made for a {fw}×{fh} image but this image is {width}×{height}; \
                 draw them again on this image or fix \"image_size\""
            );
        }
        self.regions
            .iter()
            .enumerate()
            .map(|(i, s)| drawn_region(s, height, width).with_context(|| format!("drawn region {i} (\"{}\")", s.label)))
            .collect()
    }
}

/// Reads a drawn-regions file, with errors that name the file and what to fix.
pub fn load_drawn(path: &Path) -> Result<DrawnFile> {
    let text = std::fs::read_to_string(path)
        .with_context(|| format!("cannot read drawn regions file {}", path.display()))?;
    let file: DrawnFile = serde_json::from_str(&text).with_context(|| {
        format!(
            "{} is not a valid drawn regions file (expected {{\"format\": \"{FORMAT}\", \"version\": 1, \
             \"regions\": [...]}}; see the spurion docs on drawn regions)",
            path.display()
        )
    })?;
    if file.format != FORMAT {
        bail!("{}: \"format\" is \"{}\", expected \"{FORMAT}\"", path.display(), file.format);
    }
    if file.version != 1 {
        bail!("{}: version {} is not known to this spurion (it reads version 1)", path.display(), file.version);
    }
    Ok(file)
}

/// Writes a drawn-regions file (pretty JSON).
pub fn save_drawn(path: &Path, file: &DrawnFile) -> Result<()> {
    let text = serde_json::to_string_pretty(file)?;
    std::fs::write(path, text + "\n").with_context(|| format!("cannot write drawn regions file {}", path.display()))
}

/// Rasterises one drawn shape.
pub fn drawn_region(shape: &DrawnShape, height: usize, width: usize) -> Result<Region> {
    let mask = match &shape.shape {
        Shape::Rect { bbox } => rect_mask(*bbox, height, width)?,
        Shape::Polygon { points } => polygon_mask(points, height, width)?,
    };
    let what = match &shape.shape {
        Shape::Rect { .. } => "rectangle",
        Shape::Polygon { .. } => "polygon",
    };
    let Some(r) = Region::from_mask(
        RegionKind::DrawnRegion,
        mask,
        1.0,
        shape.label.clone(),
        format!("{what} drawn by a person"),
    ) else {
        bail!("the {what} covers no pixel of the {width}×{height} image (is it outside the image, or empty?)");
    };
    Ok(r)
}

impl Shape {
    /// Whether the shape is well formed (finite numbers, a box with x0 ≤ x1 and y0 ≤ y1, a
    /// polygon of three points or more), whatever image it goes on.
    pub fn check(&self) -> Result<()> {
        match self {
            Shape::Rect { bbox } => check_box(*bbox),
            Shape::Polygon { points } => check_points(points),
        }
    }
}

fn check_box(b: [f64; 4]) -> Result<()> {
    if b.iter().any(|v| !v.is_finite()) {
        bail!("rectangle box {b:?} has a value that is not a finite number");
    }
    if b[2] < b[0] || b[3] < b[1] {
        bail!("rectangle box {b:?} has x1 < x0 or y1 < y0 (expected [x0, y0, x1, y1])");
    }
    Ok(())
}

fn check_points(points: &[[f64; 2]]) -> Result<()> {
    if points.len() < 3 {
        bail!("a polygon needs at least 3 points, got {}", points.len());
    }
    if points.iter().flatten().any(|v| !v.is_finite()) {
        bail!("a polygon point is not a finite number");
    }
    Ok(())
}

/// Pixels whose centres lie in [x0, x1) × [y0, y1).
pub fn rect_mask(b: [f64; 4], height: usize, width: usize) -> Result<Array2<bool>> {
    check_box(b)?;
    Ok(Array2::from_shape_fn((height, width), |(r, c)| {
        let (cx, cy) = (c as f64 + 0.5, r as f64 + 0.5);
        cx >= b[0] && cx < b[2] && cy >= b[1] && cy < b[3]
    }))
}

/// Pixels whose centres lie inside the polygon by the even–odd rule.
pub fn polygon_mask(points: &[[f64; 2]], height: usize, width: usize) -> Result<Array2<bool>> {
    check_points(points)?;
    let mut mask = Array2::from_elem((height, width), false);
    let n = points.len();
    let mut xs: Vec<f64> = Vec::new();
    for r in 0..height {
        let cy = r as f64 + 0.5;
        xs.clear();
        for i in 0..n {
            let [x0, y0] = points[i];
            let [x1, y1] = points[(i + 1) % n];
            // Half-open in y so a vertex on the scan line is counted once.
            if (y0 <= cy) != (y1 <= cy) {
                xs.push(x0 + (cy - y0) * (x1 - x0) / (y1 - y0));
            }
        }
        xs.sort_by(|a, b| a.total_cmp(b));
        for pair in xs.chunks(2) {
            if let [a, b] = pair {
                // Columns whose centre c + 0.5 lies in [a, b).
                let c0 = (a - 0.5).ceil().max(0.0) as usize;
                let c1 = ((b - 0.5).ceil().max(0.0) as usize).min(width);
                for c in c0..c1 {
                    mask[(r, c)] = true;
                }
            }
        }
    }
    Ok(mask)
}
