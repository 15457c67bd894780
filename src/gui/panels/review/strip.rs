//! The baseline strip: one map per baseline on one colour scale, and the agreement matrix.

use egui::{Color32, Rect, RichText, Sense, pos2, vec2};

use crate::gui::panels::fmt_opt;
use crate::gui::app::Inspector;
use crate::gui::intents::Intent;
use crate::gui::look;
use crate::gui::state::*;

// -------------------------------------------------------------------- baseline strip

/// The strip's controls, beside the bottom panel's tabs.
pub(in crate::gui::panels) fn strip_controls(ui: &mut egui::Ui, app: &mut Inspector, out: &mut Vec<Intent>) {
    let enabled = app.form.method.entry().in_strip;
    if ui
        .add_enabled(enabled, egui::Button::new("Compute strip"))
        .on_disabled_hover_text("the strip compares baselines; choose integrated gradients or occlusion")
        .clicked()
    {
        out.push(Intent::ComputeStrip);
    }
    ui.checkbox(&mut app.strip.per_map_scale, "per-map scale");
    super::review_strip::header(ui, app, out);
    if let Some(plan) = &app.strip.wanted {
        let now = app.current_image().map(|e| StripPlan::new(&e.path, &app.form, e.path.parent(), &app.ledger.drawn_of(&e.path)));
        if now.as_ref() != Some(plan) {
            ui.label(RichText::new("shows earlier settings or image — Compute strip to refresh").color(look::LILAC));
        }
    }
}

/// The strip's maps and agreement matrix.
pub(in crate::gui::panels) fn strip_body(ui: &mut egui::Ui, app: &mut Inspector, out: &mut Vec<Intent>) {
    let Some(plan) = app.strip.wanted.clone() else {
        ui.label(
            RichText::new("The same image under black, grey, blur, uniform noise, Gaussian noise, dataset mean and custom baselines, on one colour scale, with how far the maps agree.")
                .color(look::ASH),
        );
        return;
    };
    let prepared = app.images.iter().find(|e| e.path == plan.image).and_then(|e| match &e.state {
        ImageState::Ready(p) => Some(p.clone()),
        _ => None,
    });
    let Some(prepared) = prepared else { return };
    let sign = app.view.sign;
    let done: Vec<(Key, std::sync::Arc<Shown>)> =
        plan.keys().into_iter().filter_map(|k| app.cache.done(&k).cloned().map(|s| (k, s))).collect();
    let shared = done.iter().map(|(k, s)| app.scale_of(k, s)).fold(0.0f32, f32::max);
    let agreement = app.current_agreement();
    // Tiles as large as the height allows, but all of them beside the agreement matrix.
    let across = (ui.available_width() - 340.0) / plan.tiles.len().max(1) as f32 - 10.0;
    let curves = super::review_strip::curves_shown(app, &plan);
    let below = if curves { super::review_strip::CURVES_HEIGHT } else { 0.0 };
    let tile = (ui.available_height() - 88.0 - below).min(across).clamp(60.0, 190.0);
    let column = if curves { tile.max(120.0) } else { tile };
    ui.horizontal_top(|ui| {
        egui::ScrollArea::horizontal().id_salt("strip tiles").max_width(ui.available_width() - 330.0).show(ui, |ui| {
            ui.horizontal_top(|ui| {
                for (i, (choice, key)) in plan.tiles.iter().enumerate() {
                    ui.vertical(|ui| {
                        ui.set_width(column);
                        match key {
                            Err(why) => {
                                tile_title(ui, format!("not read: {}", choice.entry().title));
                                ui.label(RichText::new(why).small().color(look::ASH));
                            }
                            Ok(k) => match app.cache.slots.get(k) {
                                Some(Slot::Done(s)) => {
                                    let s = s.clone();
                                    let scale = if app.strip.per_map_scale { app.scale_of(k, &s) } else { shared };
                                    tile_title(ui, format!("map · {}", k.request.baseline.title()));
                                    let (rect, resp) = ui.allocate_exact_size(vec2(tile, tile), Sense::click());
                                    let (w, h) = (prepared.picture.width() as f32, prepared.picture.height() as f32);
                                    let z = (tile / w).min(tile / h);
                                    let r = Rect::from_center_size(rect.center(), vec2(w * z, h * z));
                                    let uv = Rect::from_min_max(pos2(0.0, 0.0), pos2(1.0, 1.0));
                                    let base = app.base_texture(&plan.image, &prepared);
                                    ui.painter().image(base.id(), r, uv, Color32::WHITE);
                                    let t = app.tile_texture(k, &s, sign, scale);
                                    ui.painter().image(t.id(), r, uv, Color32::from_white_alpha(230));
                                    super::review_strip::tile(ui, app, i, k, resp, out);
                                    ui.label(RichText::new(format!(
                                        "gap {}{}",
                                        s.reading.completeness_gap.map_or("—".into(), |g| format!("{:.1} %", g * 100.0)),
                                        if s.reading.completeness_shortfall().is_some() { " (target not reached)" } else { "" }
                                    )).small());
                                    let ms = s.assessment.all_regions.as_ref().and_then(|f| f.mark_share);
                                    let ms_text = if s.assessment.regions.is_empty() { "no regions found".to_string() } else { format!("mark share {}", fmt_opt(ms, 2)) };
                                    ui.label(RichText::new(ms_text).small());
                                    super::review_strip::tile_curves(ui, app, k, column);
                                }
                                Some(Slot::Pending(_)) => {
                                    tile_title(ui, k.request.baseline.title());
                                    ui.spinner();
                                }
                                Some(Slot::Failed(e)) => {
                                    tile_title(ui, k.request.baseline.title());
                                    ui.label(RichText::new(e).small().color(look::SIGNAL));
                                }
                                None => {
                                    tile_title(ui, k.request.baseline.title());
                                    ui.label(RichText::new("not read (cancelled)").small());
                                }
                            },
                        }
                    });
                }
            });
        });
        ui.separator();
        ui.vertical(|ui| {
            ui.label(RichText::new(format!(
                "agreement ({} view): Spearman ρ / top {:.0} % overlap",
                sign.name(),
                app.view.top_share * 100.0
            )).small());
            let names: Vec<String> = plan.keys().iter().map(|k| k.request.baseline.kind().entry().short.to_string()).collect();
            match agreement {
                None if names.len() >= 2 => {
                    ui.horizontal(|ui| {
                        ui.spinner();
                        ui.label("waiting for every map");
                    });
                }
                None => {
                    ui.label("needs two maps or more");
                }
                Some(a) => {
                    egui::Grid::new("agreement").striped(true).spacing(vec2(6.0, 2.0)).show(ui, |ui| {
                        ui.label("");
                        for n in &names {
                            ui.label(RichText::new(n).small().strong());
                        }
                        ui.end_row();
                        for (i, n) in names.iter().enumerate() {
                            ui.label(RichText::new(n).small().strong());
                            for j in 0..names.len() {
                                if j < i {
                                    // Lower triangle: overlap; upper: ρ; diagonal blank.
                                    ui.label(RichText::new(agreement_cell_overlap(a.overlap[i][j])).small());
                                } else if j > i {
                                    ui.label(RichText::new(agreement_cell_rho(a.spearman[i][j])).small());
                                } else {
                                    ui.label(RichText::new("·").small().color(look::ASH));
                                }
                            }
                            ui.end_row();
                        }
                    });
                    ui.label(RichText::new("upper right: ρ; lower left: overlap").small().color(look::ASH));
                }
            }
        });
    });
}

/// A strip tile's title in a box two lines high, so the maps under long and short titles line up.
fn tile_title(ui: &mut egui::Ui, text: String) {
    let h = 2.0 * ui.text_style_height(&egui::TextStyle::Body) + 2.0;
    let w = ui.available_width();
    ui.allocate_ui_with_layout(vec2(w, h), egui::Layout::top_down(egui::Align::Min), |ui| {
        ui.set_min_size(vec2(w, h));
        ui.label(RichText::new(text).strong());
    });
}

/// The text of an upper-triangle agreement cell (public so tests can build the expected text
/// from the engine's figures).
pub fn agreement_cell_rho(v: Option<f64>) -> String {
    v.map_or("ρ —".into(), |x| format!("ρ {x:.2}"))
}

/// The text of a lower-triangle agreement cell.
pub fn agreement_cell_overlap(v: Option<f64>) -> String {
    v.map_or("— %".into(), |x| format!("{:.0} %", x * 100.0))
}


