//! Text on report pictures, drawn with the bundled DejaVu Sans (assets/fonts, free licence).

use std::sync::LazyLock;

use ab_glyph::{Font, FontRef, PxScale, ScaleFont};
use image::{Rgb, RgbImage};

static FONT: LazyLock<FontRef<'static>> = LazyLock::new(|| {
    FontRef::try_from_slice(include_bytes!("../../assets/fonts/DejaVuSans.ttf")).expect("bundled font parses")
});

/// Width in pixels of `s` at `size` pixels.
pub fn text_width(s: &str, size: f32) -> f32 {
    let f = FONT.as_scaled(PxScale::from(size));
    s.chars().map(|c| f.h_advance(f.glyph_id(c))).sum()
}

/// Draws `s` with its top-left at (x, y), blending `ink` by glyph coverage.
pub fn draw_text(img: &mut RgbImage, x: u32, y: u32, size: f32, s: &str, ink: Rgb<u8>) {
    let font = &*FONT;
    let scaled = font.as_scaled(PxScale::from(size));
    let mut pen = x as f32;
    let base = y as f32 + scaled.ascent();
    for c in s.chars() {
        let id = scaled.glyph_id(c);
        let glyph = id.with_scale_and_position(PxScale::from(size), ab_glyph::point(pen, base));
        pen += scaled.h_advance(id);
        if let Some(out) = font.outline_glyph(glyph) {
            let b = out.px_bounds();
            out.draw(|gx, gy, cov| {
                let (px, py) = (b.min.x as i64 + gx as i64, b.min.y as i64 + gy as i64);
                if px >= 0 && py >= 0 && (px as u32) < img.width() && (py as u32) < img.height() {
                    let p = img.get_pixel_mut(px as u32, py as u32);
                    for k in 0..3 {
                        p.0[k] = (p.0[k] as f32 * (1.0 - cov) + ink.0[k] as f32 * cov).round() as u8;
                    }
                }
            });
        }
    }
}
