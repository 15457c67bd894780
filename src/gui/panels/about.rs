//! The about window and the drop hint.

use egui::{Align2, Color32, FontId, RichText};

use crate::gui::app::Inspector;
use crate::gui::intents::Intent;
use crate::gui::look;

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
}


/// When the window was asked to close while the ledger could not save: what is not saved, and
/// the choices (it closes by itself once the save works).
pub fn unsaved_on_close(ui: &mut egui::Ui, app: &mut Inspector, _out: &mut Vec<Intent>) {
    if !app.closing {
        return;
    }
    let Some(crate::ledger::Status::Unsaved(u)) = app.ledger.status() else { return };
    egui::Window::new("The ledger is not saved").collapsible(false).resizable(false).default_width(460.0).show(ui.ctx(), |ui| {
        ui.label(RichText::new(u.message()).color(look::SIGNAL));
        ui.add_space(6.0);
        ui.horizontal(|ui| {
            if ui.button("Try again now").clicked()
                && let Some(s) = &app.ledger.store
            {
                s.retry();
            }
            if ui.button("Keep the inspector open").clicked() {
                app.closing = false;
            }
            let n = if u.changes == 1 { "1 change".to_string() } else { format!("{} changes", u.changes) };
            if ui.button(format!("Close, losing {n}")).clicked() {
                // The user was told; dropping the store ends its thread without a last save.
                app.ledger.store = None;
                app.closing = false;
                ui.send_viewport_cmd(egui::ViewportCommand::Close);
            }
        });
        ui.label(RichText::new("The window closes by itself once the ledger is saved.").small().color(look::ASH));
    });
}
