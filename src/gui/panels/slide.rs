//! The slide: the image with its reading tinted over it, zoom, pan and the hover readout.

use egui::{Color32, Rect, RichText, Sense, Stroke, pos2, vec2};

use super::fmt_value;
use crate::gui::app::Inspector;
use crate::gui::intents::Intent;
use crate::gui::slide::textures::LayerKey;
use crate::gui::look;
use crate::gui::short_name;
use crate::gui::state::*;
use crate::sign::Sign;

// -------------------------------------------------------------------- slide

/// What a DICOM or 16-bit picture is and how it is fed and shown, in one line (no
/// patient-identifying attribute: only the file's technical facts).
fn source_line(p: &crate::feed::Picture, display_window: bool) -> Option<String> {
    let fed = p.window.as_ref().map(window_text)?;
    let shown = if display_window { "shown through the display window" } else { "shown as fed" };
    Some(match &p.dicom {
        Some(d) => {
            let burned = match d.burned_in_annotation {
                Some(true) => " · Burned In Annotation: YES, the file declares burned-in text",
                Some(false) => " · Burned In Annotation: NO",
                None => "",
            };
            format!(
                "DICOM {} · {}×{} · {} bits · frame {} of {} · model fed through {fed} · {shown}{burned}",
                d.modality.as_deref().unwrap_or("(no modality)"),
                d.columns,
                d.rows,
                d.bits_stored,
                d.frame + 1,
                d.number_of_frames
            )
        }
        None => format!("{}-bit image · model fed through {fed} · {shown}", p.bit_depth),
    })
}

fn window_text(w: &crate::feed::window::ResolvedWindow) -> String {
    use crate::feed::window::VoiTransform as T;
    match &w.transform {
        T::Function { center, width, .. } => format!("window C {center} / W {width}"),
        T::Table { index, .. } => format!("VOI LUT table {}", index + 1),
        T::Range { low, high } => format!("the range {low}..{high}"),
    }
}

fn flag_banner(ui: &mut egui::Ui, shown: &Shown) {
    let a = &shown.assessment;
    if a.suspect {
        egui::Frame::new().fill(look::SIGNAL).inner_margin(6.0).corner_radius(3.0).show(ui, |ui| {
            ui.set_width(ui.available_width());
            ui.label(RichText::new(format!("SUSPECT — {}", first_clause(&a.reason))).color(Color32::WHITE).strong()).on_hover_text(&a.reason);
        });
    } else {
        egui::Frame::new().stroke(Stroke::new(1.0, look::MOSS)).inner_margin(6.0).corner_radius(3.0).show(ui, |ui| {
            ui.set_width(ui.available_width());
            ui.label(RichText::new(format!("not suspect — {}", first_clause(&a.reason))).color(look::MOSS)).on_hover_text(&a.reason);
        });
    }
    if let Some(s) = shown.reading.completeness_shortfall() {
        egui::Frame::new().stroke(Stroke::new(1.0, look::LILAC)).inner_margin(6.0).corner_radius(3.0).show(ui, |ui| {
            ui.set_width(ui.available_width());
            ui.label(RichText::new(format!("completeness {s}")).color(look::LILAC));
        });
    }
}

/// The flag's reason as the banner says it: its first clause, and how many more the whole
/// reason (on hover, and in reading.json) holds, so the banner stays two or three lines and the
/// picture keeps its room.
fn first_clause(reason: &str) -> String {
    let mut parts = reason.split("; and ");
    let first = parts.next().unwrap_or_default().to_string();
    match parts.count() {
        0 => first,
        n => format!("{first}; and {n} more (hover for the whole reason)"),
    }
}

fn legend(ui: &mut egui::Ui, app: &mut Inspector, scale: f32, sign: Sign) {
    let tex = app.legend_texture(sign);
    let ends = crate::render::legend_ends(sign, scale);
    ui.horizontal(|ui| {
        ui.label(RichText::new(format!("{} {}", ends.low_word, ends.low)).small());
        let (rect, _) = ui.allocate_exact_size(vec2(220.0, 12.0), Sense::hover());
        ui.painter().image(tex.id(), rect, Rect::from_min_max(pos2(0.0, 0.0), pos2(1.0, 1.0)), Color32::WHITE);
        ui.label(RichText::new(format!("{} {}", ends.high, ends.high_word)).small());
        ui.label(RichText::new("(ends at the 99.5th percentile of |attribution|)").small().color(look::ASH));
    });
}

pub fn slide(ui: &mut egui::Ui, app: &mut Inspector, out: &mut Vec<Intent>) {
    egui::CentralPanel::default().frame(egui::Frame::new().fill(look::DEEP).inner_margin(8.0)).show(ui, |ui| {
        let Some(entry) = app.current_image() else {
            ui.centered_and_justified(|ui| {
                ui.label(RichText::new("No image open. Use Images… or Folder…, type a path at the top, or drop files here.").color(look::ASH));
            });
            return;
        };
        let path = entry.path.clone();
        // The verdict bar first: an image that cannot be opened can still be given its verdict.
        super::sweep::curate::curator_bar(ui, app, &path, out);
        let Some(entry) = app.current_image() else { return };
        let prepared = match &entry.state {
            ImageState::Ready(p) => p.clone(),
            ImageState::Failed(m) => {
                ui.label(RichText::new(format!("{} cannot be shown: {m}", short_name(&path))).color(look::SIGNAL));
                return;
            }
            _ => {
                ui.horizontal(|ui| {
                    ui.spinner();
                    ui.label(if app.session.is_none() { "waiting for the model…" } else { "opening the image…" });
                });
                return;
            }
        };
        let wanted = app.wanted_key().ok();
        let shown = wanted.as_ref().and_then(|k| app.cache.done(k).cloned());

        // Header: zoom controls on the right first, then in the room left the name, the
        // reading's state and its request (cut short, whole in the tooltip), so that nothing
        // runs under the buttons on a small screen.
        ui.horizontal(|ui| {
            ui.with_layout(egui::Layout::right_to_left(egui::Align::Center), |ui| {
                if ui.button("fit").clicked() {
                    app.view.zoom = None;
                }
                if ui.button("1:1").clicked() {
                    app.view.zoom = Some(1.0);
                    app.view.centre = [prepared.picture.width() as f32 / 2.0, prepared.picture.height() as f32 / 2.0];
                }
                ui.with_layout(egui::Layout::left_to_right(egui::Align::Center), |ui| {
                    ui.label(RichText::new(short_name(&path)).strong());
                    if let Some(k) = &wanted {
                        match app.cache.slots.get(k) {
                            Some(Slot::Pending(id)) => {
                                ui.spinner();
                                let f = app.workers.running.iter().find(|r| r.id == *id).map(|r| r.ctl.fraction()).unwrap_or(0.0);
                                ui.label(format!("reading… {:.0} %", f * 100.0));
                            }
                            Some(Slot::Failed(e)) => {
                                ui.label(RichText::new(format!("failed: {e}")).color(look::SIGNAL));
                            }
                            _ => {}
                        }
                        let describe = k.request.describe();
                        ui.add(egui::Label::new(RichText::new(&describe).color(look::ASH)).truncate()).on_hover_text(describe);
                    }
                });
            });
        });
        if let Some(line) = source_line(&prepared.picture, app.view.display_window.is_some()) {
            ui.label(RichText::new(line).small().color(look::ASH));
        }
        if let Some(s) = &shown {
            flag_banner(ui, s);
        }

        // Reserve room under the picture for the readout and legend.
        let avail = ui.available_size() - vec2(0.0, 48.0);
        let (rect, resp) = ui.allocate_exact_size(avail.max(vec2(64.0, 64.0)), Sense::click_and_drag());
        let (w, h) = (prepared.picture.width() as f32, prepared.picture.height() as f32);
        let fit = (rect.width() / w).min(rect.height() / h) * 0.98;
        let mut zoom = app.view.zoom.unwrap_or(fit);
        let mut centre = if app.view.zoom.is_some() { app.view.centre } else { [w / 2.0, h / 2.0] };

        // Scroll or pinch zooms about the pointer; drag pans.
        if let Some(hp) = resp.hover_pos() {
            let (scroll, pinch) = ui.input(|i| (i.smooth_scroll_delta.y, i.zoom_delta()));
            let factor = pinch * (scroll * 0.003).exp();
            if (factor - 1.0).abs() > 1e-4 {
                let before = [centre[0] + (hp.x - rect.center().x) / zoom, centre[1] + (hp.y - rect.center().y) / zoom];
                let nz = (zoom * factor).clamp(fit * 0.25, 64.0);
                centre = [before[0] - (hp.x - rect.center().x) / nz, before[1] - (hp.y - rect.center().y) / nz];
                zoom = nz;
                app.view.zoom = Some(zoom);
                app.view.centre = centre;
            }
        }
        if resp.dragged() && app.draw.mode == DrawMode::Off {
            let d = resp.drag_delta();
            centre = [centre[0] - d.x / zoom, centre[1] - d.y / zoom];
            app.view.zoom = Some(zoom);
            app.view.centre = centre;
        }
        if resp.double_clicked() {
            app.view.zoom = None;
        }
        let place = SlidePlace { origin: pos2(rect.center().x - centre[0] * zoom, rect.center().y - centre[1] * zoom), zoom };
        app.slide_place = Some(place);
        super::sweep::curate::draw_drag(app, &resp, &place, &path, [w as usize, h as usize], out);
        let img_rect = Rect::from_min_max(place.to_screen([0.0, 0.0]), place.to_screen([w, h]));
        let painter = ui.painter_at(rect);
        let uv = Rect::from_min_max(pos2(0.0, 0.0), pos2(1.0, 1.0));
        let base = app.slide_texture(&path, &prepared, shown.as_deref());
        painter.image(base.id(), img_rect, uv, Color32::WHITE);

        let mut scale = 0.0;
        if let (Some(k), Some(s)) = (&wanted, &shown) {
            scale = app.scale_of(k, s);
            let lk = LayerKey {
                key: k.clone(),
                sign: app.view.sign,
                overlay: app.view.overlay,
                share_permille: (app.view.top_share * 1000.0).round() as u32,
            };
            match app.view.overlay {
                Overlay::Tint | Overlay::Reveal => {
                    if let Some(t) = app.layer_texture(&lk, s, scale) {
                        let a = (app.view.opacity.clamp(0.0, 1.0) * 255.0).round() as u8;
                        painter.image(t.id(), img_rect, uv, Color32::from_white_alpha(a));
                    }
                }
                Overlay::Contour => {
                    let edges = app.contour_edges(&lk, s);
                    let stroke = Stroke::new(1.6, crate::gui::slide::paint::contour_colour(app.view.sign));
                    painter.extend(edges.iter().map(|[a, b]| egui::Shape::line_segment([place.to_screen(*a), place.to_screen(*b)], stroke)));
                }
                Overlay::Off => {}
            }
        }

        let mut taken = Vec::new();
        if app.view.show_regions {
            let stroke = Stroke::new(1.4, look::REGION);
            for (i, (r, edges)) in prepared.regions.iter().zip(&prepared.region_edges).enumerate() {
                painter.extend(edges.iter().map(|[a, b]| egui::Shape::line_segment([place.to_screen(*a), place.to_screen(*b)], stroke)));
                let figures = shown.as_ref().and_then(|s| super::sweep::curate::figures_text(s, i));
                // Label inside the image near the region's corner, clamped to the panel.
                let at = place.to_screen([r.bbox[0] as f32, r.bbox[3] as f32]);
                super::sweep::curate::region_label(&painter, rect, at, format!("{}{}", r.label(), figures.unwrap_or_default()), look::REGION, &mut taken);
            }
        }
        if app.view.show_regions
            && let Some(s) = &shown
        {
            // The map's hotspots: a plain box each, red when it is suspect evidence.
            for h in &s.assessment.hotspots {
                let colour = if h.suspect { look::SIGNAL } else { look::LILAC };
                let stroke = Stroke::new(1.2, colour);
                let [x0, y0, x1, y1] = h.bbox.map(|v| v as f32);
                let c = [[x0, y0], [x1, y0], [x1, y1], [x0, y1]].map(|p| place.to_screen(p));
                painter.extend((0..4).map(|i| egui::Shape::line_segment([c[i], c[(i + 1) % 4]], stroke)));
                super::sweep::curate::region_label(&painter, rect, c[3], format!("hotspot: {}", h.role.name()), colour, &mut taken);
            }
        }
        super::sweep::curate::paint_drawn(&painter, rect, app, &place, &path, shown.as_deref(), prepared.regions.len(), &mut taken);

        // Hover readout.
        let readout = resp.hover_pos().filter(|p| img_rect.contains(*p)).map(|p| {
            let q = place.to_image(p);
            let (x, y) = ((q[0] as usize).min(w as usize - 1), (q[1] as usize).min(h as usize - 1));
            let px = &prepared.picture.pixels;
            let pix = if px.shape()[2] >= 3 {
                format!("rgb {:.3} {:.3} {:.3}", px[[y, x, 0]], px[[y, x, 1]], px[[y, x, 2]])
            } else {
                format!("pixel {:.3}", px[[y, x, 0]])
            };
            let att = shown.as_ref().map(|s| {
                let v = s.map[[y, x]];
                format!(" · attribution {} · percentile {:.1}", fmt_value(v), s.spread.percentile_of(v))
            });
            format!("x {x}  y {y} · {pix}{}", att.unwrap_or_default())
        });
        ui.label(RichText::new(readout.unwrap_or_else(|| "hover the image for pixel, attribution and percentile; scroll to zoom, drag to pan, double-click to fit".into())).monospace().small());
        if shown.is_some() && app.view.overlay != Overlay::Off {
            let sign = app.view.sign;
            legend(ui, app, scale, sign);
        }
    });
}

