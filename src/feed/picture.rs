//! Images as spurion sees them: H×W×C float pixels in 0..1, with where they came from.

use std::path::{Path, PathBuf};
use std::sync::Arc;

use anyhow::{Context, Result, bail};
use ndarray::{Array2, Array3, Axis};

use super::dicom::{DicomImage, is_dicom, read_dicom};
use super::window::{ResolvedWindow, Windowing, apply_plain, resolve};

/// The window a DICOM image gets when the feed card names none: the file's first window (or VOI
/// LUT Sequence item) when it has one, as a viewer would show it; else its lowest..highest value.
pub fn default_dicom_window(image: &DicomImage) -> Windowing {
    if image.voi.windows.is_empty() && image.voi.tables.is_empty() { Windowing::MinMax } else { Windowing::File { index: 0 } }
}

fn check_finite(pixels: &Array3<f32>) -> Result<()> {
    if let Some(((y, x, c), v)) = pixels.indexed_iter().find(|(_, v)| !v.is_finite()) {
        bail!("the image holds a value that is not a number ({v}) at x {x}, y {y}, channel {c}; export it again with finite values");
    }
    Ok(())
}

/// Image file endings spurion opens (by content, the ending only helps folder listings). Files
/// with no ending are taken too when they hold DICOM.
pub const IMAGE_ENDINGS: &[&str] = &["png", "jpg", "jpeg", "tif", "tiff", "bmp", "dcm", "dicom"];

/// How a file becomes a picture: which frame of a multi-frame DICOM file, and which window turns
/// stored values into 0..1 (`None`: the file's first window for DICOM, else its lowest..highest
/// value; all 16-bit values for 16-bit PNG and TIFF). 8-bit images are always v / 255.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct OpenOptions {
    pub frame: usize,
    pub window: Option<Windowing>,
}

/// An opened image. `pixels` is H×W×C with C = 1 (grey) or 3 (RGB), values in 0..1: what the
/// model is fed, before resizing and normalisation.
#[derive(Clone, Debug)]
pub struct Picture {
    pub path: Option<PathBuf>,
    pub pixels: Array3<f32>,
    /// Bits per sample in the file (8 or 16, DICOM's bits stored); floats are reported as 32.
    pub bit_depth: u8,
    /// The window that made `pixels` from the stored values (DICOM and 16-bit images).
    pub window: Option<ResolvedWindow>,
    /// The DICOM file the picture came from. Its patient-identifying attributes stay inside
    /// (`DicomImage::identifying`); nothing written from a picture reads them unless asked to.
    pub dicom: Option<Arc<DicomImage>>,
}

impl Picture {
    /// A picture of `pixels` (H×W×C, 0..1) from no file.
    pub fn new(pixels: Array3<f32>, bit_depth: u8) -> Picture {
        Picture { path: None, pixels, bit_depth, window: None, dicom: None }
    }

    /// The same picture (path, source) with other pixels: a painted-out copy, say.
    pub fn with_pixels(&self, pixels: Array3<f32>) -> Picture {
        Picture { pixels, ..self.clone() }
    }

    /// Opens PNG (8/16 bit), JPEG, TIFF, BMP or DICOM with the default options.
    pub fn open(path: &Path) -> Result<Picture> {
        Self::open_with(path, &OpenOptions::default())
    }

    /// Opens an image file; alpha is dropped, grey+alpha becomes grey. DICOM is recognised by
    /// its content (with or without preamble and file meta group) or a .dcm ending.
    pub fn open_with(path: &Path, opts: &OpenOptions) -> Result<Picture> {
        let bytes = std::fs::read(path).with_context(|| format!("cannot read image {}", path.display()))?;
        let ending = path.extension().map(|e| e.to_string_lossy().to_ascii_lowercase());
        let mut p = if is_dicom(&bytes) || matches!(ending.as_deref(), Some("dcm" | "dicom")) {
            Self::from_dicom(path, opts)?
        } else {
            if opts.frame != 0 {
                bail!("{} is not a multi-frame DICOM file; there is only frame 0 (drop --frame)", path.display());
            }
            Self::decode_with_window(&bytes, opts.window.as_ref()).with_context(|| format!("image {}", path.display()))?
        };
        p.path = Some(path.to_path_buf());
        Ok(p)
    }

    fn from_dicom(path: &Path, opts: &OpenOptions) -> Result<Picture> {
        let image = read_dicom(path, opts.frame)?;
        let asked = opts.window.clone().unwrap_or_else(|| default_dicom_window(&image));
        let window = resolve(&image, &asked).with_context(|| format!("windowing {}", path.display()))?;
        let pixels = image.values.mapv(|v| window.map(f64::from(v)) as f32);
        check_finite(&pixels)?;
        Ok(Picture {
            path: None,
            pixels,
            bit_depth: image.bits_stored.min(255) as u8,
            window: Some(window),
            dicom: Some(Arc::new(image)),
        })
    }

    /// Decodes image bytes (format sniffed from the content) with the default window.
    pub fn decode(bytes: &[u8]) -> Result<Picture> {
        Self::decode_with_window(bytes, None)
    }

    /// Decodes PNG, JPEG, TIFF or BMP bytes; 16-bit images go through `window` (all values by
    /// default).
    pub fn decode_with_window(bytes: &[u8], window: Option<&Windowing>) -> Result<Picture> {
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
            D::ImageLuma16(_) | D::ImageLumaA16(_) | D::ImageRgb16(_) | D::ImageRgba16(_) => {
                let raw = if matches!(img, D::ImageLuma16(_) | D::ImageLumaA16(_)) {
                    let g = img.to_luma16();
                    Array3::from_shape_fn((h, w, 1), |(y, x, _)| g.get_pixel(x as u32, y as u32)[0])
                } else {
                    let c = img.to_rgb16();
                    Array3::from_shape_fn((h, w, 3), |(y, x, k)| c.get_pixel(x as u32, y as u32)[k])
                };
                let asked = window.cloned().unwrap_or(Windowing::FullRange);
                let (pixels, resolved) = apply_plain(&raw, &asked)?;
                return Ok(Picture { path: None, pixels, bit_depth: 16, window: Some(resolved), dicom: None });
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
        check_finite(&pixels)?;
        Ok(Picture::new(pixels, bit_depth))
    }

    /// A picture from a grey H×W array in 0..1.
    pub fn from_gray(gray: Array2<f32>) -> Picture {
        Picture::new(gray.insert_axis(Axis(2)), 32)
    }

    /// What the file itself declares about burned-in text (DICOM's Burned In Annotation).
    pub fn burned_in_annotation(&self) -> Option<bool> {
        self.dicom.as_ref().and_then(|d| d.burned_in_annotation)
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

/// Images in a folder (not recursive), sorted by name: files with an image ending, and files
/// with no ending that hold DICOM (as archives often store them).
pub fn list_images(dir: &Path) -> Result<Vec<PathBuf>> {
    let rd = std::fs::read_dir(dir).with_context(|| format!("cannot list folder {}", dir.display()))?;
    let mut out: Vec<PathBuf> = rd.filter_map(|e| e.ok().map(|e| e.path())).filter(|p| p.is_file() && is_image_file(p)).collect();
    out.sort();
    Ok(out)
}

/// Whether spurion opens `path` as an image: by its ending, or by DICOM content when it has none.
pub fn is_image_file(path: &Path) -> bool {
    match path.extension() {
        Some(e) => IMAGE_ENDINGS.contains(&e.to_string_lossy().to_ascii_lowercase().as_str()),
        None => {
            use std::io::Read;
            let mut head = [0u8; 132];
            std::fs::File::open(path).and_then(|mut f| f.read(&mut head)).is_ok_and(|n| is_dicom(&head[..n]))
        }
    }
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
