//! The pictures of a sweep's files: each group's atlas, and the ranked images' thumbnails (the
//! picture on the model grid, and its supporting map tinted over it).

use anyhow::Result;
use ndarray::Array2;

use crate::feed::{FeedCard, Feeder, OpenOptions, Picture};
use crate::methods::defaults;

/// How to open the sweep's images again for their thumbnails: as the sweep fed them.
pub struct ThumbSource<'a> {
    pub card: &'a FeedCard,
    pub open: &'a OpenOptions,
}

pub fn png_bytes(img: &image::RgbImage) -> Result<Vec<u8>> {
    let mut bytes = vec![];
    img.write_to(&mut std::io::Cursor::new(&mut bytes), image::ImageFormat::Png)?;
    Ok(bytes)
}

/// The picture at `path` on the model's grid and `grid` (its map there) tinted over it, as
/// PNG bytes.
pub fn thumbnails(src: &ThumbSource<'_>, path: &std::path::Path, grid: &Array2<f32>) -> Result<(Vec<u8>, Vec<u8>)> {
    let picture = Picture::open_with(path, src.open)?;
    let feeder = Feeder::for_picture(src.card, &picture)?;
    let small = feeder.prepare(&picture.pixels)?;
    let plain = crate::render::picture_rgb(&small);
    if grid.dim() != (small.shape()[0], small.shape()[1]) {
        return Ok((png_bytes(&plain)?, png_bytes(&plain)?));
    }
    let scale = crate::render::robust_scale(grid);
    let tint = crate::render::tint(&small, grid, scale, defaults::SIGN, defaults::OPACITY);
    Ok((png_bytes(&plain)?, png_bytes(&tint)?))
}

/// An atlas as a picture: the sequential colour map from 0 to the atlas's largest value,
/// scaled up (nearest) to at least 256 pixels across.
pub fn atlas_picture(atlas: &Array2<f64>) -> image::RgbImage {
    let (h, w) = atlas.dim();
    let top = atlas.iter().cloned().fold(0.0, f64::max).max(f64::MIN_POSITIVE);
    let up = (256 / w.max(1)).max(1) as u32;
    image::RgbImage::from_fn(w as u32 * up, h as u32 * up, |x, y| {
        image::Rgb(crate::render::sequential((atlas[[(y / up) as usize, (x / up) as usize]] / top) as f32))
    })
}
