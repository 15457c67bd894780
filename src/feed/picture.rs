//! Images as spurion sees them: H×W×C float pixels in 0..1, with where they came from.

use std::path::{Path, PathBuf};

use anyhow::{Context, Result, bail};
use ndarray::{Array2, Array3, Axis};

/// Image file endings spurion opens (by content, the ending only helps folder listings).
pub const IMAGE_ENDINGS: &[&str] = &["png", "jpg", "jpeg", "tif", "tiff", "bmp"];

/// An opened image. `pixels` is H×W×C with C = 1 (grayscale) or 3 (RGB), values in 0..1.
#[derive(Clone, Debug)]
pub struct Picture {
    pub path: Option<PathBuf>,
    pub pixels: Array3<f32>,
    /// Bits per sample in the file (8 or 16); floats are reported as 32.
    pub bit_depth: u8,
}

impl Picture {
    /// Opens PNG (8/16 bit), JPEG, TIFF or BMP. Alpha is dropped; gray+alpha becomes gray.
    pub fn open(path: &Path) -> Result<Picture> {
        let bytes = std::fs::read(path).with_context(|| format!("cannot read image {}", path.display()))?;
        Self::decode(&bytes).with_context(|| format!("image {}", path.display())).map(|mut p| {
            p.path = Some(path.to_path_buf());
            p
        })
    }

    /// Decodes image bytes (format sniffed from the content).
    pub fn decode(bytes: &[u8]) -> Result<Picture> {
        let reader = image::ImageReader::new(std::io::Cursor::new(bytes))
            .with_guessed_format()
            .context("cannot read the image header")?;
        if reader.format().is_none() {
            bail!("not an image spurion can read (PNG, JPEG, TIFF or BMP expected)");
        }
        let img = reader.decode().map_err(|e| anyhow::anyhow!("the image data is damaged or unsupported: {e}"))?;
        use image::DynamicImage as D;
        let (w, h) = (img.width() as usize, img.height() as usize);
        if w == 0 || h == 0 {
            bail!("the image is empty (0 pixels)");
        }
        let (pixels, bit_depth) = match &img {
            D::ImageLuma8(_) | D::ImageLumaA8(_) => {
                let g = img.to_luma8();
                (Array3::from_shape_fn((h, w, 1), |(y, x, _)| g.get_pixel(x as u32, y as u32)[0] as f32 / 255.0), 8)
            }
            D::ImageLuma16(_) | D::ImageLumaA16(_) => {
                let g = img.to_luma16();
                (Array3::from_shape_fn((h, w, 1), |(y, x, _)| g.get_pixel(x as u32, y as u32)[0] as f32 / 65535.0), 16)
            }
            D::ImageRgb16(_) | D::ImageRgba16(_) => {
                let c = img.to_rgb16();
                (Array3::from_shape_fn((h, w, 3), |(y, x, k)| c.get_pixel(x as u32, y as u32)[k] as f32 / 65535.0), 16)
            }
            D::ImageRgb32F(_) | D::ImageRgba32F(_) => {
                let c = img.to_rgb32f();
                (Array3::from_shape_fn((h, w, 3), |(y, x, k)| c.get_pixel(x as u32, y as u32)[k].clamp(0.0, 1.0)), 32)
            }
            _ => {
                let c = img.to_rgb8();
                (Array3::from_shape_fn((h, w, 3), |(y, x, k)| c.get_pixel(x as u32, y as u32)[k] as f32 / 255.0), 8)
            }
        };
        if let Some(((y, x, c), v)) = pixels.indexed_iter().find(|(_, v)| !v.is_finite()) {
            bail!("the image holds a value that is not a number ({v}) at x {x}, y {y}, channel {c}; export it again with finite values");
        }
        Ok(Picture { path: None, pixels, bit_depth })
    }

    /// A picture from a gray H×W array in 0..1.
    pub fn from_gray(gray: Array2<f32>) -> Picture {
        Picture { path: None, pixels: gray.insert_axis(Axis(2)), bit_depth: 32 }
    }

    pub fn height(&self) -> usize {
        self.pixels.shape()[0]
    }
    pub fn width(&self) -> usize {
        self.pixels.shape()[1]
    }
    pub fn channels(&self) -> usize {
        self.pixels.shape()[2]
    }

    /// Luminance H×W in 0..1 (ITU-R BT.601 luma weights for RGB: common practice).
    pub fn luminance(&self) -> Array2<f32> {
        luminance(&self.pixels)
    }

    /// A short name for tables and titles: the file name, or "image".
    pub fn name(&self) -> String {
        self.path
            .as_ref()
            .and_then(|p| p.file_name())
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_else(|| "image".into())
    }
}

/// BT.601 luma weights (common practice for grayscale conversion).
pub const LUMA: [f32; 3] = [0.299, 0.587, 0.114];

/// Luminance of an H×W×C array (C = 1 returns the channel itself).
pub fn luminance(px: &Array3<f32>) -> Array2<f32> {
    if px.shape()[2] == 1 {
        return px.index_axis(Axis(2), 0).to_owned();
    }
    let (h, w) = (px.shape()[0], px.shape()[1]);
    Array2::from_shape_fn((h, w), |(y, x)| LUMA[0] * px[[y, x, 0]] + LUMA[1] * px[[y, x, 1]] + LUMA[2] * px[[y, x, 2]])
}

/// Images in a folder (not recursive), sorted by name.
pub fn list_images(dir: &Path) -> Result<Vec<PathBuf>> {
    let rd = std::fs::read_dir(dir).with_context(|| format!("cannot list folder {}", dir.display()))?;
    let mut out: Vec<PathBuf> = rd
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| {
            p.is_file()
                && p.extension()
                    .map(|e| IMAGE_ENDINGS.contains(&e.to_string_lossy().to_ascii_lowercase().as_str()))
                    .unwrap_or(false)
        })
        .collect();
    out.sort();
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sixteen_bit_png_keeps_its_precision() {
        let mut img = image::ImageBuffer::<image::Luma<u16>, Vec<u16>>::new(3, 2);
        img.put_pixel(1, 0, image::Luma([65535]));
        img.put_pixel(2, 1, image::Luma([257]));
        let mut bytes = Vec::new();
        image::DynamicImage::ImageLuma16(img)
            .write_to(&mut std::io::Cursor::new(&mut bytes), image::ImageFormat::Png)
            .unwrap();
        let p = Picture::decode(&bytes).unwrap();
        assert_eq!(p.bit_depth, 16);
        assert_eq!(p.pixels.shape(), &[2, 3, 1]);
        assert_eq!(p.pixels[[0, 1, 0]], 1.0);
        assert!((p.pixels[[1, 2, 0]] - 257.0 / 65535.0).abs() < 1e-7);
    }

    #[test]
    fn not_an_image_says_so() {
        let e = Picture::decode(b"this is a text file").unwrap_err();
        assert!(format!("{e:#}").contains("not an image"), "{e:#}");
    }
}
