//! The right-hand panel: the reading's settings, how it is shown, exports, and its figures.

use egui::RichText;

use super::{fmt_opt, removal_text};
use crate::gui::app::Inspector;
use crate::gui::intents::Intent;
use crate::gui::look;
use crate::gui::slide::export::ExportWhat;
use crate::gui::state::*;
use crate::gui::work::Pick;
use crate::gui::form::{BLACK_BASELINE_CAVEAT, method_menu};
use crate::methods::defaults::BASELINE_WHY;
use crate::feed::dicom::DicomImage;
use crate::feed::window::{VoiFunction, Windowing};
use crate::methods::{BaselineKind, MethodKind, ScoreKind, TargetSpec};
use crate::sign::Sign;

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

/// The display window of a DICOM picture: what is shown, never what the model is fed.
fn display_window(ui: &mut egui::Ui, w: &mut Option<Windowing>, d: &DicomImage) {
    let name = |w: &Option<Windowing>| match w {
        None => "as the model is fed".to_string(),
        Some(Windowing::File { index }) => format!("file window {}", index + 1),
        Some(Windowing::MinMax) => "lowest to highest value".to_string(),
        Some(Windowing::FullRange) => "every stored value".to_string(),
        Some(Windowing::Fixed { .. }) => "custom centre and width".to_string(),
    };
    let files = d.voi.windows.len().max(d.voi.tables.len());
    egui::ComboBox::from_label("display window").selected_text(name(w)).width(170.0).show_ui(ui, |ui| {
        ui.selectable_value(w, None, name(&None));
        for index in 0..files {
            let o = Some(Windowing::File { index });
            ui.selectable_value(w, o.clone(), name(&o));
        }
        for o in [Some(Windowing::MinMax), Some(Windowing::FullRange)] {
            ui.selectable_value(w, o.clone(), name(&o));
        }
        let (lo, hi) = d.value_range;
        let custom = Some(Windowing::Fixed { center: (lo + hi) / 2.0, width: (hi - lo).max(1.0), function: VoiFunction::Linear });
        if ui.selectable_label(matches!(w, Some(Windowing::Fixed { .. })), name(&custom)).clicked() && !matches!(w, Some(Windowing::Fixed { .. })) {
            *w = custom;
        }
    })
    .response
    .on_hover_text("Changes how the DICOM picture is shown on the slide. The model is still fed through the feed card's window.");
    if let Some(Windowing::Fixed { center, width, .. }) = w {
        labelled_drag(ui, "centre", center, -1e6..=1e6, 1.0);
        labelled_drag(ui, "width", width, 1.0..=1e6, 1.0);
    }
}

pub fn controls(ui: &mut egui::Ui, app: &mut Inspector, out: &mut Vec<Intent>) {
    egui::Panel::right("controls").default_size(290.0).show(ui, |ui| {
        // Export is pinned under the scrolled settings: always whole, whatever the window's
        // height (at 1360×860 it sat half under the fold).
        egui::Panel::bottom("export").show(ui, |ui| export_section(ui, app, out));
        egui::ScrollArea::vertical().auto_shrink([false, false]).show(ui, |ui| {
            ui.add_space(4.0);
            ui.heading("Reading");
            let scores = app.current_prepared().map(|p| p.scores.clone());
            let labels = app.session.as_ref().map(|s| s.labels.clone()).unwrap_or_default();
            let f = &mut app.form;
            egui::ComboBox::from_label("method").selected_text(f.method.entry().title).width(170.0).show_ui(ui, |ui| {
                for m in method_menu() {
                    ui.selectable_value(&mut f.method, m, m.entry().title);
                }
            });
            match f.method {
                MethodKind::IntegratedGradients => {
                    labelled_drag(ui, if f.refine { "start steps" } else { "steps" }, &mut f.steps, 1..=1024, 0.5);
                    ui.checkbox(&mut f.refine, "refine until the completeness gap is under 1 %").on_hover_text(
                        format!(
                            "Starts with this many midpoint steps and puts more where the path needs them (cells \
                             whose own gradients disagree with the score's change across them) until the attributions \
                             sum to F(x) − F(x′) within 1 %, up to {} gradients. A reading that stops at that cap \
                             says so. A larger gap means the path integral is not resolved and the map should not be \
                             read yet.",
                            crate::methods::MAX_REFINED_STEPS
                        ),
                    );
                }
                MethodKind::SmoothGrad => {
                    labelled_drag(ui, "samples", &mut f.samples, 1..=512, 0.5);
                    labelled_drag(ui, "noise (share of range)", &mut f.smooth_noise, 0.0..=1.0, 0.005);
                    labelled_drag(ui, "seed", &mut f.seed, 0..=u64::MAX, 1.0);
                }
                MethodKind::ExpectedGradients => {
                    labelled_drag(ui, "samples", &mut f.samples, 1..=512, 0.5);
                    labelled_drag(ui, "seed", &mut f.seed, 0..=u64::MAX, 1.0);
                }
                MethodKind::Occlusion => {
                    labelled_drag(ui, "window (px)", &mut f.window, 1..=512, 0.3);
                    labelled_drag(ui, "stride (px)", &mut f.stride, 1..=512, 0.3);
                }
                MethodKind::Gradient | MethodKind::GradientXInput => {}
            }
            let uses_baseline = f.method.entry().uses_baseline;
            ui.add_enabled_ui(uses_baseline, |ui| {
                let selected = match f.baseline {
                    BaselineKind::Blur => format!("blur σ {}", f.blur_sigma),
                    b => b.entry().title.to_string(),
                };
                egui::ComboBox::from_label("baseline")
                    .selected_text(selected)
                    .width(170.0)
                    .show_ui(ui, |ui| {
                        for b in BaselineKind::in_inspector() {
                            ui.selectable_value(&mut f.baseline, b, b.entry().title);
                        }
                    })
                    .response
                    .on_hover_text(BASELINE_WHY);
            });
            if !uses_baseline {
                ui.label(RichText::new(format!("{} takes no baseline", f.method.entry().title)).small().color(look::ASH));
            } else if f.baseline == BaselineKind::Black {
                ui.label(RichText::new(BLACK_BASELINE_CAVEAT).small().color(look::LILAC)).on_hover_text(BASELINE_WHY);
            } else if f.baseline == crate::methods::defaults::BASELINE.kind() {
                ui.label(RichText::new("default: noise draws keep a dark frame visible and the map tied to the model (hover for why)").small().color(look::ASH))
                    .on_hover_text(BASELINE_WHY);
            }
            // Parameters of every baseline stay visible: the strip uses them all.
            ui.collapsing("baseline parameters", |ui| {
                labelled_drag(ui, "blur σ (model pixels)", &mut f.blur_sigma, 0.1..=64.0, 0.05);
                labelled_drag(ui, "Gaussian noise σ", &mut f.noise_sigma, 0.001..=1.0, 0.002);
                labelled_drag(ui, "noise seed", &mut f.noise_seed, 0..=u64::MAX, 1.0);
                path_row(ui, "mean over", &mut f.mean_dir, "folder of the image", Pick::MeanFolder, out);
                path_row(ui, "draws from", &mut f.draws_dir, "folder of the image", Pick::DrawsFolder, out);
                path_row(ui, "custom image", &mut f.custom_path, "path to an image", Pick::CustomBaseline, out);
            });
            // Target classes with this image's scores.
            let score_of = |i: usize| scores.as_ref().and_then(|s| s.get(i)).map(|v| format!(" — {v:.3}")).unwrap_or_default();
            let top = scores.as_ref().and_then(|s| {
                s.iter().enumerate().max_by(|a, b| a.1.total_cmp(b.1)).map(|(i, _)| i)
            });
            let target_text = match &f.target {
                TargetSpec::Top => match top {
                    Some(i) => format!("top: {}{}", labels.get(i).cloned().unwrap_or_default(), score_of(i)),
                    None => "top class".into(),
                },
                TargetSpec::Index(i) => format!("{}{}", labels.get(*i).cloned().unwrap_or(format!("class {i}")), score_of(*i)),
                TargetSpec::Label(l) => l.clone(),
            };
            egui::ComboBox::from_label("target").selected_text(target_text).width(170.0).show_ui(ui, |ui| {
                ui.selectable_value(&mut f.target, TargetSpec::Top, "top class of each image");
                for (i, l) in labels.iter().enumerate() {
                    ui.selectable_value(&mut f.target, TargetSpec::Index(i), format!("{i} · {l}{}", score_of(i)));
                }
            });
            egui::ComboBox::from_label("score").selected_text(f.score.title()).width(170.0).show_ui(ui, |ui| {
                for s in ScoreKind::ALL {
                    ui.selectable_value(&mut f.score, s, s.title());
                }
            });
            if let Some(p) = &app.form_problem {
                ui.label(RichText::new(p).color(look::LILAC));
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
            if let Some(d) = app.current_prepared().and_then(|p| p.picture.dicom.clone()) {
                display_window(ui, &mut app.view.display_window, &d);
            }
            let drawn = app.current_image().is_some_and(|e| !app.ledger.drawn_of(&e.path).is_empty());
            let painted = app.current_prepared().and_then(|p| p.painted.as_ref().map(|(_, f)| f.clone()));
            let fill = match (&painted, drawn) {
                (_, true) => "found and drawn regions".to_string(),
                (Some(f), false) => f.clone(),
                (None, false) => "no region found or drawn".to_string(),
            };
            ui.add_enabled_ui(painted.is_some() || drawn, |ui| {
                ui.checkbox(&mut app.view.painted_out, "regions painted out").on_hover_text(format!(
                    "Shows the image the removal figures ran the model on: every region painted out ({fill})."
                ));
            });


            ui.separator();
            super::sweep::ledger::ledger_section(ui, app, out);

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
                    let missed = if r.completeness_shortfall().is_some() { " — target not reached (cap)" } else { "" };
                    ui.label(r.completeness_gap.map_or("— (not defined)".into(), |g| format!("{:.2} %{missed}", g * 100.0)));
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
                let t = shown.reading.target.index;
                for rr in &shown.assessment.regions {
                    let removal = rr.removal.as_ref().map(|x| format!(" · {}", removal_text(x, t))).unwrap_or_default();
                    ui.label(
                        RichText::new(format!(
                            "{}: mark share {} · lift {}{removal}{}",
                            rr.label,
                            fmt_opt(rr.figures.mark_share, 2),
                            fmt_opt(rr.figures.lift, 1),
                            if rr.suspect { " · passes the flag rule" } else { "" }
                        ))
                        .small(),
                    )
                    .on_hover_text(&rr.reason);
                }
                for h in &shown.assessment.hotspots {
                    let removal = h.removal.as_ref().map(|x| format!(" · {}", removal_text(x, t))).unwrap_or_default();
                    ui.label(
                        RichText::new(format!("{}: share {:.2} · mark-likeness {:.2}{removal} · {}", h.label(), h.share, h.mark_likeness, h.role.name()))
                            .small(),
                    );
                }
                if let Some(x) = &shown.assessment.removal_all {
                    ui.label(RichText::new(format!("all regions ({}): {}", x.fill, removal_text(x, t))).small());
                }
                if !shown.assessment.suspect_evidence.is_empty() {
                    let names: Vec<&str> = shown
                        .assessment
                        .suspect_evidence
                        .iter()
                        .map(|e| e.name())
                        .collect();
                    ui.label(RichText::new(format!("evidence: {}", names.join(" and "))).small().strong());
                }
            }
        });
    });
}

/// The export row: where to, and the three files.
fn export_section(ui: &mut egui::Ui, app: &mut Inspector, out: &mut Vec<Intent>) {
    // A line where the scrolled settings above end.
    ui.separator();
    ui.heading("Export");
    ui.horizontal(|ui| {
        let l = ui.label("to");
        let w = (ui.available_width() - 40.0).clamp(80.0, 180.0);
        ui.add(egui::TextEdit::singleline(&mut app.export_dir).desired_width(w)).labelled_by(l.id);
        if ui.small_button("…").clicked() {
            out.push(Intent::Pick(Pick::ExportFolder));
        }
    });
    // Wrapped: the three buttons stay whole however narrow the panel is.
    ui.horizontal_wrapped(|ui| {
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
    ui.add_space(4.0);
}
