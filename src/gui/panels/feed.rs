//! The feed window: how pictures are fed to the model, each value with where it came from, and,
//! when the model has no feed card, a card written beside it from a preset in one click.

use std::path::PathBuf;

use egui::RichText;

use crate::feed::Preset;
use crate::gui::app::Inspector;
use crate::gui::intents::Intent;
use crate::gui::look;

pub fn feed_window(ui: &mut egui::Ui, app: &mut Inspector, out: &mut Vec<Intent>) {
    if !app.feed_window.open {
        return;
    }
    let Some(session) = app.session.clone() else { return };
    let mut open = true;
    egui::Window::new("Feed").open(&mut open).collapsible(false).resizable(false).default_width(460.0).show(ui.ctx(), |ui| {
        let feed = &session.feed;
        ui.label(RichText::new("How pictures become the model's input (origin in brackets: card, graph or default)").color(look::ASH));
        for l in feed.lines() {
            ui.monospace(l);
        }
        if let Some(crate::report::FeedRecord::Picture(p)) = app.current_prepared().map(|p| p.feed.clone()) {
            ui.add_space(4.0);
            ui.label(RichText::new("The picture on the slide").color(look::ASH));
            for l in p.picture_lines() {
                ui.monospace(l);
            }
        }
        if let Some(w) = &feed.warning {
            ui.add_space(4.0);
            ui.label(RichText::new(w).color(look::LILAC));
        }
        if !feed.guessed {
            return;
        }
        ui.add_space(6.0);
        ui.separator();
        ui.label(RichText::new("Write a feed card beside the model").strong());
        ui.label("Size, layout and channels come from the graph; choose how the model was trained to be fed:");
        for (i, p) in Preset::ALL.iter().enumerate() {
            ui.radio_value(&mut app.feed_window.preset, i, format!("{}: {}", p.name(), p.describe()));
        }
        ui.horizontal(|ui| {
            let l = ui.label("labels file (one per line, optional)");
            ui.add(egui::TextEdit::singleline(&mut app.feed_window.labels).hint_text("path/to/labels.txt").desired_width(220.0)).labelled_by(l.id);
        });
        if ui.button("Write the card and use it").clicked() {
            let labels = app.feed_window.labels.trim();
            let labels = (!labels.is_empty()).then(|| PathBuf::from(labels));
            out.push(Intent::WriteCard(app.feed_window.preset, labels));
        }
        ui.label(RichText::new("The same as `spurion card --model MODEL --preset NAME`; an existing card is never replaced.").small().color(look::ASH));
    });
    if !open {
        out.push(Intent::FeedWindow(false));
    }
}
