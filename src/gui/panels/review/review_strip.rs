//! The baseline strip's part of the review: a tile shows its reading on the slide when clicked
//! (or on its key, F1 for the first tile, F2 for the second, …; 1–4 are the ledger's), and each
//! baseline's deletion and insertion curves sit under its map.

use egui::{Key as K, Modifiers, RichText, Role, Stroke, StrokeKind, WidgetInfo, vec2};

use super::{CURVES_DEF, both_curves_plot, deletion_insertion_colours};
use crate::gui::app::Inspector;
use crate::gui::intents::Intent;
use crate::gui::look;
use crate::gui::review::{CurveSlot, ReviewIntent};
use crate::gui::state::{Key, StripPlan};

/// The keys of the strip's tiles, in tile order.
pub const TILE_KEYS: [K; 9] = [K::F1, K::F2, K::F3, K::F4, K::F5, K::F6, K::F7, K::F8, K::F9];

/// Height under a tile's map that its curves take.
pub const CURVES_HEIGHT: f32 = 84.0;
const PLOT_HEIGHT: f32 = 62.0;

/// The key of tile `i`, as people read it.
pub fn tile_key_name(i: usize) -> Option<&'static str> {
    TILE_KEYS.get(i).map(|k| k.name())
}

/// F1, F2, … show the strip's tiles on the slide.
pub fn keys(ui: &mut egui::Ui, app: &Inspector, out: &mut Vec<Intent>) {
    let Some(plan) = &app.strip.wanted else { return };
    for (i, k) in TILE_KEYS.iter().enumerate().take(plan.tiles.len()) {
        if ui.input_mut(|inp| inp.consume_key(Modifiers::NONE, *k)) {
            out.push(Intent::Review(ReviewIntent::ShowTile(i)));
        }
    }
}

/// The strip header's button for the curves, and their progress.
pub fn header(ui: &mut egui::Ui, app: &Inspector, out: &mut Vec<Intent>) {
    let has_maps = app.strip.wanted.as_ref().is_some_and(|p| p.keys().iter().any(|k| app.cache.done(k).is_some()));
    let running = app.review.strip_job.is_some_and(|j| app.workers.is_running(j));
    let hint = format!(
        "Each baseline's deletion and insertion curves, filled from that baseline, under its map (the review panel's \
         curve settings: {} steps, {} random orders).\n\n{CURVES_DEF}",
        app.review.form.curve_steps, app.review.form.random_orders
    );
    if ui.add_enabled(has_maps && !running, egui::Button::new("Curves")).on_hover_text(hint).clicked() {
        out.push(Intent::Review(ReviewIntent::StripCurves));
    }
    if running {
        ui.spinner();
    }
}

/// A done tile's map: the outline when the slide shows it, its key in the tooltip, the click.
pub fn tile(ui: &egui::Ui, app: &Inspector, i: usize, k: &Key, resp: egui::Response, out: &mut Vec<Intent>) {
    let title = k.request.baseline.title();
    if app.wanted_key().ok().as_ref() == Some(k) {
        ui.painter().rect_stroke(resp.rect, 2.0, Stroke::new(2.0, look::LILAC), StrokeKind::Inside);
    }
    let label = format!("show {title} on the slide");
    resp.widget_info(|| WidgetInfo::labeled(Role::Button, true, &label));
    let key = tile_key_name(i).map(|n| format!("{n} or click")).unwrap_or_else(|| "Click".into());
    let resp = resp.on_hover_text(format!(
        "{key}: show this reading on the slide, large, with its regions and figures (sets the baseline control to {title})"
    ));
    if resp.clicked() {
        out.push(Intent::Review(ReviewIntent::ShowTile(i)));
    }
}

/// Whether any of the strip's readings has curves (done or coming) under the panel's settings.
pub fn curves_shown(app: &Inspector, plan: &StripPlan) -> bool {
    plan.keys().iter().filter_map(|k| app.strip_curve_key(k)).any(|ck| app.review.strip_curves.contains_key(&ck))
}

/// A tile's curves under its map: deletion (amber) and insertion (teal), the map's order solid
/// and random orders dashed, and both leads.
pub fn tile_curves(ui: &mut egui::Ui, app: &Inspector, k: &Key, width: f32) {
    let Some(ck) = app.strip_curve_key(k) else { return };
    match app.review.strip_curves.get(&ck) {
        None => {}
        Some(CurveSlot::Pending(_)) => {
            ui.horizontal(|ui| {
                ui.spinner();
                ui.label(RichText::new("curves…").small());
            });
        }
        Some(CurveSlot::Failed(e)) => {
            ui.label(RichText::new(format!("curves failed: {e}")).small().color(look::SIGNAL));
        }
        Some(CurveSlot::Done(c)) => {
            both_curves_plot(ui, vec2(width, PLOT_HEIGHT), c);
            let (del, ins) = deletion_insertion_colours();
            let lead = |l: Option<f64>| l.map_or("—".to_string(), |l| format!("{l:+.2}"));
            ui.horizontal(|ui| {
                ui.spacing_mut().item_spacing.x = 3.0;
                ui.label(RichText::new("lead").small().color(look::ASH));
                ui.label(RichText::new(format!("del {}", lead(c.deletion.lead))).small().color(del));
                ui.label(RichText::new(format!("ins {}", lead(c.insertion.lead))).small().color(ins));
            })
            .response
            .on_hover_text(format!(
                "{}\n{}\nfill {}; score at the input {:.3}, at the fill {:.3}\n\nAmber: deletion; teal: insertion. Solid: the map's order; dashed: random orders.",
                super::deletion_text(&c.deletion),
                super::insertion_text(&c.insertion),
                c.fill,
                c.score_input,
                c.score_fill
            ));
        }
    }
}
