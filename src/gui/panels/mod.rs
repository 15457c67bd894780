//! The panels. Each draws the state it is given and pushes intents; settings that are plain
//! values (the form, the view settings) are edited in place, as egui widgets do.
//!
//! The frame's own panels sit here (bars, controls, the slide, about, feed); the strip and the
//! review have `review/` (the review panel, the baseline strip, its tiles' curves, the plots),
//! the sweep and the ledger `sweep/` (the sweep view, the ledger section, the curator's bar).

mod about;
mod bars;
mod controls;
mod feed;
mod review;
mod slide;
mod sweep;

pub use about::{about, drop_hint, unsaved_on_close};
pub use bars::{image_list, status_bar, top_bar};
pub use controls::controls;
pub use feed::feed_window;
pub use review::review_strip::{TILE_KEYS, tile_key_name};
pub use review::strip::{agreement_cell_overlap, agreement_cell_rho};
pub use review::{cascade_text, convergence_text, deletion_text, insertion_text, review_panel, shapley_sum_text};
pub use slide::slide;
pub use sweep::curate::{shape_of, verdict_word};

use crate::gui::app::Inspector;
use crate::gui::intents::Intent;
use crate::gui::sweep::BottomTab;
use review::{review_strip, strip};

/// The bottom panel: the baseline strip or the sweep, one tab each (each keeps its own height).
pub fn bottom_panel(ui: &mut egui::Ui, app: &mut Inspector, out: &mut Vec<Intent>) {
    let tab = app.sweep.tab;
    if tab == BottomTab::Strip {
        review_strip::keys(ui, app, out);
    }
    // The review takes the whole centre: its results are not squeezed into a small scrolled
    // area (the strip's keys F1, F2, … still show a tile's reading on the slide).
    if app.review.open {
        return;
    }
    // With curves under the maps the strip is a taller panel of its own (its own remembered size).
    let curves = app.strip.wanted.as_ref().is_some_and(|p| review_strip::curves_shown(app, p));
    let (id, size) = match tab {
        BottomTab::Strip if curves => ("strip with curves", 255.0 + review_strip::CURVES_HEIGHT),
        BottomTab::Strip => ("strip", 255.0),
        BottomTab::Sweep => ("sweep", 380.0),
    };
    // The strip (its tiles shrink to fit) and the sweep's table take at most 30 % of the
    // window by default (they can be dragged taller), so that the slide keeps room for its
    // picture and region labels on a small screen (1280×800). The strip with curves needs its
    // height.
    let size = if curves && tab == BottomTab::Strip { size } else { size.min(0.3 * ui.ctx().content_rect().height()).max(120.0) };
    egui::Panel::bottom(id).resizable(true).default_size(size).min_size(120.0).show(ui, |ui| {
        // A panel is as tall as its content: fill the height it was given (default or dragged),
        // else it settles at whatever its first, empty frame needed.
        ui.set_min_height(ui.available_height());
        ui.add_space(4.0);
        ui.horizontal_wrapped(|ui| {
            for (t, name) in [(BottomTab::Strip, "Baseline strip"), (BottomTab::Sweep, "Sweep")] {
                let text = egui::RichText::new(name).heading();
                if ui.selectable_label(tab == t, text).clicked() && tab != t {
                    out.push(Intent::Tab(t));
                }
            }
            ui.separator();
            match tab {
                BottomTab::Strip => strip::strip_controls(ui, app, out),
                BottomTab::Sweep => sweep::sweep_controls(ui, app, out),
            }
        });
        match tab {
            BottomTab::Strip => strip::strip_body(ui, app, out),
            BottomTab::Sweep => sweep::sweep_body(ui, app, out),
        }
    });
}

fn fmt_value(v: f32) -> String {
    crate::render::format_value(v, true)
}

/// What painting a region out did, as the slide and the figures list say it: the change of the
/// target's probability, and the top class when it changed.
fn removal_text(r: &crate::regions::Removal, top_before: usize) -> String {
    let flip = if r.top != top_before { format!(", top class → {}", r.top_class()) } else { String::new() };
    // A change that rounds to zero reads "unchanged", never "-0.00".
    let change = if r.probability_drop.abs() < 0.005 { "unchanged".to_string() } else { format!("{:+.2}", -r.probability_drop) };
    format!("painted out: probability {change}{flip}")
}

fn fmt_opt(v: Option<f64>, digits: usize) -> String {
    v.map_or("—".to_string(), |x| format!("{x:.digits$}"))
}
