//! The ledger section of the right-hand panel: which ledger file, whether every change is on
//! disk (and, when not, why and what to do), its counts, and the regions drawn on the slide's
//! image, each with a delete button.

use egui::RichText;

use crate::gui::app::Inspector;
use crate::gui::intents::Intent;
use crate::gui::look;
use crate::gui::short_name;
use crate::gui::work::Pick;
use crate::ledger::Status;
use crate::regions::drawn::Shape;

fn shape_text(s: &Shape) -> String {
    match s {
        Shape::Rect { bbox: [x0, y0, x1, y1] } => format!("box x {x0}–{x1}, y {y0}–{y1}"),
        Shape::Polygon { points } => format!("outline of {} points", points.len()),
    }
}

pub(in crate::gui::panels) fn ledger_section(ui: &mut egui::Ui, app: &mut Inspector, out: &mut Vec<Intent>) {
    ui.heading("Ledger");
    if let Some(p) = &app.ledger.path {
        // The file by its folder and name (the whole path on hover), so no machine's path shows.
        let folder = p.parent().and_then(|d| d.file_name()).map(|n| format!("{}/", n.to_string_lossy())).unwrap_or_default();
        ui.label(format!("in {folder}{}", short_name(p))).on_hover_text(p.display().to_string());
    }
    ui.horizontal(|ui| {
        let l = ui.label("other");
        let r = ui
            .add(egui::TextEdit::singleline(&mut app.ledger.field).hint_text("a ledger file or its folder").desired_width(150.0))
            .labelled_by(l.id);
        if ui.small_button("…").clicked() {
            out.push(Intent::Pick(Pick::Ledger));
        }
        if ui.small_button("Open ledger").clicked() || (r.lost_focus() && ui.input(|i| i.key_pressed(egui::Key::Enter))) {
            out.push(Intent::OpenTypedLedger);
        }
    });
    let (line, bad) = app.ledger.status_line();
    ui.label(RichText::new(line).color(if bad { look::SIGNAL } else { look::MOSS }));
    if let Some(Status::Unsaved(_)) = app.ledger.status() {
        ui.horizontal(|ui| {
            if ui.button("Try saving now").clicked()
                && let Some(s) = &app.ledger.store
            {
                s.retry();
            }
            ui.label(RichText::new("(tried again every 3 s)").small().color(look::ASH));
        });
    }
    if let Some(e) = &app.ledger.error {
        ui.label(RichText::new(e).small().color(look::SIGNAL));
    }
    if let Some(l) = app.ledger.ledger() {
        let c = l.counts();
        ui.label(
            RichText::new(format!(
                "{} images · {} clean · {} marked · {} unsure · {} exclude · {} with drawn regions",
                c.images, c.clean, c.marked, c.unsure, c.exclude, c.with_drawn_regions
            ))
            .small()
            .color(look::ASH),
        )
        .on_hover_text(format!("root folder: {}", l.root_dir().display()));
    }
    ui.horizontal(|ui| {
        let l = ui.label("new drawn regions are labelled");
        ui.add(egui::TextEdit::singleline(&mut app.draw.label).desired_width(90.0)).labelled_by(l.id);
    });
    let Some(path) = app.verdict_target() else { return };
    let drawn = app.ledger.drawn_of(&path);
    if drawn.is_empty() {
        ui.label(RichText::new("no region drawn on this image (draw: box or outline, above the picture)").small().color(look::ASH));
        return;
    }
    ui.label(RichText::new("drawn on this image").small());
    for (i, d) in drawn.shapes().iter().enumerate() {
        ui.horizontal(|ui| {
            let name = if d.label.is_empty() { String::new() } else { format!("{} · ", d.label) };
            ui.label(RichText::new(format!("{name}{}", shape_text(&d.shape))).small());
            if ui.small_button("delete").on_hover_text("remove this drawn region from the ledger").clicked() {
                out.push(Intent::DeleteDrawn(path.clone(), i));
            }
        });
    }
}
