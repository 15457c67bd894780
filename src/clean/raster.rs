//! Cleaning a PNG, TIFF, BMP or JPEG file: its samples painted out under the regions and the
//! image written again in the same format, bit depth and channels. PNG, TIFF and BMP are
//! lossless, so every pixel outside the regions keeps its value; JPEG is lossy, so a cleaned
//! JPEG is re-encoded (quality 95) and its other pixels move a little too, which its manifest
//! line says.

use anyhow::{Context, Result, bail};
use image::{DynamicImage as D, ImageFormat};

use super::Cleaned;
use super::paint::{Painted, paint};
use crate::regions::Region;

/// JPEG quality of a re-encoded cleaned JPEG (common practice for a near-lossless save).
const JPEG_QUALITY: u8 = 95;

fn edit<T: Copy + Into<i64> + TryFrom<i64>>(buf: &mut [T], h: usize, w: usize, stride: usize, colours: usize, max: i64, regions: &[Region]) -> Painted {
    let values: Vec<i64> = (0..h * w).flat_map(|p| (0..colours).map(move |k| (p, k))).map(|(p, k)| buf[p * stride + k].into()).collect();
    let painted = paint(&values, h, w, colours, regions, (0, max));
    for &(i, v) in &painted.changes {
        let (p, k) = (i / colours, i % colours);
        if let Ok(x) = T::try_from(v) {
            buf[p * stride + k] = x;
        }
    }
    painted
}

/// `bytes` of a raster image with `regions` painted out, in the same format.
pub fn clean_raster(bytes: &[u8], regions: &[Region]) -> Result<Cleaned> {
    let reader = image::ImageReader::new(std::io::Cursor::new(bytes)).with_guessed_format().context("cannot read the image header")?;
    let format = reader.format().context("not an image spurion can read (PNG, JPEG, TIFF or BMP expected)")?;
    let mut img = reader.decode().map_err(|e| anyhow::anyhow!("the image data is damaged or unsupported: {e}"))?;
    let (w, h) = (img.width() as usize, img.height() as usize);
    let p = match &mut img {
        D::ImageLuma8(b) => edit(b, h, w, 1, 1, 255, regions),
        D::ImageLumaA8(b) => edit(b, h, w, 2, 1, 255, regions),
        D::ImageRgb8(b) => edit(b, h, w, 3, 3, 255, regions),
        D::ImageRgba8(b) => edit(b, h, w, 4, 3, 255, regions),
        D::ImageLuma16(b) => edit(b, h, w, 1, 1, 65535, regions),
        D::ImageLumaA16(b) => edit(b, h, w, 2, 1, 65535, regions),
        D::ImageRgb16(b) => edit(b, h, w, 3, 3, 65535, regions),
        D::ImageRgba16(b) => edit(b, h, w, 4, 3, 65535, regions),
        _ => bail!("the image holds floating-point samples, which spurion does not write back; convert it to 8 or 16 bits first"),
    };
    let mut out = std::io::Cursor::new(Vec::new());
    let mut note = String::new();
    match format {
        ImageFormat::Jpeg => {
            let enc = image::codecs::jpeg::JpegEncoder::new_with_quality(&mut out, JPEG_QUALITY);
            img.write_with_encoder(enc).context("cannot encode the cleaned JPEG")?;
            note = format!("JPEG is lossy: re-encoded at quality {JPEG_QUALITY}, so pixels outside the regions move a little too");
        }
        ImageFormat::Png | ImageFormat::Tiff | ImageFormat::Bmp => {
            img.write_to(&mut out, format).with_context(|| format!("cannot encode the cleaned {format:?} image"))?;
        }
        other => bail!("spurion does not write {other:?} images"),
    }
    Ok(Cleaned { bytes: out.into_inner(), painted: p.painted, changed: p.changed, fill: p.fill, note, burned_in_before: None, burned_in_after: None })
}
