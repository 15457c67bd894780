//! The top bar (model, opening files), the status bar (jobs, notes, the caution) and the image list.

use egui::RichText;

use crate::gui::app::Inspector;
use crate::gui::intents::Intent;
use crate::gui::look;
use crate::gui::short_name;
use crate::gui::state::*;
use crate::gui::work::Pick;

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
            if let Some(s) = &app.session {
                let text = if s.feed.warning.is_some() { RichText::new("Feed: guessed").color(look::LILAC) } else { RichText::new("Feed") };
                if ui.button(text).on_hover_text("how pictures are fed to the model; write a feed card").clicked() {
                    out.push(Intent::FeedWindow(!app.feed_window.open));
                }
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
                let open = app.review.open;
                if ui.selectable_label(open, "Review").on_hover_text(super::review::OPEN_HINT).clicked() {
                    out.push(Intent::Review(crate::gui::review::ReviewIntent::Open(!open)));
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
        // One row for the work, however much runs, so nothing above moves when a job starts or ends.
        ui.horizontal(|ui| {
            let running = &app.workers.running;
            let Some(first) = running.iter().find(|r| r.cancellable).or(running.first()) else {
                ui.label(RichText::new("nothing running").color(look::ASH));
                return;
            };
            let more = running.len() - 1;
            let room = ui.available_width() - if more > 0 { 190.0 } else { 90.0 };
            job_progress(ui, first, room, out);
            if more > 0 {
                ui.menu_button(format!("{more} more"), |ui| {
                    for r in running.iter().filter(|r| r.id != first.id) {
                        ui.horizontal(|ui| job_progress(ui, r, 420.0, out));
                    }
                });
            }
        });
        // The caution is always on the last line; a note that only repeats it is not shown twice.
        if let Some(n) = app.notes.last().filter(|n| n.text != crate::CAUTION) {
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

fn job_progress(ui: &mut egui::Ui, r: &crate::gui::work::Running, width: f32, out: &mut Vec<Intent>) {
    let (d, t) = r.ctl.progress();
    let text = if t > 0 { format!("{} — {d}/{t}", r.label) } else { r.label.clone() };
    ui.add(egui::ProgressBar::new(r.ctl.fraction()).desired_width(width).fill(look::LILAC.gamma_multiply(0.6)).text(text));
    if r.cancellable && ui.button("Cancel").clicked() {
        out.push(Intent::Cancel(r.id));
    }
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
                // The ledger's verdict beside the name, as keys 1–4 give it.
                let verdict = app.ledger.entry_of(&e.path).and_then(|x| x.verdict).map(|v| format!(" · {}", v.name())).unwrap_or_default();
                let r = ui.selectable_label(sel, format!("{mark} {}{verdict}", short_name(&e.path)));
                let r = if let ImageState::Failed(m) = &e.state { r.on_hover_text(m) } else { r.on_hover_text(e.path.display().to_string()) };
                if r.clicked() && !sel {
                    out.push(Intent::Select(i));
                }
            }
        });
    });
}

