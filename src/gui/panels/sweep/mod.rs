//! The sweep view (a tab of the bottom panel): start a sweep of a folder with the reading's
//! settings, follow and cancel it, then the table of its images (sortable by clicking a
//! column's title, filtered, with thumbnails and the ledger's verdicts as they stand now) and
//! each group's atlas. A click on a row opens its image in the slide above.

use egui::{Color32, Rect, RichText, Sense, Stroke, pos2, vec2};

use super::fmt_opt;
use crate::gui::app::Inspector;
use crate::gui::intents::Intent;
use crate::gui::look;
use crate::gui::sweep::{Column, SweepDone, Thumb};
use crate::gui::work::Pick;
use crate::ledger::Verdict;
use crate::sweep::{GroupSummary, Row};

pub(super) mod curate;
pub(super) mod ledger;

const ROW: f32 = 38.0;
const THUMB: f32 = 34.0;
const ATLAS_COLUMN: f32 = 300.0;

fn width(c: Column) -> f32 {
    match c {
        Column::Image => 200.0,
        Column::Group => 90.0,
        Column::Class => 105.0,
        Column::MarkShare => 80.0,
        Column::Lift => 55.0,
        Column::Removal => 165.0,
        Column::Suspect => 165.0,
        Column::Verdict => 80.0,
    }
}

fn path_field(ui: &mut egui::Ui, label: &str, text: &mut String, hint: &str, pick: Pick, out: &mut Vec<Intent>) {
    let l = ui.label(label);
    ui.add(egui::TextEdit::singleline(text).hint_text(hint).desired_width(190.0)).labelled_by(l.id);
    if ui.small_button("…").clicked() {
        out.push(Intent::Pick(pick));
    }
}

/// The sweep's controls, beside the bottom panel's tabs.
pub(super) fn sweep_controls(ui: &mut egui::Ui, app: &mut Inspector, out: &mut Vec<Intent>) {
    let running = app.sweep.job.and_then(|id| app.workers.running.iter().find(|r| r.id == id).map(|r| (id, r.ctl.clone(), r.cancellable)));
    ui.add_enabled_ui(running.is_none(), |ui| {
        let s = &mut app.sweep;
        path_field(ui, "folder", &mut s.images_field, "images to sweep", Pick::SweepImages, out);
        path_field(ui, "files to", &mut s.out_field, "folder for the sweep's files", Pick::SweepOut, out);
    });
    match running {
        Some((_, _, false)) => {
            ui.spinner();
            ui.label("reading the sweep's files…");
        }
        Some((id, ctl, true)) => {
            let (done, total) = ctl.progress();
            let text = if total == 0 {
                "finding the images…".to_string()
            } else if done >= total {
                "writing the sweep's files…".to_string()
            } else {
                let secs = app.sweep.started.map_or(0.0, |t| t.elapsed().as_secs_f64());
                let rate = if secs > 0.0 { done as f64 / secs } else { 0.0 };
                let left = if rate > 0.0 { format!(", about {} left", crate::gui::duration_text((total - done) as f64 / rate)) } else { String::new() };
                // A slow sweep reads "an image every 12 s", never "0.0 images a second".
                let pace = match rate {
                    r if r >= 0.95 => format!("{r:.1} images a second"),
                    r if r > 0.0 => format!("an image every {:.0} s", 1.0 / r),
                    _ => "first image under way".to_string(),
                };
                format!("{done}/{total} images, {pace}{left}")
            };
            ui.add(egui::ProgressBar::new(ctl.fraction()).desired_width(320.0).fill(look::LILAC.gamma_multiply(0.6)).text(text));
            if ui.button("Cancel sweep").clicked() {
                out.push(Intent::Cancel(id));
            }
        }
        None => {
            if ui.button("Start sweep").on_hover_text("reads every image below the folder with the reading's settings above").clicked() {
                out.push(Intent::StartSweep);
            }
            if ui.button("Show files").on_hover_text("shows the sweep already in the files folder (made here or by spurion sweep)").clicked() {
                out.push(Intent::LoadSweep);
            }
            clean_controls(ui, app, out);
        }
    }
}

/// Cleaning the marked images of the shown sweep: the button, or the running job's progress
/// and cancel.
fn clean_controls(ui: &mut egui::Ui, app: &Inspector, out: &mut Vec<Intent>) {
    let Some(r) = app.sweep.result.as_ref() else { return };
    let running = app.sweep.clean.job.and_then(|id| app.workers.running.iter().find(|j| j.id == id).map(|j| (id, j.ctl.clone())));
    match running {
        Some((id, ctl)) => {
            let (done, total) = ctl.progress();
            let text = if total == 0 { "listing the files…".to_string() } else { format!("cleaning: {done}/{total} files") };
            ui.add(egui::ProgressBar::new(ctl.fraction()).desired_width(220.0).fill(look::LILAC.gamma_multiply(0.6)).text(text));
            if ui.button("Cancel cleaning").clicked() {
                out.push(Intent::Cancel(id));
            }
        }
        None => {
            let to = crate::gui::sweep::clean_work::default_clean_out(&r.images_root);
            let hint = format!(
                "paints the marks of the sweep's suspect images, and of the images the ledger marks marked, out into a copy of the folder \
                 ({}; the folder itself is never written), then opens the cleaned copy beside the original",
                to.display()
            );
            if ui.button("Clean marked images").on_hover_text(hint).clicked() {
                out.push(Intent::CleanMarked);
            }
        }
    }
}

/// The options under the controls: groups, what is left out.
fn options(ui: &mut egui::Ui, app: &mut Inspector) {
    ui.add_enabled_ui(app.sweep.job.is_none(), |ui| {
        ui.horizontal_wrapped(|ui| {
            let s = &mut app.sweep;
            let l = ui.label("groups");
            ui.add(egui::TextEdit::singleline(&mut s.groups_field).hint_text("sub-folders, or manifest.csv:column").desired_width(170.0))
                .labelled_by(l.id);
            let l = ui.label("leave out");
            ui.add(egui::TextEdit::singleline(&mut s.leave_out_field).hint_text("e.g. masks, *.seg.png").desired_width(130.0))
                .labelled_by(l.id)
                .on_hover_text("paths left out, separated by commas: a name anywhere (masks) or a path from the folder (site/old/**)");
            ui.checkbox(&mut s.leave_out_excluded, "leave out images marked exclude");
            let request = app.form.request(None).map(|r| r.describe()).unwrap_or_else(|e| e);
            ui.label(RichText::new(format!("reads with: {request}")).small().color(look::ASH));
        });
    });
}

/// A filter's name, then its choices (the name first, as a filter row reads).
fn combo<T: Clone + PartialEq>(ui: &mut egui::Ui, label: &str, value: &mut T, choices: Vec<(T, String)>) {
    let shown = choices.iter().find(|(v, _)| v == value).map(|(_, t)| t.clone()).unwrap_or_default();
    ui.label(label);
    egui::ComboBox::from_id_salt(("sweep filter", label)).selected_text(shown).width(110.0).show_ui(ui, |ui| {
        for (v, t) in choices {
            ui.selectable_value(value, v, t);
        }
    });
}

fn filters(ui: &mut egui::Ui, app: &mut Inspector, r: &SweepDone, shown: usize) {
    ui.horizontal_wrapped(|ui| {
        let f = &mut app.sweep.filter;
        ui.checkbox(&mut f.suspect_only, "suspect only");
        let mut groups: Vec<(Option<String>, String)> = vec![(None, "all".into())];
        groups.extend(r.groups.iter().map(|g| (Some(g.group.clone()), g.group.clone())));
        combo(ui, "group", &mut f.group, groups);
        let mut classes: Vec<String> = r.rows.iter().map(|x| x.top_label.clone()).collect();
        classes.sort();
        classes.dedup();
        let mut class_choices = vec![(None, "all".to_string())];
        class_choices.extend(classes.into_iter().map(|c| (Some(c.clone()), c)));
        combo(ui, "class", &mut f.class, class_choices);
        let mut verdicts = vec![(None, "any".to_string()), (Some(None), "none yet".to_string())];
        verdicts.extend(Verdict::ALL.iter().map(|v| (Some(Some(*v)), v.name().to_string())));
        combo(ui, "verdict", &mut f.verdict, verdicts);
        let l = ui.label("mark share ≥");
        ui.add(egui::DragValue::new(&mut f.min_mark_share).range(0.0..=1.0).speed(0.005).fixed_decimals(2)).labelled_by(l.id);
        let suspect = r.rows.iter().filter(|x| x.suspect).count();
        ui.label(RichText::new(format!("showing {shown} of {} · {suspect} suspect", r.rows.len())).color(look::ASH));
    });
    let made = if r.from_files {
        format!("read from {}", r.out.display())
    } else {
        format!("{} computed, {} from the cache, {:.1} s · files in {}", r.computed, r.cached, r.seconds, r.out.display())
    };
    let mut facts = vec![made];
    if r.left_out > 0 {
        facts.push(format!("{} marked exclude left out", r.left_out));
    }
    if let Some(s) = r.skipped.first() {
        facts.push(format!("{} could not be read (e.g. {}: {}; all in skipped.csv)", r.skipped.len(), s.path, s.reason));
    }
    ui.label(RichText::new(facts.join(" · ")).small().color(look::ASH));
}

/// The sweep's table and atlases, or what to do to get them.
pub(super) fn sweep_body(ui: &mut egui::Ui, app: &mut Inspector, out: &mut Vec<Intent>) {
    options(ui, app);
    let Some(r) = app.sweep.result.clone() else {
        ui.label(
            RichText::new(
                "A sweep reads every image below a folder with the reading's settings, ranks them by how much of the \
                 supporting attribution sits on marks, and shows where the model looks across each group (the atlas). \
                 Its files (tables, atlas pictures, report.html) and its cache go to the files folder, which spurion sweep \
                 --out shares.",
            )
            .color(look::ASH),
        );
        return;
    };
    let generation = app.ledger.generation;
    let order = app.sweep.order(app.ledger.ledger(), generation).to_vec();
    filters(ui, app, &r, order.len());
    ui.horizontal_top(|ui| {
        let table_width = (ui.available_width() - ATLAS_COLUMN - 12.0).max(300.0);
        ui.vertical(|ui| {
            ui.set_width(table_width);
            egui::ScrollArea::horizontal().id_salt("sweep table").show(ui, |ui| table(ui, app, &r, &order, out));
        });
        ui.separator();
        egui::ScrollArea::vertical().id_salt("sweep atlas").auto_shrink([false, false]).show(ui, |ui| {
            ui.vertical(|ui| {
                recurring(ui, app, &r, out);
                atlases(ui, app, &r);
            })
        });
    });
}

fn header(ui: &mut egui::Ui, app: &Inspector, out: &mut Vec<Intent>) {
    ui.horizontal(|ui| {
        ui.add_space(THUMB + ui.spacing().item_spacing.x);
        for c in Column::ALL {
            let mark = match app.sweep.sort {
                s if s.column == c && s.descending => " ▼",
                s if s.column == c => " ▲",
                _ => "",
            };
            let b = egui::Button::new(RichText::new(format!("{}{mark}", c.title())).strong()).frame(false);
            if ui.add_sized([width(c), 18.0], b).on_hover_text(format!("{} — click to sort", c.hint())).clicked() {
                out.push(Intent::SortBy(c));
            }
        }
    });
}

fn removal_cell(row: &Row, labels: &[String]) -> String {
    match (row.removal_probability_drop, row.top_after_removal) {
        (Some(d), Some(t)) if t != row.top => {
            format!("{:+.2} → {}", -d, labels.get(t).cloned().unwrap_or_else(|| format!("class {t}")))
        }
        (Some(d), _) => format!("{:+.2}", -d),
        _ => "—".into(),
    }
}

fn table(ui: &mut egui::Ui, app: &mut Inspector, r: &SweepDone, order: &[usize], out: &mut Vec<Intent>) {
    header(ui, app, out);
    let labels = app.session.as_ref().map(|s| s.labels.clone()).unwrap_or_default();
    let current = app.current_image().map(|e| e.path.clone());
    ui.style_mut().interaction.selectable_labels = false;
    egui::ScrollArea::vertical().id_salt("sweep rows").auto_shrink([false, false]).show_rows(ui, ROW, order.len(), |ui, range| {
        for &i in &order[range] {
            let row = &r.rows[i];
            let selected = current.as_deref() == Some(r.images_root.join(&row.path).as_path());
            let verdict = app.sweep.verdict(app.ledger.ledger(), i);
            let top = ui.cursor().min;
            let full = Rect::from_min_size(top, vec2(ui.available_width(), ROW));
            if selected {
                ui.painter().rect_filled(full, 2.0, look::LILAC.gamma_multiply(0.25));
            }
            ui.horizontal(|ui| {
                ui.set_height(ROW);
                thumb(ui, app, &row.path);
                let cell = |ui: &mut egui::Ui, c: Column, text: RichText| {
                    ui.add_sized([width(c), ROW], egui::Label::new(text).truncate());
                };
                cell(ui, Column::Image, RichText::new(&row.path));
                cell(ui, Column::Group, RichText::new(&row.group));
                cell(ui, Column::Class, RichText::new(&row.top_label));
                cell(ui, Column::MarkShare, RichText::new(fmt_opt(row.mark_share, 2)).monospace());
                cell(ui, Column::Lift, RichText::new(fmt_opt(row.lift, 1)).monospace());
                cell(ui, Column::Removal, RichText::new(removal_cell(row, &labels)).monospace());
                if row.suspect {
                    // Two lines, so that "attribution + removal" is read whole in the column.
                    ui.allocate_ui_with_layout(vec2(width(Column::Suspect), ROW), egui::Layout::top_down(egui::Align::Min), |ui| {
                        ui.label(RichText::new("suspect").color(look::SIGNAL).strong());
                        ui.add(egui::Label::new(RichText::new(row.evidence.replace('+', " + ")).small().color(look::SIGNAL)).truncate())
                            .on_hover_text(format!("suspect by {}", row.evidence.replace('+', " and ")));
                    });
                } else {
                    cell(ui, Column::Suspect, RichText::new("—").color(look::ASH));
                }
                let v = match verdict {
                    Some(v) => RichText::new(v.name()).strong(),
                    None => RichText::new("none yet").color(look::ASH),
                };
                cell(ui, Column::Verdict, v);
            });
            let hit = ui.interact(full, ui.scope_id().with(("sweep row", i)), Sense::click());
            if hit.clicked() {
                out.push(Intent::OpenRow(i));
            }
            if hit.hovered() && !selected {
                ui.painter().rect_stroke(full, 2.0, Stroke::new(1.0, look::LILAC.gamma_multiply(0.5)), egui::StrokeKind::Inside);
            }
        }
    });
}

fn thumb(ui: &mut egui::Ui, app: &mut Inspector, rel: &str) {
    let (rect, resp) = ui.allocate_exact_size(vec2(THUMB, THUMB), Sense::hover());
    match app.sweep.thumbs.get(rel) {
        Some(Thumb::Ready(t)) => {
            ui.painter().image(t.id(), rect, Rect::from_min_max(pos2(0.0, 0.0), pos2(1.0, 1.0)), Color32::WHITE);
        }
        Some(Thumb::Failed(e)) => {
            ui.painter().rect_stroke(rect, 2.0, Stroke::new(1.0, look::ASH), egui::StrokeKind::Inside);
            resp.on_hover_text(format!("no thumbnail: {e}"));
        }
        Some(Thumb::Pending) => {
            ui.painter().rect_filled(rect, 2.0, look::DEEP);
        }
        None => {
            ui.painter().rect_filled(rect, 2.0, look::DEEP);
            app.sweep.wanted_thumbs.push(rel.to_string());
        }
    }
}

fn group_line(g: &GroupSummary) -> String {
    let rate = |i: &Option<crate::sweep::stats::Interval>| i.as_ref().map_or("—".into(), |i| format!("{:.0} %", 100.0 * i.estimate));
    format!(
        "{} images · suspect {} · mean mark share {} · flip rate {}",
        g.images,
        rate(&g.suspect_rate),
        g.mean_mark_share.as_ref().map_or("—".into(), |i| format!("{:.3}", i.estimate)),
        rate(&g.flip_rate)
    )
}

/// The recurring hotspots: one entry per cluster with its exemplars, what it is, and the
/// action that marks all its images in the ledger.
fn recurring(ui: &mut egui::Ui, app: &Inspector, r: &SweepDone, out: &mut Vec<Intent>) {
    ui.label(RichText::new("recurring hotspots: places the map lights up again and again").strong());
    if r.recurring.is_empty() {
        ui.label(RichText::new("none: no hotspot recurs in enough images").small().color(look::ASH));
    }
    for ((c, _), texes) in r.recurring.iter().zip(&app.sweep.recurring_tex) {
        let groups: Vec<String> = c.groups.iter().map(|(g, n)| format!("{g} {n}")).collect();
        let flips = c.flip_rate.map_or("not tested".into(), |i| format!("{} of {} flip ({:.0} %)", c.flips, c.tested, 100.0 * i.estimate));
        ui.label(RichText::new(format!("#{} · {} images · {} · {}", c.id, c.images, c.place_kind, flips)));
        ui.label(
            RichText::new(format!("looks like a mark {} of {} · {}", c.look_like_mark, c.hotspots, groups.join(", "))).small().color(look::ASH),
        );
        ui.horizontal(|ui| {
            for (t, m) in texes.iter().zip(&c.exemplars) {
                let [w, h] = t.size();
                let side = 44.0 / w.max(h).max(1) as f32;
                ui.add(egui::Image::new((t.id(), vec2(w as f32 * side, h as f32 * side)))).on_hover_text(format!("{} {:?}", m.path, m.bbox));
            }
        });
        let can = app.ledger.ledger().is_some();
        let b = ui.add_enabled(can, egui::Button::new("accept as mark").small());
        let b = if can { b.on_hover_text("every image of the cluster: verdict marked, the hotspot's box drawn") } else { b.on_disabled_hover_text("open a ledger first") };
        if b.clicked() {
            out.push(Intent::AcceptCluster(c.id));
        }
        ui.add_space(6.0);
    }
    ui.separator();
}

fn atlases(ui: &mut egui::Ui, app: &Inspector, r: &SweepDone) {
    ui.label(RichText::new("atlas: where the model's supporting attribution sits, averaged over each group").small().color(look::ASH));
    for (g, tex, [gw, gh]) in &app.sweep.atlas_tex {
        let summary = r.groups.iter().find(|s| &s.group == g);
        ui.label(RichText::new(g).strong());
        if let Some(s) = summary {
            ui.label(RichText::new(group_line(s)).small());
        }
        let side = (ATLAS_COLUMN - 40.0).min(150.0);
        let (rect, _) = ui.allocate_exact_size(vec2(side, side * *gh as f32 / (*gw).max(1) as f32), Sense::hover());
        ui.painter().image(tex.id(), rect, Rect::from_min_max(pos2(0.0, 0.0), pos2(1.0, 1.0)), Color32::WHITE);
        if let Some(hb) = summary.and_then(|s| s.atlas_hottest.as_ref()) {
            let at = |x: usize, y: usize| pos2(rect.left() + rect.width() * x as f32 / *gw as f32, rect.top() + rect.height() * y as f32 / *gh as f32);
            let b = Rect::from_min_max(at(hb.bbox[0], hb.bbox[1]), at(hb.bbox[2], hb.bbox[3]));
            ui.painter().rect_stroke(b, 0.0, Stroke::new(1.5, look::LILAC), egui::StrokeKind::Outside);
            ui.label(
                RichText::new(format!("hottest place (lilac box): {:.0} % of the support on {:.1} % of the area", 100.0 * hb.share, 100.0 * hb.area_share))
                    .small()
                    .color(look::ASH),
            );
        }
        ui.add_space(6.0);
    }
}
