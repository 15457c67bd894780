//! Turning a picture and a map into pixels and line segments for egui. Presentation only: the
//! colours come from `spurion::render`, the top sets and quantiles from `methods::agree`.

use egui::{Color32, ColorImage};
use ndarray::Array2;

use crate::feed::Picture;
use crate::render;
use crate::sign::Sign;

/// Largest texture side the inspector uploads; bigger images are shown subsampled (the hover
/// readout still reads the full-resolution arrays).
pub const MAX_TEXTURE_SIDE: usize = 2048;

/// Subsampling step so that neither side exceeds [`MAX_TEXTURE_SIDE`].
pub fn texture_step(h: usize, w: usize) -> usize {
    h.max(w).div_ceil(MAX_TEXTURE_SIDE).max(1)
}

fn subsample_dims(h: usize, w: usize) -> (usize, usize, usize) {
    let step = texture_step(h, w);
    (step, h.div_ceil(step), w.div_ceil(step))
}

/// The picture as an opaque texture image.
pub fn picture_image(pic: &Picture) -> ColorImage {
    let (h, w) = (pic.height(), pic.width());
    let (step, th, tw) = subsample_dims(h, w);
    let c = pic.channels();
    let g = |y: usize, x: usize, k: usize| (pic.pixels[[y, x, k.min(c - 1)]].clamp(0.0, 1.0) * 255.0).round() as u8;
    let mut px = Vec::with_capacity(th * tw);
    for ty in 0..th {
        for tx in 0..tw {
            let (y, x) = (ty * step, tx * step);
            px.push(Color32::from_rgb(g(y, x, 0), g(y, x, 1), g(y, x, 2)));
        }
    }
    ColorImage::new([tw, th], px)
}

/// The tint layer: each pixel the map colour (from `render::shade`) with its strength as alpha,
/// shaped like `render::tint` does (strength^0.7). The slide draws it over the picture with the
/// opacity as a multiplier, so moving the opacity slider costs no recomputation.
pub fn tint_layer(map: &Array2<f32>, scale: f32, sign: Sign) -> ColorImage {
    let (h, w) = map.dim();
    let (step, th, tw) = subsample_dims(h, w);
    let mut px = Vec::with_capacity(th * tw);
    for ty in 0..th {
        for tx in 0..tw {
            let ([r, g, b], a) = render::shade(map[[ty * step, tx * step]], scale, sign);
            let a = (a.clamp(0.0, 1.0).powf(0.7) * 255.0).round() as u8;
            px.push(Color32::from_rgba_unmultiplied(r, g, b, a));
        }
    }
    ColorImage::new([tw, th], px)
}

/// The reveal layer: transparent over the top share, dark elsewhere.
pub fn reveal_layer(top: &Array2<bool>) -> ColorImage {
    let (h, w) = top.dim();
    let (step, th, tw) = subsample_dims(h, w);
    let mut px = Vec::with_capacity(th * tw);
    for ty in 0..th {
        for tx in 0..tw {
            let keep = top[[ty * step, tx * step]];
            px.push(if keep { Color32::TRANSPARENT } else { Color32::from_rgba_unmultiplied(8, 10, 12, 235) });
        }
    }
    ColorImage::new([tw, th], px)
}

/// The colour ramp of the legend, `n` samples from the low end to the high end of the view.
pub fn legend_ramp(sign: Sign, n: usize) -> ColorImage {
    let px = (0..n)
        .map(|i| {
            let f = i as f32 / (n - 1).max(1) as f32;
            let ([r, g, b], _) = render::shade(render::ramp_value(sign, f), 1.0, sign);
            Color32::from_rgb(r, g, b)
        })
        .collect();
    ColorImage::new([n, 1], px)
}

/// Line colour for contours of a view: the strong end of its colour map.
pub fn contour_colour(sign: Sign) -> Color32 {
    let [r, g, b] = match sign {
        Sign::Opposing => render::opposing_colour(),
        Sign::Magnitude => render::sequential(1.0),
        _ => render::supporting_colour(),
    };
    Color32::from_rgb(r, g, b)
}

/// Outline of a mask as axis-aligned segments along pixel edges, in image pixel coordinates
/// (x right, y down; pixel (x, y) covers [x, x+1)×[y, y+1)). Collinear runs are merged.
pub fn mask_edges(mask: &Array2<bool>) -> Vec<[[f32; 2]; 2]> {
    let (h, w) = mask.dim();
    let at = |y: isize, x: isize| y >= 0 && x >= 0 && (y as usize) < h && (x as usize) < w && mask[[y as usize, x as usize]];
    let mut out = Vec::new();
    // Horizontal edges: between row y−1 and row y, for y in 0..=h.
    for y in 0..=h as isize {
        let mut run: Option<isize> = None;
        for x in 0..=w as isize {
            let edge = x < w as isize && at(y - 1, x) != at(y, x);
            match (edge, run) {
                (true, None) => run = Some(x),
                (false, Some(x0)) => {
                    out.push([[x0 as f32, y as f32], [x as f32, y as f32]]);
                    run = None;
                }
                _ => {}
            }
        }
    }
    // Vertical edges: between column x−1 and column x.
    for x in 0..=w as isize {
        let mut run: Option<isize> = None;
        for y in 0..=h as isize {
            let edge = y < h as isize && at(y, x - 1) != at(y, x);
            match (edge, run) {
                (true, None) => run = Some(y),
                (false, Some(y0)) => {
                    out.push([[x as f32, y0 as f32], [x as f32, y as f32]]);
                    run = None;
                }
                _ => {}
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn one_pixel_mask_has_four_edges() {
        let m = array![[false, false, false], [false, true, false], [false, false, false]];
        let mut e = mask_edges(&m);
        e.sort_by(|a, b| a.partial_cmp(b).unwrap());
        assert_eq!(
            e,
            vec![
                [[1.0, 1.0], [1.0, 2.0]],
                [[1.0, 1.0], [2.0, 1.0]],
                [[1.0, 2.0], [2.0, 2.0]],
                [[2.0, 1.0], [2.0, 2.0]],
            ]
        );
    }

    #[test]
    fn a_row_of_pixels_merges_into_long_edges() {
        let m = array![[true, true, true]];
        let e = mask_edges(&m);
        // Top, bottom (one segment each, 3 px long), left and right ends.
        assert_eq!(e.len(), 4);
        assert!(e.contains(&[[0.0, 0.0], [3.0, 0.0]]));
        assert!(e.contains(&[[0.0, 1.0], [3.0, 1.0]]));
    }
}
