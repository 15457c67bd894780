//! The panels. Each draws the state it is given and pushes intents; settings that are plain
//! values (the form, the view settings) are edited in place, as egui widgets do.

use egui::{Align2, Color32, FontId, Pos2, Rect, RichText, Sense, Stroke, Vec2, pos2, vec2};

use crate::methods::agree::Sign;

use super::app::{ExportWhat, Inspector, Intent, LayerKey};
use super::form::{
    BLACK_BASELINE_CAVEAT, BaselineChoice, DEFAULT_BASELINE_WHY, DEFAULT_BLUR_SIGMA, MethodChoice, ScoreChoice, TargetChoice,
};
use super::look;
use super::short_name;
use super::state::*;
use super::work::Pick;

fn fmt_value(v: f32) -> String {
    crate::render::format_value(v, true)
}

fn fmt_opt(v: Option<f64>, digits: usize) -> String {
    v.map_or("—".to_string(), |x| format!("{x:.digits$}"))
}

// -------------------------------------------------------------------- top bar

pub fn top_bar(ui: &mut egui::Ui, app: &mut Inspector, out: &mut Vec<Intent>) {
    egui::Panel::top("top").show(ui, |ui| {
        ui.add_space(3.0);
        ui.horizontal(|ui| {
            ui.label(RichText::new("spurion").strong().size(17.0).color(look::LILAC));
            ui.separator();
            let model_text = match (&app.session, &app.model_path, app.model_job) {
                (_, Some(p), Some(_)) => format!("model: loading {}…", short_name(p)),
                (Some(s), _, None) => format!("model: {}", short_name(s.model.path())),
                (None, Some(p), None) if app.model_error.is_some() => format!("model: {} failed to load", short_name(p)),
                _ => "model: none".to_string(),
            };
            ui.label(model_text).on_hover_text(
                app.session.as_ref().map(|s| format!("{}\nsha256 {}\n{}", s.model.path().display(), s.model.sha256(), s.card_note)).unwrap_or_default(),
            );
            if ui.button("Model…").on_hover_text("open an ONNX model").clicked() {
                out.push(Intent::Pick(Pick::Model));
            }
            if ui.button("Images…").clicked() {
                out.push(Intent::Pick(Pick::Images));
            }
            if ui.button("Folder…").clicked() {
                out.push(Intent::Pick(Pick::Folder));
            }
            ui.menu_button("Recent", |ui| {
                if app.recent.models.is_empty() && app.recent.images.is_empty() {
                    ui.label("nothing opened yet");
                }
                if !app.recent.models.is_empty() {
                    ui.label(RichText::new("models").color(look::ASH));
                    for p in app.recent.models.clone() {
                        if ui.button(short_name(&p)).on_hover_text(p.display().to_string()).clicked() {
                            out.push(Intent::OpenModel(p));
                            ui.close();
                        }
                    }
                }
                if !app.recent.images.is_empty() {
                    ui.label(RichText::new("images and folders").color(look::ASH));
                    for p in app.recent.images.clone() {
                        if ui.button(short_name(&p)).on_hover_text(p.display().to_string()).clicked() {
                            out.push(Intent::OpenPaths(vec![p]));
                            ui.close();
                        }
                    }
                }
            });
            ui.separator();
            let l = ui.label("path");
            let r = ui.add(
                egui::TextEdit::singleline(&mut app.path_field)
                    .hint_text("model .onnx, image or folder")
                    .desired_width(260.0),
            );
            let r = r.labelled_by(l.id);
            if ui.button("Open").clicked() || (r.lost_focus() && ui.input(|i| i.key_pressed(egui::Key::Enter))) {
                out.push(Intent::OpenTyped);
            }
            ui.with_layout(egui::Layout::right_to_left(egui::Align::Center), |ui| {
                if ui.button("About").clicked() {
                    out.push(Intent::About(true));
                }
            });
        });
        ui.add_space(2.0);
    });
}

// -------------------------------------------------------------------- status bar

pub fn status_bar(ui: &mut egui::Ui, app: &mut Inspector, out: &mut Vec<Intent>) {
    egui::Panel::bottom("status").show(ui, |ui| {
        ui.add_space(2.0);
        for r in &app.workers.running {
            ui.horizontal(|ui| {
                let f = r.ctl.fraction();
                let (d, t) = r.ctl.progress();
                let text = if t > 0 { format!("{} — {d}/{t}", r.label) } else { r.label.clone() };
                ui.add(egui::ProgressBar::new(f).desired_width(ui.available_width() - 90.0).fill(look::LILAC.gamma_multiply(0.6)).text(text));
                if r.cancellable && ui.button("Cancel").clicked() {
                    out.push(Intent::Cancel(r.id));
                }
            });
        }
        if let Some(n) = app.notes.last() {
            let c = match n.kind {
                NoteKind::Info => look::CHALK,
                NoteKind::Warning => look::LILAC,
                NoteKind::Error => look::SIGNAL,
            };
            ui.label(RichText::new(&n.text).color(c));
        }
        ui.label(RichText::new(crate::CAUTION).small().color(look::ASH));
        ui.add_space(2.0);
    });
}

// -------------------------------------------------------------------- image list

pub fn image_list(ui: &mut egui::Ui, app: &mut Inspector, out: &mut Vec<Intent>) {
    egui::Panel::left("images").default_size(210.0).show(ui, |ui| {
        ui.add_space(4.0);
        ui.heading("Images");
        if app.images.is_empty() {
            ui.label(RichText::new("none open: use Images…, Folder…, the path field or drop files here").color(look::ASH));
        }
        egui::ScrollArea::vertical().auto_shrink([false, false]).show(ui, |ui| {
            for (i, e) in app.images.iter().enumerate() {
                let mark = match &e.state {
                    ImageState::NotOpened => "·",
                    ImageState::Opening => "…",
                    ImageState::Ready(_) => " ",
                    ImageState::Failed(_) => "!",
                };
                let sel = app.selected == Some(i);
                let r = ui.selectable_label(sel, format!("{mark} {}", short_name(&e.path)));
                let r = if let ImageState::Failed(m) = &e.state { r.on_hover_text(m) } else { r.on_hover_text(e.path.display().to_string()) };
                if r.clicked() && !sel {
                    out.push(Intent::Select(i));
                }
            }
        });
    });
}

// -------------------------------------------------------------------- reading controls

fn labelled_drag<T: egui::emath::Numeric>(ui: &mut egui::Ui, label: &str, v: &mut T, range: std::ops::RangeInclusive<T>, speed: f64) {
    ui.horizontal(|ui| {
        let l = ui.label(label);
        ui.add(egui::DragValue::new(v).range(range).speed(speed)).labelled_by(l.id);
    });
}

/// A labelled path field with a "…" button that asks for a file dialog.
fn path_row(ui: &mut egui::Ui, label: &str, path: &mut String, hint: &str, pick: Pick, out: &mut Vec<Intent>) {
    ui.horizontal(|ui| {
        let l = ui.label(label);
        ui.add(egui::TextEdit::singleline(path).hint_text(hint).desired_width(150.0)).labelled_by(l.id);
        if ui.small_button("…").clicked() {
            out.push(Intent::Pick(pick));
        }
    });
}

pub fn controls(ui: &mut egui::Ui, app: &mut Inspector, out: &mut Vec<Intent>) {
    egui::Panel::right("controls").default_size(290.0).show(ui, |ui| {
        egui::ScrollArea::vertical().auto_shrink([false, false]).show(ui, |ui| {
            ui.add_space(4.0);
            ui.heading("Reading");
            let scores = app.current_prepared().map(|p| p.scores.clone());
            let labels = app.session.as_ref().map(|s| s.labels.clone()).unwrap_or_default();
            let f = &mut app.form;
            egui::ComboBox::from_label("method").selected_text(f.method.name()).width(170.0).show_ui(ui, |ui| {
                for m in MethodChoice::ALL {
                    ui.selectable_value(&mut f.method, m, m.name());
                }
            });
            match f.method {
                MethodChoice::IntegratedGradients => {
                    labelled_drag(ui, if f.refine { "start steps" } else { "steps" }, &mut f.steps, 1..=1024, 0.5);
                    ui.checkbox(&mut f.refine, "refine until the completeness gap is under 1 %").on_hover_text(
                        "Triples the midpoint steps (reusing every gradient) until the attributions sum to \
                         F(x) − F(x′) within 1 %, up to 2187 steps. A larger gap means the path integral \
                         is not resolved and the map should not be read yet.",
                    );
                }
                MethodChoice::SmoothGrad => {
                    labelled_drag(ui, "samples", &mut f.samples, 1..=512, 0.5);
                    labelled_drag(ui, "noise (share of range)", &mut f.smooth_noise, 0.0..=1.0, 0.005);
                    labelled_drag(ui, "seed", &mut f.seed, 0..=u64::MAX, 1.0);
                }
                MethodChoice::ExpectedGradients => {
                    labelled_drag(ui, "samples", &mut f.samples, 1..=512, 0.5);
                    labelled_drag(ui, "seed", &mut f.seed, 0..=u64::MAX, 1.0);
                }
                MethodChoice::Occlusion => {
                    labelled_drag(ui, "window (px)", &mut f.window, 1..=512, 0.3);
                    labelled_drag(ui, "stride (px)", &mut f.stride, 1..=512, 0.3);
                }
                MethodChoice::Gradient | MethodChoice::GradientXInput => {}
            }
            let uses_baseline = f.method.takes_baseline() || f.method == MethodChoice::ExpectedGradients;
            ui.add_enabled_ui(uses_baseline, |ui| {
                let selected = match f.baseline {
                    BaselineChoice::Blur => format!("blur σ {}", f.blur_sigma),
                    b => b.name().to_string(),
                };
                egui::ComboBox::from_label("baseline")
                    .selected_text(selected)
                    .width(170.0)
                    .show_ui(ui, |ui| {
                        for b in BaselineChoice::ALL {
                            ui.selectable_value(&mut f.baseline, b, b.name());
                        }
                    })
                    .response
                    .on_hover_text(DEFAULT_BASELINE_WHY);
            });
            if !uses_baseline {
                ui.label(RichText::new(format!("{} takes no baseline", f.method.name())).small().color(look::ASH));
            } else if f.baseline == BaselineChoice::Black {
                ui.label(RichText::new(BLACK_BASELINE_CAVEAT).small().color(look::LILAC)).on_hover_text(DEFAULT_BASELINE_WHY);
            } else if f.baseline == BaselineChoice::Blur && f.blur_sigma == DEFAULT_BLUR_SIGMA {
                ui.label(RichText::new("default: blur keeps a dark frame visible to the map (hover for why)").small().color(look::ASH))
                    .on_hover_text(DEFAULT_BASELINE_WHY);
            }
            // Parameters of every baseline stay visible: the strip uses them all.
            ui.collapsing("baseline parameters", |ui| {
                labelled_drag(ui, "blur σ (model pixels)", &mut f.blur_sigma, 0.1..=64.0, 0.05);
                labelled_drag(ui, "Gaussian noise σ", &mut f.noise_sigma, 0.001..=1.0, 0.002);
                labelled_drag(ui, "noise seed", &mut f.noise_seed, 0..=u64::MAX, 1.0);
                path_row(ui, "mean over", &mut f.mean_dir, "folder of the image", Pick::MeanFolder, out);
                path_row(ui, "custom image", &mut f.custom_path, "path to an image", Pick::CustomBaseline, out);
            });
            // Target classes with this image's scores.
            let score_of = |i: usize| scores.as_ref().and_then(|s| s.get(i)).map(|v| format!(" — {v:.3}")).unwrap_or_default();
            let top = scores.as_ref().and_then(|s| {
                s.iter().enumerate().max_by(|a, b| a.1.total_cmp(b.1)).map(|(i, _)| i)
            });
            let target_text = match f.target {
                TargetChoice::Top => match top {
                    Some(i) => format!("top: {}{}", labels.get(i).cloned().unwrap_or_default(), score_of(i)),
                    None => "top class".into(),
                },
                TargetChoice::Index(i) => format!("{}{}", labels.get(i).cloned().unwrap_or(format!("class {i}")), score_of(i)),
            };
            egui::ComboBox::from_label("target").selected_text(target_text).width(170.0).show_ui(ui, |ui| {
                ui.selectable_value(&mut f.target, TargetChoice::Top, "top class of each image");
                for (i, l) in labels.iter().enumerate() {
                    ui.selectable_value(&mut f.target, TargetChoice::Index(i), format!("{i} · {l}{}", score_of(i)));
                }
            });
            egui::ComboBox::from_label("score").selected_text(f.score.name()).width(170.0).show_ui(ui, |ui| {
                for s in ScoreChoice::ALL {
                    ui.selectable_value(&mut f.score, s, s.name());
                }
            });
            if let Some(p) = &app.form_problem {
                ui.label(RichText::new(p).color(look::LILAC));
            }
            if !app.config.auto_read && ui.button("Read").clicked() {
                app.config.auto_read = true;
            }

            ui.separator();
            ui.heading("Show");
            let v = &mut app.view;
            ui.horizontal(|ui| {
                for o in Overlay::ALL {
                    ui.selectable_value(&mut v.overlay, o, o.name());
                }
            });
            ui.horizontal(|ui| {
                for s in Sign::ALL {
                    ui.selectable_value(&mut v.sign, s, s.name());
                }
            });
            ui.horizontal(|ui| {
                let l = ui.label("top share");
                for s in TOP_SHARES {
                    ui.selectable_value(&mut v.top_share, s, format!("{:.0} %", s * 100.0)).labelled_by(l.id);
                }
            });
            ui.horizontal(|ui| {
                let l = ui.label("opacity");
                ui.add(egui::Slider::new(&mut v.opacity, 0.0..=1.0)).labelled_by(l.id);
            });
            ui.checkbox(&mut v.show_regions, "region outlines");

            ui.separator();
            ui.heading("Export");
            ui.horizontal(|ui| {
                let l = ui.label("to");
                ui.add(egui::TextEdit::singleline(&mut app.export_dir).desired_width(180.0)).labelled_by(l.id);
                if ui.small_button("…").clicked() {
                    out.push(Intent::Pick(Pick::ExportFolder));
                }
            });
            ui.horizontal(|ui| {
                if ui.button("view PNG").clicked() {
                    out.push(Intent::Export(ExportWhat::View));
                }
                if ui.button("strip PNG").clicked() {
                    out.push(Intent::Export(ExportWhat::Strip));
                }
                if ui.button("reading JSON").clicked() {
                    out.push(Intent::Export(ExportWhat::Json));
                }
            });

            if let Some((_, shown)) = app.current_shown() {
                ui.separator();
                ui.heading("Figures");
                let r = &shown.reading;
                egui::Grid::new("figures").num_columns(2).striped(true).show(ui, |ui| {
                    ui.label("target");
                    ui.label(format!("{} ({})", r.target.label, r.target.index));
                    ui.end_row();
                    ui.label(format!("score ({})", r.score_kind.name()));
                    ui.label(format!("{:.4}", r.score_input));
                    ui.end_row();
                    if let Some(b) = r.score_baseline {
                        ui.label("score at baseline");
                        ui.label(format!("{b:.4}"));
                        ui.end_row();
                    }
                    ui.label("attribution sum");
                    ui.label(format!("{:.4}", r.attribution_sum));
                    ui.end_row();
                    ui.label("completeness gap");
                    ui.label(r.completeness_gap.map_or("— (not defined)".into(), |g| format!("{:.2} %", g * 100.0)));
                    ui.end_row();
                    if let Some(s) = r.steps {
                        ui.label("steps / samples");
                        ui.label(s.to_string());
                        ui.end_row();
                    }
                    ui.label("time");
                    ui.label(format!("{:.0} ms", r.elapsed_ms));
                    ui.end_row();
                });
                for rr in &shown.assessment.regions {
                    ui.label(
                        RichText::new(format!(
                            "{}: mark share {} · lift {}{}",
                            rr.label,
                            fmt_opt(rr.figures.mark_share, 2),
                            fmt_opt(rr.figures.lift, 1),
                            if rr.suspect { " · passes the flag rule" } else { "" }
                        ))
                        .small(),
                    )
                    .on_hover_text(&rr.reason);
                }
            }
        });
    });
}

// -------------------------------------------------------------------- slide

/// Screen placement of the picture: image pixel (x, y) ↦ `origin + (x, y)·zoom`.
struct Placement {
    origin: Pos2,
    zoom: f32,
}

impl Placement {
    fn to_screen(&self, p: [f32; 2]) -> Pos2 {
        pos2(self.origin.x + p[0] * self.zoom, self.origin.y + p[1] * self.zoom)
    }
    fn to_image(&self, s: Pos2) -> [f32; 2] {
        [(s.x - self.origin.x) / self.zoom, (s.y - self.origin.y) / self.zoom]
    }
}

fn flag_banner(ui: &mut egui::Ui, shown: &Shown) {
    let a = &shown.assessment;
    if a.suspect {
        egui::Frame::new().fill(look::SIGNAL).inner_margin(6.0).corner_radius(3.0).show(ui, |ui| {
            ui.set_width(ui.available_width());
            ui.label(RichText::new(format!("SUSPECT — {}", a.reason)).color(Color32::WHITE).strong());
        });
    } else {
        egui::Frame::new().stroke(Stroke::new(1.0, look::MOSS)).inner_margin(6.0).corner_radius(3.0).show(ui, |ui| {
            ui.set_width(ui.available_width());
            ui.label(RichText::new(format!("not suspect — {}", a.reason)).color(look::MOSS));
        });
    }
}

fn legend(ui: &mut egui::Ui, app: &mut Inspector, scale: f32, sign: Sign) {
    let tex = app.legend_texture(sign);
    ui.horizontal(|ui| {
        let (lo, hi) = match sign {
            Sign::Both => (fmt_value(-scale), fmt_value(scale)),
            Sign::Supporting => ("0".into(), fmt_value(scale)),
            Sign::Opposing => (fmt_value(-scale), "0".into()),
            Sign::Magnitude => ("0".into(), format!("{:.3e}", scale)),
        };
        let (lo_word, hi_word) = match sign {
            Sign::Both => ("opposing", "supporting"),
            Sign::Supporting => ("", "supporting"),
            Sign::Opposing => ("opposing", ""),
            Sign::Magnitude => ("", "magnitude"),
        };
        ui.label(RichText::new(format!("{lo_word} {lo}")).small());
        let (rect, _) = ui.allocate_exact_size(vec2(220.0, 12.0), Sense::hover());
        // Opposing ramps run from −1 at the left to 0 at the right; the ramp texture runs the
        // other way for that view, so flip it.
        let uv = if sign == Sign::Opposing {
            Rect::from_min_max(pos2(1.0, 0.0), pos2(0.0, 1.0))
        } else {
            Rect::from_min_max(pos2(0.0, 0.0), pos2(1.0, 1.0))
        };
        ui.painter().image(tex.id(), rect, uv, Color32::WHITE);
        ui.label(RichText::new(format!("{hi} {hi_word}")).small());
        ui.label(RichText::new("(ends at the 99.5th percentile of |attribution|)").small().color(look::ASH));
    });
}

pub fn slide(ui: &mut egui::Ui, app: &mut Inspector, out: &mut Vec<Intent>) {
    let _ = out;
    egui::CentralPanel::default().frame(egui::Frame::new().fill(look::DEEP).inner_margin(8.0)).show(ui, |ui| {
        let Some(entry) = app.current_image() else {
            ui.centered_and_justified(|ui| {
                ui.label(RichText::new("No image open. Use Images… or Folder…, type a path at the top, or drop files here.").color(look::ASH));
            });
            return;
        };
        let path = entry.path.clone();
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

        // Header: name, reading state, zoom controls.
        ui.horizontal(|ui| {
            ui.label(RichText::new(short_name(&path)).strong());
            if let Some(k) = &wanted {
                ui.label(RichText::new(k.ask.describe()).color(look::ASH));
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
            }
            ui.with_layout(egui::Layout::right_to_left(egui::Align::Center), |ui| {
                if ui.button("fit").clicked() {
                    app.view.zoom = None;
                }
                if ui.button("1:1").clicked() {
                    app.view.zoom = Some(1.0);
                    app.view.centre = [prepared.picture.width() as f32 / 2.0, prepared.picture.height() as f32 / 2.0];
                }
            });
        });
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
        if resp.dragged() {
            let d = resp.drag_delta();
            centre = [centre[0] - d.x / zoom, centre[1] - d.y / zoom];
            app.view.zoom = Some(zoom);
            app.view.centre = centre;
        }
        if resp.double_clicked() {
            app.view.zoom = None;
        }
        let place = Placement { origin: pos2(rect.center().x - centre[0] * zoom, rect.center().y - centre[1] * zoom), zoom };
        let img_rect = Rect::from_min_max(place.to_screen([0.0, 0.0]), place.to_screen([w, h]));
        let painter = ui.painter_at(rect);
        let uv = Rect::from_min_max(pos2(0.0, 0.0), pos2(1.0, 1.0));
        let base = app.base_texture(&path, &prepared);
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
                    let stroke = Stroke::new(1.6, super::paint::contour_colour(app.view.sign));
                    painter.extend(edges.iter().map(|[a, b]| egui::Shape::line_segment([place.to_screen(*a), place.to_screen(*b)], stroke)));
                }
                Overlay::Off => {}
            }
        }

        if app.view.show_regions {
            let stroke = Stroke::new(1.4, look::REGION);
            for (i, (r, edges)) in prepared.regions.iter().zip(&prepared.region_edges).enumerate() {
                painter.extend(edges.iter().map(|[a, b]| egui::Shape::line_segment([place.to_screen(*a), place.to_screen(*b)], stroke)));
                let figures = shown.as_ref().and_then(|s| s.assessment.regions.get(i)).map(|rr| {
                    format!(" · share {} · lift {}", fmt_opt(rr.figures.mark_share, 2), fmt_opt(rr.figures.lift, 1))
                });
                let text = format!("{}{}", r.label(), figures.unwrap_or_default());
                // Label inside the image near the region's corner, clamped to the panel.
                let at = place.to_screen([r.bbox[0] as f32, r.bbox[3] as f32]);
                let at = pos2(at.x.clamp(rect.left() + 2.0, rect.right() - 160.0), (at.y + 2.0).clamp(rect.top() + 2.0, rect.bottom() - 16.0));
                let galley = painter.layout_no_wrap(text, FontId::proportional(12.0), look::REGION);
                let bg = Rect::from_min_size(at, galley.size() + vec2(6.0, 2.0));
                painter.rect_filled(bg, 2.0, Color32::from_black_alpha(190));
                painter.galley(at + vec2(3.0, 1.0), galley, look::REGION);
            }
        }

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

// -------------------------------------------------------------------- baseline strip

pub fn strip_panel(ui: &mut egui::Ui, app: &mut Inspector, out: &mut Vec<Intent>) {
    egui::Panel::bottom("strip").resizable(true).default_size(255.0).min_size(120.0).show(ui, |ui| {
        // A panel is as tall as its content: fill the height it was given (default or dragged),
        // else the strip settles at whatever its first, empty frame needed.
        ui.set_min_height(ui.available_height());
        ui.add_space(4.0);
        ui.horizontal(|ui| {
            ui.heading("Baseline strip");
            let enabled = app.form.method.takes_baseline();
            if ui
                .add_enabled(enabled, egui::Button::new("Compute strip"))
                .on_disabled_hover_text("the strip compares baselines; choose integrated gradients or occlusion")
                .clicked()
            {
                out.push(Intent::ComputeStrip);
            }
            ui.checkbox(&mut app.strip.per_map_scale, "per-map scale");
            if let Some(plan) = &app.strip.wanted {
                let now = app.current_image().map(|e| StripPlan::new(&e.path, &app.form, e.path.parent()));
                if now.as_ref() != Some(plan) {
                    ui.label(RichText::new("shows earlier settings or image — Compute strip to refresh").color(look::LILAC));
                }
            }
        });
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
        let tile = (ui.available_height() - 88.0).min(across).clamp(60.0, 190.0);
        ui.horizontal_top(|ui| {
            egui::ScrollArea::horizontal().id_salt("strip tiles").max_width(ui.available_width() - 330.0).show(ui, |ui| {
                ui.horizontal_top(|ui| {
                    for (choice, key) in &plan.tiles {
                        ui.vertical(|ui| {
                            ui.set_width(tile);
                            match key {
                                Err(why) => {
                                    tile_title(ui, format!("not read: {}", choice.name()));
                                    ui.label(RichText::new(why).small().color(look::ASH));
                                }
                                Ok(k) => match app.cache.slots.get(k) {
                                    Some(Slot::Done(s)) => {
                                        let s = s.clone();
                                        let scale = if app.strip.per_map_scale { app.scale_of(k, &s) } else { shared };
                                        tile_title(ui, format!("map · {}", k.ask.baseline.label()));
                                        let (rect, _) = ui.allocate_exact_size(vec2(tile, tile), Sense::hover());
                                        let (w, h) = (prepared.picture.width() as f32, prepared.picture.height() as f32);
                                        let z = (tile / w).min(tile / h);
                                        let r = Rect::from_center_size(rect.center(), vec2(w * z, h * z));
                                        let uv = Rect::from_min_max(pos2(0.0, 0.0), pos2(1.0, 1.0));
                                        let base = app.base_texture(&plan.image, &prepared);
                                        ui.painter().image(base.id(), r, uv, Color32::WHITE);
                                        let t = app.tile_texture(k, &s, sign, scale);
                                        ui.painter().image(t.id(), r, uv, Color32::from_white_alpha(230));
                                        ui.label(RichText::new(format!(
                                            "gap {}",
                                            s.reading.completeness_gap.map_or("—".into(), |g| format!("{:.1} %", g * 100.0))
                                        )).small());
                                        let ms = s.assessment.all_regions.as_ref().and_then(|f| f.mark_share);
                                        let ms_text = if s.assessment.regions.is_empty() { "no regions found".to_string() } else { format!("mark share {}", fmt_opt(ms, 2)) };
                                        ui.label(RichText::new(ms_text).small());
                                    }
                                    Some(Slot::Pending(_)) => {
                                        tile_title(ui, k.ask.baseline.label());
                                        ui.spinner();
                                    }
                                    Some(Slot::Failed(e)) => {
                                        tile_title(ui, k.ask.baseline.label());
                                        ui.label(RichText::new(e).small().color(look::SIGNAL));
                                    }
                                    None => {
                                        tile_title(ui, k.ask.baseline.label());
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
                let names: Vec<String> = plan.keys().iter().map(|k| short_baseline(&k.ask.baseline)).collect();
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

fn short_baseline(b: &super::form::BaselineSpec) -> String {
    use super::form::BaselineSpec as B;
    match b {
        B::Black => "black",
        B::Grey => "grey",
        B::Blur(_) => "blur",
        B::UniformNoise(_) => "uniform",
        B::GaussianNoise(..) => "Gauss",
        B::Mean(_) => "mean",
        B::Image(_) => "custom",
    }
    .to_string()
}

// -------------------------------------------------------------------- about, drop hint

pub fn about(ui: &mut egui::Ui, app: &mut Inspector, out: &mut Vec<Intent>) {
    if !app.show_about {
        return;
    }
    let mut open = true;
    egui::Window::new("About spurion").open(&mut open).collapsible(false).resizable(false).default_width(420.0).show(ui.ctx(), |ui| {
        ui.label(RichText::new(format!("spurion {}", env!("CARGO_PKG_VERSION"))).strong());
        ui.label(env!("CARGO_PKG_DESCRIPTION"));
        ui.add_space(6.0);
        ui.label(RichText::new(crate::CAUTION).color(look::LILAC));
        ui.add_space(6.0);
        ui.label("Readings are computed on this computer's CPU; nothing is sent anywhere.");
        ui.label("Colour maps: supporting attribution in amber, opposing in teal, built for even perceived steps (Kovesi 2015).");
        if let Some(f) = &app.config.recent_file {
            ui.label(RichText::new(format!("recent files kept in {}", f.display())).small().color(look::ASH));
        }
    });
    if !open {
        out.push(Intent::About(false));
    }
}

pub fn drop_hint(ui: &mut egui::Ui) {
    let hovering = ui.input(|i| !i.raw.hovered_files.is_empty());
    if !hovering {
        return;
    }
    let rect = ui.ctx().content_rect();
    let painter = ui.ctx().layer_painter(egui::LayerId::new(egui::Order::Foreground, egui::Id::unique("drop")));
    painter.rect_filled(rect, 0.0, Color32::from_black_alpha(170));
    painter.text(rect.center(), Align2::CENTER_CENTER, "drop to open: .onnx as the model, images and folders as images", FontId::proportional(20.0), look::CHALK);
    let _ = Vec2::ZERO;
}
