//! Exports: the slide as PNG, the baseline strip as PNG, the reading as JSON. The pictures are
//! made by `spurion::render` (the same tint the CLI writes); planning happens on the UI thread
//! (cheap clones of shared data), writing on a worker.

use std::path::PathBuf;
use std::sync::Arc;

use anyhow::Result;
use image::{Rgb, RgbImage};

use crate::methods::agree;
use crate::report::ReadingFile;
use crate::render;
use crate::sign::Sign;

use crate::gui::app::Inspector;
use crate::gui::look;
use crate::gui::state::{Overlay, Prepared, Shown};

/// Everything an export needs, owned, so the worker can write it.
pub enum ExportJob {
    View { path: PathBuf, prepared: Arc<Prepared>, shown: Arc<Shown>, sign: Sign, overlay: Overlay, opacity: f32, share: f64, regions: bool },
    Strip { path: PathBuf, prepared: Arc<Prepared>, tiles: Vec<(String, Arc<Shown>)>, sign: Sign, per_map: bool },
    Json { path: PathBuf, prepared: Arc<Prepared>, shown: Arc<Shown> },
}

/// What an export writes. (Defined here rather than beside `Intent` so that the exports do not
/// import the intents that call them.)
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ExportWhat {
    View,
    Strip,
    Json,
}

fn slug(s: &str) -> String {
    let mut out = String::new();
    for c in s.chars() {
        if c.is_ascii_alphanumeric() || c == '.' {
            out.push(c.to_ascii_lowercase());
        } else if !out.ends_with('-') {
            out.push('-');
        }
    }
    out.trim_matches('-').to_string()
}

/// Decides what to write and where; `Err` says why nothing can be exported yet.
pub fn plan(app: &Inspector, what: ExportWhat) -> Result<ExportJob, String> {
    let dir = PathBuf::from(app.export_dir.trim());
    if app.export_dir.trim().is_empty() {
        return Err("type a folder for exports first".into());
    }
    let img = app.current_image().ok_or("open an image first")?;
    let stem = img.path.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_else(|| "image".into());
    let prepared = app.current_prepared().ok_or("the image is still opening")?;
    match what {
        ExportWhat::View | ExportWhat::Json => {
            let (key, shown) = app.current_shown().ok_or("the reading is not ready yet")?;
            let tag = slug(&key.request.describe());
            if what == ExportWhat::Json {
                return Ok(ExportJob::Json { path: dir.join(format!("{stem}-{tag}.reading.json")), prepared, shown });
            }
            Ok(ExportJob::View {
                path: dir.join(format!("{stem}-{tag}-{}-{}.png", app.view.overlay.name().replace(' ', "-"), app.view.sign.name())),
                prepared,
                shown,
                sign: app.view.sign,
                overlay: app.view.overlay,
                opacity: app.view.opacity,
                share: app.view.top_share,
                regions: app.view.show_regions,
            })
        }
        ExportWhat::Strip => {
            let plan = app.strip.wanted.as_ref().ok_or("compute the baseline strip first")?;
            let mut tiles = Vec::new();
            for k in plan.keys() {
                let s = app.cache.done(&k).ok_or("the strip is still being read")?;
                tiles.push((k.request.baseline.title(), s.clone()));
            }
            let tag = plan.keys().first().map(|k| slug(k.request.method.name())).unwrap_or_default();
            Ok(ExportJob::Strip {
                path: dir.join(format!("{stem}-{tag}-baseline-strip-{}.png", app.view.sign.name())),
                prepared,
                tiles,
                sign: app.view.sign,
                per_map: app.strip.per_map_scale,
            })
        }
    }
}

fn paint_edges(img: &mut RgbImage, edges: &[[[f32; 2]; 2]], ink: [u8; 3]) {
    // Each pixel-edge segment marks the pixels just inside it (the export is at image resolution).
    let (w, h) = (img.width() as i64, img.height() as i64);
    for [a, b] in edges {
        let (x0, y0, x1, y1) = (a[0] as i64, a[1] as i64, b[0] as i64, b[1] as i64);
        if y0 == y1 {
            for x in x0..x1 {
                for y in [y0 - 1, y0] {
                    if x >= 0 && y >= 0 && x < w && y < h {
                        img.put_pixel(x as u32, y as u32, Rgb(ink));
                    }
                }
            }
        } else {
            for y in y0..y1 {
                for x in [x0 - 1, x0] {
                    if x >= 0 && y >= 0 && x < w && y < h {
                        img.put_pixel(x as u32, y as u32, Rgb(ink));
                    }
                }
            }
        }
    }
}

/// The slide's picture at image resolution.
pub fn view_image(prepared: &Prepared, shown: &Shown, sign: Sign, overlay: Overlay, opacity: f32, share: f64, regions: bool) -> RgbImage {
    let pixels = &prepared.picture.pixels;
    let scale = render::robust_scale(&shown.map);
    let mut img = match overlay {
        Overlay::Tint => render::tint(pixels, &shown.map, scale, sign, opacity),
        Overlay::Reveal => {
            let top = agree::top_mask(&agree::view(&shown.map, sign), share);
            let mut base = render::picture_rgb(pixels);
            let k = 1.0 - 0.92 * opacity.clamp(0.0, 1.0);
            for (x, y, p) in base.enumerate_pixels_mut() {
                if !top[[y as usize, x as usize]] {
                    p.0 = p.0.map(|v| (v as f32 * k).round() as u8);
                }
            }
            base
        }
        Overlay::Contour => {
            let mut base = render::picture_rgb(pixels);
            let edges = crate::gui::slide::paint::mask_edges(&agree::top_mask(&agree::view(&shown.map, sign), share));
            let c = crate::gui::slide::paint::contour_colour(sign);
            paint_edges(&mut base, &edges, [c.r(), c.g(), c.b()]);
            base
        }
        Overlay::Off => render::picture_rgb(pixels),
    };
    if regions {
        let c = look::REGION;
        for e in &prepared.region_edges {
            paint_edges(&mut img, e, [c.r(), c.g(), c.b()]);
        }
    }
    img
}

/// The strip: one tinted tile per baseline with its name and figures above it.
pub fn strip_image(prepared: &Prepared, tiles: &[(String, Arc<Shown>)], sign: Sign, per_map: bool) -> RgbImage {
    let pixels = &prepared.picture.pixels;
    let shared = tiles.iter().map(|(_, s)| render::robust_scale(&s.map)).fold(0.0f32, f32::max);
    let (h, w) = (pixels.shape()[0] as u32, pixels.shape()[1] as u32);
    // Small images are scaled up so the captions fit over them.
    let up = (200 / w.max(1)).clamp(1, 8);
    let (tw, th) = (w * up, h * up);
    let (gap, head) = (8u32, 56u32);
    let width = tiles.len() as u32 * (tw + gap) + gap;
    let mut out = RgbImage::from_pixel(width, th + head + gap, Rgb([20, 23, 27]));
    let ink = Rgb([220, 224, 228]);
    for (i, (name, s)) in tiles.iter().enumerate() {
        let scale = if per_map { render::robust_scale(&s.map) } else { shared };
        let t = render::tint(pixels, &s.map, scale, sign, 0.9);
        let t = image::imageops::resize(&t, tw, th, image::imageops::FilterType::Nearest);
        let x = gap + i as u32 * (tw + gap);
        image::imageops::overlay(&mut out, &t, x as i64, head as i64);
        render::draw_text(&mut out, x, 4, 13.0, name, ink);
        let missed = if s.reading.completeness_shortfall().is_some() { " (target not reached)" } else { "" };
        let gap_s = s.reading.completeness_gap.map_or("gap —".to_string(), |g| format!("gap {:.1} %{missed}", g * 100.0));
        let share = s.assessment.all_regions.as_ref().and_then(|f| f.mark_share);
        let share_s = share.map_or("mark share —".to_string(), |m| format!("mark share {m:.2}"));
        render::draw_text(&mut out, x, 20, 12.0, &gap_s, ink);
        render::draw_text(&mut out, x, 36, 12.0, &share_s, ink);
    }
    out
}

/// The reading as JSON: the same file `spurion explain` writes ([`crate::report::ReadingFile`]),
/// with the regions and flag the inspector already found.
pub fn reading_json(prepared: &Prepared, shown: &Shown) -> Result<serde_json::Value> {
    ReadingFile::new(&shown.reading, Some(shown.assessment.clone()))
        .with_picture(&prepared.picture, false)
        .with_feed(prepared.feed.clone())
        .to_json()
}

impl ExportJob {
    pub fn write(self) -> Result<Vec<PathBuf>> {
        use anyhow::Context;
        let path = match &self {
            ExportJob::View { path, .. } | ExportJob::Strip { path, .. } | ExportJob::Json { path, .. } => path.clone(),
        };
        if let Some(d) = path.parent() {
            std::fs::create_dir_all(d).with_context(|| format!("cannot create folder {}", d.display()))?;
        }
        match self {
            ExportJob::View { path, prepared, shown, sign, overlay, opacity, share, regions } => {
                render::save(&path, &view_image(&prepared, &shown, sign, overlay, opacity, share, regions))?;
            }
            ExportJob::Strip { path, prepared, tiles, sign, per_map } => {
                render::save(&path, &strip_image(&prepared, &tiles, sign, per_map))?;
            }
            ExportJob::Json { path, prepared, shown } => {
                let text = serde_json::to_string_pretty(&reading_json(&prepared, &shown)?)? + "\n";
                std::fs::write(&path, text).with_context(|| format!("cannot write {}", path.display()))?;
            }
        }
        Ok(vec![path])
    }
}
