//! The calls into the review engine that the review's worker jobs make, and the pictures of a
//! finished review (made on the worker, so the frame only uploads them).

use std::sync::Arc;

use anyhow::Result;
use egui::{Color32, ColorImage};
use ndarray::Array2;

use crate::control::Control;
use crate::methods::{Input, Request};
use crate::render;
use crate::review::curves::CurveSettings;
use crate::review::shapley::Shapley;
use crate::review::{self, Case, Review, Settings};
use crate::sign::Sign;

use crate::gui::review::{CurveKey, ReviewDone, ReviewImages, ReviewResult};
use crate::gui::state::{Prepared, Session, Shown};
use crate::gui::work::{Done, Outbox};

/// The whole review of `request` on the prepared image: `review::run`, as `spurion review`
/// calls it, each phase reported as it starts.
pub fn run(session: &Session, prepared: &Prepared, request: &Request, settings: &Settings, ctl: &Control, outbox: &Outbox) -> Result<Box<ReviewResult>> {
    let input = Input::picture((*prepared.picture).clone(), &session.card)?;
    let phase = |p| outbox.send(Done::Review(ReviewDone::Phase(p)));
    let review = review::run(&session.model, Some(&session.card), &input, request, settings, ctl, &phase)?;
    let images = images(&review, prepared.picture.height(), prepared.picture.width());
    Ok(Box::new(ReviewResult { review, images }))
}

/// Each strip reading's deletion and insertion curves, filled from its own baseline (as
/// `spurion review --baselines` fills them), sent one by one.
pub fn strip_curves(session: &Session, prepared: &Prepared, todo: Vec<(CurveKey, Arc<Shown>)>, settings: &CurveSettings, ctl: &Control, outbox: &Outbox) {
    let input = Input::picture((*prepared.picture).clone(), &session.card);
    for (key, shown) in todo {
        if ctl.is_cancelled() {
            break;
        }
        let r = input.as_ref().map_err(|e| anyhow::anyhow!("{e:#}")).and_then(|input| {
            let reading = &shown.reading;
            let case = Case::new(&session.model, Some(&session.card), input, &key.key.request, reading)?;
            case.curves(reading, &key.key.request.baseline, settings, ctl)
        });
        let cancelled = r.as_ref().err().is_some_and(crate::model::is_cancelled) || ctl.is_cancelled();
        outbox.send(Done::Review(ReviewDone::Curves { key, result: r.map(Box::new).map_err(|e| format!("{e:#}")), cancelled }));
    }
}

fn images(r: &Review, h: usize, w: usize) -> ReviewImages {
    let cascade = r
        .cascade
        .iter()
        .flat_map(|c| &c.methods)
        .map(|mc| std::iter::once(&mc.original).chain(mc.steps.iter().map(|s| &s.map)).map(magnitude_image).collect())
        .collect();
    let shapley_regions = r.shapley.as_ref().filter(|s| s.grid.is_none()).map(|s| region_values(s, h, w));
    ReviewImages { cascade, shapley_regions }
}

/// |map| on its own colour scale, as the review panel PNG draws the cascade's maps.
fn magnitude_image(m: &Array2<f32>) -> ColorImage {
    let mag = m.mapv(f32::abs);
    let img = render::map_rgb(&mag, render::robust_scale(&mag), Sign::Magnitude);
    ColorImage::from_rgb([img.width() as usize, img.height() as usize], img.as_raw())
}

/// Shapley colour and opacity of a value against the largest |value|, as the PNG panel paints
/// them: the diverging map's colour, opacity growing with the square root of the share.
pub fn value_colour(v: f64, top: f64) -> Color32 {
    let top = top.max(1e-12);
    let [r, g, b] = render::diverging((v / top) as f32);
    let alpha = 0.6 * ((v.abs() / top) as f32).sqrt().max(0.15);
    Color32::from_rgba_unmultiplied(r, g, b, (alpha * 255.0).round() as u8)
}

/// The region players' values painted on their own pixels (transparent elsewhere), subsampled
/// as the picture's texture is.
fn region_values(s: &Shapley, h: usize, w: usize) -> ColorImage {
    let top = s.cells.iter().map(|c| c.value.abs()).fold(0.0, f64::max);
    let step = crate::gui::slide::paint::texture_step(h, w);
    let (th, tw) = (h.div_ceil(step), w.div_ceil(step));
    let mut px = vec![Color32::TRANSPARENT; th * tw];
    for c in &s.cells {
        let Some(m) = &c.pixels else { continue };
        let col = value_colour(c.value, top);
        for ty in 0..th {
            for tx in 0..tw {
                if m.get((ty * step, tx * step)).copied().unwrap_or(false) {
                    px[ty * tw + tx] = col;
                }
            }
        }
    }
    ColorImage::new([tw, th], px)
}
