//! The review panel: the tests a reviewer runs on the slide's reading, computed on request on
//! a worker (progress, cancel), drawn with egui: the deletion and insertion curves, the
//! randomisation cascade as a row of maps with their correlations, the convergence plot and
//! the Shapley values over the image, each with its figures read out in plain words and its
//! definition named in a tooltip.

use egui::{Color32, FontId, Rect, RichText, Sense, Stroke, StrokeKind, pos2, vec2};

use self::plot::{Plot, legend_entry, legend_row, range_of};
use crate::gui::app::Inspector;
use crate::gui::intents::Intent;
use crate::gui::look;
use crate::gui::review::{ReviewForm, ReviewIntent, ReviewResult, RunState};
use crate::gui::short_name;
use crate::gui::state::ImageState;
use crate::methods::Rule;
use crate::render::plot::{tick_label, ticks};
use crate::review::Phase;
use crate::review::convergence::Convergence;
use crate::review::curves::{Curve, Curves};
use crate::review::randomise::{Cascade, MethodCascade};
use crate::review::shapley::Shapley;

mod plot;
pub(super) mod review_strip;
pub(super) mod strip;

pub const CURVES_DEF: &str = "Deletion and insertion curves (Petsiuk, Das, Saenko 2018, RISE): the input's pixels \
are replaced by the fill, most supporting first (deletion), or put back into the fill in the same order (insertion), and \
the target's score is read after each step. Seeded random orders are the reference. Lead: how far the map's order beats \
the random one, as a share of |F(x) − F(fill)|; above 0 the map's order beats chance.";
pub const CASCADE_DEF: &str = "Model-parameter randomisation (Adebayo et al. 2018, \"Sanity Checks for Saliency Maps\"): \
the layers with weights are re-drawn from the output side down, one more each step, and the map is computed again. A map \
that explains the model must change as the model is destroyed. ρ: Spearman's rank correlation of |map| with the original; \
top: the overlap of the top 10 %. Flagged when ρ is 0.5 or more after the last step (a threshold of ours, set before \
looking at any result).";
pub const CONVERGENCE_DEF: &str = "Convergence of integrated gradients (Sundararajan, Taly, Yan 2017): the attributions \
should add up to F(x) − F(x′) (completeness); the paper advises checking that the gap is within 5 % and raising the steps \
until it is. Shown: the completeness gap at 4, 8, … steps under the midpoint, trapezoid and Gauss–Legendre rules.";
pub const SHAPLEY_DEF: &str = "Region Shapley values (Castro, Gómez, Tejada 2009): each part's effect on the target's \
score, averaged over the orders in which the parts can arrive, absent parts taken from the fill; estimated from sampled \
orders in antithetic pairs with a standard error, exact when every order is taken. Forwards only. The values add up to \
F(x) − F(fill).";

const RANDOM: Color32 = look::ASH;

fn c32([r, g, b]: [u8; 3]) -> Color32 {
    Color32::from_rgb(r, g, b)
}

/// Deletion in amber (supporting), insertion in teal (opposing), as the PNG panel draws them;
/// lifted a little so the lines read on the dark ground.
fn deletion_colour() -> Color32 {
    c32(crate::render::diverging(0.75))
}
fn insertion_colour() -> Color32 {
    c32(crate::render::diverging(-0.75))
}

/// The deletion curve's lead in plain words.
pub fn deletion_text(c: &Curve) -> String {
    match c.lead {
        Some(l) if l > 0.0 => format!("deletion in the map's order lowers the score faster than random: lead {l:.2}"),
        Some(l) => format!("deletion in the map's order does not lower the score faster than random: lead {l:.2}"),
        None => "deletion: the score at the input equals the fill's, so there is no lead".into(),
    }
}

/// The insertion curve's lead in plain words.
pub fn insertion_text(c: &Curve) -> String {
    match c.lead {
        Some(l) if l > 0.0 => format!("insertion in the map's order raises the score faster than random: lead {l:.2}"),
        Some(l) => format!("insertion in the map's order does not raise the score faster than random: lead {l:.2}"),
        None => "insertion: the score at the input equals the fill's, so there is no lead".into(),
    }
}

/// The cascade's last step in plain words (`total`: the model's layers with weights).
pub fn cascade_text(mc: &MethodCascade, total: usize) -> String {
    let Some(last) = mc.steps.last() else { return format!("{}: no layer was re-drawn", mc.method) };
    let k = last.layers_randomised;
    let after = if k == total { format!("after all {total} layers") } else { format!("after the top {k} of {total} layers") };
    match last.spearman {
        Some(rho) if mc.independent => format!("map barely changes when the model's weights are re-drawn: ρ {rho:.2} {after} — flagged"),
        Some(rho) => format!("map changes when the model's weights are re-drawn: ρ {rho:.2} {after}"),
        None => format!("map is constant {after}: no rank correlation"),
    }
}

fn rule_title(r: Rule) -> &'static str {
    match r {
        Rule::Midpoint => "midpoint",
        Rule::Trapezoid => "trapezoid",
        Rule::GaussLegendre => "Gauss–Legendre",
    }
}

/// Where each rule's completeness gap stays under the target, in plain words.
pub fn convergence_text(c: &Convergence) -> String {
    let max = c.rules.iter().flat_map(|l| l.points.last()).map(|p| p.steps).max().unwrap_or(0);
    let parts: Vec<String> = c
        .rules
        .iter()
        .map(|l| match l.steps_to_gap {
            Some(s) => format!("{} from {s} steps", rule_title(l.rule)),
            None => format!("{} not within {max} steps", rule_title(l.rule)),
        })
        .collect();
    format!("completeness gap stays under {} %: {}", tick_label(c.target_gap * 100.0), parts.join("; "))
}

/// The Shapley values' efficiency check in plain words.
pub fn shapley_sum_text(s: &Shapley) -> String {
    format!(
        "the values add up to F(x) − F(fill): {} = {}",
        crate::render::number4(s.sum),
        crate::render::difference_text(s.score_input, s.score_baseline)
    )
}

/// A section heading with its definition in the tooltip.
fn section(ui: &mut egui::Ui, title: &str, def: &str) {
    ui.add_space(6.0);
    ui.separator();
    ui.label(RichText::new(title).strong().size(15.0)).on_hover_text(def);
}

fn reading_line(ui: &mut egui::Ui, text: String, warn: bool, def: &str) {
    let t = RichText::new(text);
    ui.label(if warn { t.color(look::LILAC) } else { t }).on_hover_text(def);
}

/// The review in the centre, in place of the slide (the top bar's Review button switches).
pub fn review_panel(ui: &mut egui::Ui, app: &mut Inspector, out: &mut Vec<Intent>) {
    egui::CentralPanel::default().frame(egui::Frame::new().fill(look::SLATE).inner_margin(10.0)).show(ui, |ui| {
        egui::ScrollArea::vertical().id_salt("review scroll").auto_shrink([false, false]).show(ui, |ui| {
            ui.horizontal(|ui| {
                ui.heading("Review");
                ui.with_layout(egui::Layout::right_to_left(egui::Align::Center), |ui| {
                    if ui.button("Back to the slide").clicked() {
                        out.push(Intent::Review(ReviewIntent::Open(false)));
                    }
                });
            });
            // The caution stays on the status bar's last line, once.
            let target = app.review_target();
            match &target {
                Ok((k, req)) => {
                    ui.label(RichText::new(format!("{} · {}", short_name(&k.image), req.describe())).strong());
                }
                Err(e) => {
                    ui.label(RichText::new(format!("nothing to review: {e}")).color(look::ASH));
                }
            }
            settings(ui, &mut app.review.form);
            let running = app.review_running();
            ui.horizontal(|ui| {
                let ready = target.is_ok() && app.session.is_some() && app.current_prepared().is_some();
                if ui
                    .add_enabled(ready && !running, egui::Button::new("Run review"))
                    .on_hover_text("Runs the tests above on the slide's reading, on a worker; the inspector stays live.")
                    .clicked()
                {
                    out.push(Intent::Review(ReviewIntent::Run));
                }
                if running && ui.button("Cancel review").clicked() {
                    out.push(Intent::Review(ReviewIntent::Cancel));
                }
            });
            status(ui, app);
            let Some(run) = app.current_review() else { return };
            let RunState::Done(result) = &run.state else { return };
            let (result, form, job) = (result.clone(), run.form.clone(), run.job);
            ui.label(RichText::new(format!("computed with: {}", form.summary())).small().color(look::ASH));
            results(ui, app, &result, job);
        });
    });
}

/// The review's settings (collapsed): which tests run and how far.
fn settings(ui: &mut egui::Ui, f: &mut ReviewForm) {
    fn drag(ui: &mut egui::Ui, label: &str, v: &mut usize, range: std::ops::RangeInclusive<usize>) {
        ui.horizontal(|ui| {
            let l = ui.label(label);
            ui.add(egui::DragValue::new(v).range(range).speed(0.3)).labelled_by(l.id);
        });
    }
    egui::CollapsingHeader::new("review settings").id_salt("review settings").show(ui, |ui| {
        ui.checkbox(&mut f.curves, "deletion and insertion curves").on_hover_text(CURVES_DEF);
        ui.add_enabled_ui(f.curves, |ui| {
            ui.indent("curves", |ui| {
                drag(ui, "curve steps", &mut f.curve_steps, 1..=1024);
                drag(ui, "random orders", &mut f.random_orders, 1..=64);
                drag(ui, "patch side (model pixels)", &mut f.curve_patch, 1..=256);
            });
        });
        ui.checkbox(&mut f.cascade, "randomisation cascade").on_hover_text(CASCADE_DEF);
        ui.add_enabled_ui(f.cascade, |ui| {
            ui.indent("cascade", |ui| {
                ui.checkbox(&mut f.cascade_all, "every layer");
                ui.add_enabled_ui(!f.cascade_all, |ui| drag(ui, "layers from the output side", &mut f.cascade_layers, 1..=512));
            });
        });
        ui.checkbox(&mut f.convergence, "convergence of integrated gradients").on_hover_text(CONVERGENCE_DEF);
        ui.add_enabled_ui(f.convergence, |ui| {
            ui.indent("convergence", |ui| drag(ui, "largest step count", &mut f.convergence_max, 1..=4096));
        });
        ui.checkbox(&mut f.shapley, "region Shapley values").on_hover_text(SHAPLEY_DEF);
        ui.add_enabled_ui(f.shapley, |ui| {
            ui.indent("shapley", |ui| {
                ui.horizontal(|ui| {
                    ui.selectable_value(&mut f.regions, false, "grid cells");
                    ui.selectable_value(&mut f.regions, true, "found regions and the rest");
                });
                ui.add_enabled_ui(!f.regions, |ui| drag(ui, "grid side", &mut f.grid, 1..=64));
                drag(ui, "orders sampled", &mut f.permutations, 1..=4096);
            });
        });
        ui.horizontal(|ui| {
            let l = ui.label("seed");
            ui.add(egui::DragValue::new(&mut f.seed)).labelled_by(l.id);
        });
        if ui.small_button("review defaults").on_hover_text("the settings spurion review takes without flags").clicked() {
            *f = ReviewForm::default();
        }
    });
}

/// Progress of a running review, or what became of the last one.
fn status(ui: &mut egui::Ui, app: &Inspector) {
    let Some(run) = &app.review.run else { return };
    let current = app.current_review().is_some();
    match &run.state {
        RunState::Running { phase, started } => {
            let ctl = app.workers.running.iter().find(|r| r.id == run.job).map(|r| r.ctl.clone());
            let f = &run.form;
            let planned = [
                (Phase::Reading, true),
                (Phase::Curves, f.curves),
                (Phase::Randomisation, f.cascade),
                (Phase::Convergence, f.convergence),
                (Phase::Shapley, f.shapley),
            ];
            ui.horizontal_wrapped(|ui| {
                ui.spinner();
                for (p, _) in planned.into_iter().filter(|(_, on)| *on) {
                    let t = RichText::new(p.title()).small();
                    ui.label(if *phase == Some(p) {
                        t.color(look::LILAC).strong()
                    } else if started.contains(&p) {
                        t.color(look::MOSS)
                    } else {
                        t.color(look::ASH)
                    });
                }
            });
            if let Some(ctl) = ctl {
                let (d, t) = ctl.progress();
                let what = phase.map_or("starting", |p| p.title());
                let text = if t > 0 { format!("{what} — {d}/{t}") } else { what.to_string() };
                ui.add(egui::ProgressBar::new(ctl.fraction()).fill(look::LILAC.gamma_multiply(0.6)).text(text));
            }
            if !current {
                ui.label(RichText::new(format!("reviewing {} · {}", short_name(&run.key.image), run.request.describe())).small());
            }
        }
        RunState::Cancelled => {
            ui.label(RichText::new("Review cancelled: nothing was kept. Run review to start again.").color(look::LILAC));
        }
        RunState::Failed(e) => {
            ui.label(RichText::new(format!("Review failed: {e}")).color(look::SIGNAL));
        }
        RunState::Done(_) if !current => {
            ui.label(
                RichText::new(format!(
                    "The last review was of {} · {}; the slide shows another reading now. Run review for it.",
                    short_name(&run.key.image),
                    run.request.describe()
                ))
                .color(look::ASH),
            );
        }
        RunState::Done(_) => {}
    }
}

fn results(ui: &mut egui::Ui, app: &mut Inspector, res: &ReviewResult, job: u64) {
    let r = &res.review;
    let rd = &r.reading;
    ui.label(
        RichText::new(format!(
            "class {} \"{}\" · score ({}) at the input {:.3}{}{}",
            rd.target.index,
            rd.target.label,
            rd.score_kind.name(),
            rd.score_input,
            rd.score_baseline.map(|b| format!(", at the baseline {b:.3}")).unwrap_or_default(),
            rd.completeness_gap.map(|g| format!(", completeness gap {:.2} %", g * 100.0)).unwrap_or_default()
        ))
        .small(),
    );
    if let Some(c) = &r.curves {
        section(ui, "Deletion and insertion", CURVES_DEF);
        curves_section(ui, c);
    }
    if let Some(c) = &r.cascade {
        section(ui, "Randomisation cascade", CASCADE_DEF);
        cascade_section(ui, app, c, job);
    }
    if let Some(c) = &r.convergence {
        section(ui, "Convergence of integrated gradients", CONVERGENCE_DEF);
        convergence_section(ui, c);
    }
    if let Some(s) = &r.shapley {
        section(ui, "Region Shapley values", SHAPLEY_DEF);
        shapley_section(ui, app, s, job);
    }
    if !r.warnings.is_empty() || !r.skipped.is_empty() {
        ui.add_space(6.0);
        ui.separator();
        for w in &r.warnings {
            ui.label(RichText::new(format!("Warning: {w}")).color(look::LILAC));
        }
        for s in &r.skipped {
            ui.label(RichText::new(format!("Not run: {}: {}", s.test, s.reason)).color(look::LILAC));
        }
    }
    let secs: Vec<String> = r.seconds.iter().map(|(p, s)| format!("{p} {s:.1} s")).collect();
    ui.label(RichText::new(secs.join(" · ")).small().color(look::ASH));
}

/// Deletion and insertion side by side, each with its legend, then the readings.
pub(super) fn curves_section(ui: &mut egui::Ui, c: &Curves) {
    let w = ((ui.available_width() - 8.0) / 2.0).max(140.0);
    ui.horizontal_top(|ui| {
        for (title, k, colour) in [("deletion", &c.deletion, deletion_colour()), ("insertion", &c.insertion, insertion_colour())] {
            ui.vertical(|ui| {
                ui.set_width(w);
                ui.label(RichText::new(format!("{title}, fill {}", c.fill)).small());
                curve_plot(ui, vec2(w, 150.0), k, colour);
                ui.horizontal_wrapped(|ui| {
                    legend_entry(ui, colour, false, RichText::new(format!("map's order, area {}", tick_label(k.auc))).small());
                    legend_entry(ui, RANDOM, true, RichText::new(format!("random ({}), area {}", k.random_aucs.len(), tick_label(k.random_auc))).small());
                });
            });
        }
    });
    reading_line(ui, deletion_text(&c.deletion), c.deletion.lead.is_none_or(|l| l <= 0.0), CURVES_DEF);
    reading_line(ui, insertion_text(&c.insertion), c.insertion.lead.is_none_or(|l| l <= 0.0), CURVES_DEF);
    ui.label(RichText::new(format!("score at the input {:.3}, at the fill {:.3}", c.score_input, c.score_fill)).small().color(look::ASH));
}

/// One curve: the map's order solid, the random orders' mean dashed; x is the share moved.
pub(super) fn curve_plot(ui: &mut egui::Ui, size: egui::Vec2, c: &Curve, colour: Color32) {
    let yr = range_of(c.scores.iter().chain(&c.random_scores));
    let (plot, p, _) = Plot::allocate(ui, size, (0.0, 1.0), yr, (false, false));
    plot.frame(&p, &ticks(0.0, 1.0, if size.x > 200.0 { 4 } else { 2 }), &ticks(yr.0, yr.1, if size.y > 100.0 { 4 } else { 2 }));
    let pts = |s: &[f64]| c.fractions.iter().copied().zip(s.iter().copied()).collect::<Vec<_>>();
    plot.line(&p, &pts(&c.random_scores), RANDOM, 1.4, true);
    plot.line(&p, &pts(&c.scores), colour, 2.0, false);
}

/// Deletion and insertion in one small plot (the strip's tiles).
pub(super) fn both_curves_plot(ui: &mut egui::Ui, size: egui::Vec2, c: &Curves) {
    let (d, i) = (&c.deletion, &c.insertion);
    let yr = range_of(d.scores.iter().chain(&d.random_scores).chain(&i.scores).chain(&i.random_scores));
    let (plot, p, _) = Plot::allocate(ui, size, (0.0, 1.0), yr, (false, false));
    plot.frame(&p, &[0.0, 1.0], &ticks(yr.0, yr.1, 2));
    for (k, colour) in [(d, deletion_colour()), (i, insertion_colour())] {
        let pts = |s: &[f64]| k.fractions.iter().copied().zip(s.iter().copied()).collect::<Vec<_>>();
        plot.line(&p, &pts(&k.random_scores), colour.gamma_multiply(0.7), 1.0, true);
        plot.line(&p, &pts(&k.scores), colour, 1.8, false);
    }
}

pub(super) fn deletion_insertion_colours() -> (Color32, Color32) {
    (deletion_colour(), insertion_colour())
}

fn cascade_section(ui: &mut egui::Ui, app: &mut Inspector, c: &Cascade, job: u64) {
    let total = c.layers.len();
    ui.label(RichText::new(format!("{}; seed {}. Under each map: ρ of |map| with the original · overlap of the top {:.0} %.", c.init, c.seed, c.top_share * 100.0)).small().color(look::ASH));
    for (m, mc) in c.methods.iter().enumerate() {
        ui.label(RichText::new(format!("{} ({})", mc.method, mc.settings)).small());
        let n = mc.steps.len() + 1;
        let tile = ((ui.available_width() - 6.0 * n as f32) / n as f32).clamp(56.0, 110.0);
        ui.horizontal_wrapped(|ui| {
            for s in 0..n {
                ui.vertical(|ui| {
                    ui.set_width(tile);
                    let tex = app.review_texture(job, m, s);
                    let (rect, resp) = ui.allocate_exact_size(vec2(tile, tile), Sense::hover());
                    if let Some(t) = tex {
                        ui.painter().image(t.id(), rect, Rect::from_min_max(pos2(0.0, 0.0), pos2(1.0, 1.0)), Color32::WHITE);
                    }
                    let f = |v: Option<f64>| v.map_or("—".to_string(), |v| format!("{v:.2}"));
                    if s == 0 {
                        ui.label(RichText::new("original").small());
                        ui.label(RichText::new(" ").small());
                    } else {
                        let st = &mc.steps[s - 1];
                        let plain = c.layer_of_step(st.layers_randomised).map_or_else(|| st.layer.clone(), |l| l.plain(total));
                        resp.on_hover_text(format!(
                            "{} layer{} re-drawn from the output side, the last {plain} (node {})\nρ |map| {} · top {} · ρ signed {} · top signed {}\nscore at the input {:.3}",
                            st.layers_randomised,
                            if st.layers_randomised == 1 { "" } else { "s" },
                            st.layer,
                            f(st.spearman),
                            f(st.top_overlap),
                            f(st.spearman_signed),
                            f(st.top_overlap_signed),
                            st.score_input
                        ));
                        // "layer 7 of 7" under the tile; its kind and node name in the tooltip.
                        let short = plain.split(" (").next().unwrap_or(&plain).to_string();
                        ui.label(RichText::new(format!("+ {short}")).small()).on_hover_text(format!("{plain}\nONNX node: {}", st.layer));
                        ui.label(RichText::new(format!("ρ {} · top {}", f(st.spearman), f(st.top_overlap))).small());
                    }
                });
            }
        });
        let t = RichText::new(cascade_text(mc, total));
        ui.label(if mc.independent { t.color(look::LILAC).strong() } else { t }).on_hover_text(format!("{}\n\n{CASCADE_DEF}", mc.verdict));
    }
}

fn convergence_section(ui: &mut egui::Ui, c: &Convergence) {
    const FLOOR: f64 = 1e-7;
    let steps: Vec<f64> = c.rules.first().map(|l| l.points.iter().map(|p| p.steps as f64).collect()).unwrap_or_default();
    let gaps: Vec<f64> = c.rules.iter().flat_map(|l| l.points.iter().filter_map(|p| p.gap)).map(|g| g.max(FLOOR)).collect();
    let hi = gaps.iter().copied().fold(c.warn_gap, f64::max) * 2.0;
    let lo = gaps.iter().copied().fold(c.target_gap, f64::min) / 2.0;
    let s0 = steps.first().copied().unwrap_or(1.0);
    let s1 = steps.last().copied().unwrap_or(2.0).max(s0 * 2.0);
    let colours = [(Rule::Midpoint, deletion_colour()), (Rule::Trapezoid, insertion_colour()), (Rule::GaussLegendre, look::CHALK)];
    ui.label(RichText::new(format!("completeness gap against the step count, baseline {}", c.baseline)).small());
    ui.horizontal_top(|ui| {
        let w = (ui.available_width() * 0.62).max(200.0);
        let (plot, p, _) = Plot::allocate(ui, vec2(w, 150.0), (s0 / 1.2, s1 * 1.2), (lo, hi), (true, true));
        let decades: Vec<f64> = (lo.log10().floor() as i32..=hi.log10().ceil() as i32).map(|e| 10f64.powi(e)).filter(|v| *v >= lo && *v <= hi).collect();
        plot.frame(&p, &steps, &decades);
        plot.hline(&p, c.warn_gap, look::LILAC);
        plot.hline(&p, c.target_gap, RANDOM);
        for (rule, colour) in colours {
            let Some(l) = c.ladder(rule) else { continue };
            let pts: Vec<(f64, f64)> = l.points.iter().filter_map(|q| q.gap.map(|g| (q.steps as f64, g.max(FLOOR)))).collect();
            plot.line(&p, &pts, colour, 2.0, false);
            plot.dots(&p, &pts, colour);
        }
        ui.vertical(|ui| {
            for (rule, colour) in colours {
                let Some(l) = c.ladder(rule) else { continue };
                let reach = l.steps_to_gap.map_or("—".to_string(), |s| s.to_string());
                legend_row(ui, colour, false, RichText::new(format!("{}: {} % at {reach}", rule_title(rule), tick_label(c.target_gap * 100.0))).small());
            }
            legend_row(ui, look::LILAC, true, RichText::new("5 %, the paper's check").small());
            legend_row(ui, RANDOM, true, RichText::new(format!("{} %, the reading's target", tick_label(c.target_gap * 100.0))).small());
            ui.label(RichText::new(format!("{} gradients", c.gradients)).small().color(look::ASH));
        });
    });
    let reached = c.rules.iter().any(|l| l.steps_to_gap.is_some());
    reading_line(ui, convergence_text(c), !reached, CONVERGENCE_DEF);
}

fn shapley_section(ui: &mut egui::Ui, app: &mut Inspector, s: &Shapley, job: u64) {
    let what = match s.grid {
        Some(n) => format!("{n}×{n} grid cells"),
        None => "the found regions and the rest".to_string(),
    };
    ui.label(RichText::new(format!("{what}, absent parts from {}", s.fill)).small());
    let Some(prepared) = app.current_prepared() else { return };
    let (w, h) = (prepared.picture.width() as f32, prepared.picture.height() as f32);
    let path = app.current_image().map(|e| e.path.clone()).filter(|_| matches!(app.current_image().map(|e| &e.state), Some(ImageState::Ready(_))));
    let Some(path) = path else { return };
    let top = s.cells.iter().map(|c| c.value.abs()).fold(0.0, f64::max);
    ui.horizontal_top(|ui| {
        let side = (ui.available_width() * 0.5).clamp(160.0, 300.0);
        let z = (side / w).min(side / h);
        let (rect, resp) = ui.allocate_exact_size(vec2(w * z, h * z), Sense::hover());
        let uv = Rect::from_min_max(pos2(0.0, 0.0), pos2(1.0, 1.0));
        let base = app.base_texture(&path, &prepared);
        let p = ui.painter_at(rect);
        p.image(base.id(), rect, uv, Color32::WHITE);
        p.rect_filled(rect, 0.0, Color32::from_black_alpha(70));
        let to_screen = |b: [usize; 4]| Rect::from_min_max(pos2(rect.left() + b[0] as f32 * z, rect.top() + b[1] as f32 * z), pos2(rect.left() + b[2] as f32 * z, rect.top() + b[3] as f32 * z));
        match s.grid {
            Some(_) => {
                for c in &s.cells {
                    let r = to_screen(c.bbox);
                    p.rect_filled(r, 0.0, crate::gui::review::review_work::value_colour(c.value, top));
                    p.rect_stroke(r, 0.0, Stroke::new(1.0, Color32::from_gray(90)), StrokeKind::Inside);
                    let g = p.layout_no_wrap(tick_label(c.value), FontId::proportional(10.0), look::CHALK);
                    if r.width() >= g.size().x + 6.0 && r.height() >= 16.0 {
                        // A faint backing so the figure reads on bright film without hiding the colour.
                        let bg = Rect::from_center_size(r.center(), g.size() + vec2(4.0, 1.0));
                        p.rect_filled(bg, 2.0, Color32::from_black_alpha(130));
                        p.galley(bg.min + vec2(2.0, 0.5), g, look::CHALK);
                    }
                }
            }
            None => {
                if let Some(t) = app.review_texture(job, usize::MAX, 0) {
                    p.image(t.id(), rect, uv, Color32::WHITE);
                }
            }
        }
        if let Some(hp) = resp.hover_pos() {
            let (x, y) = (((hp.x - rect.left()) / z) as usize, ((hp.y - rect.top()) / z) as usize);
            let hit = s.cells.iter().find(|c| match &c.pixels {
                Some(m) => m.get((y, x)).copied().unwrap_or(false),
                None => (c.bbox[0]..c.bbox[2]).contains(&x) && (c.bbox[1]..c.bbox[3]).contains(&y),
            });
            if let Some(c) = hit {
                let se = c.stderr.map(|e| format!(" ± {e:.4}")).unwrap_or_default();
                let ms = c.map_sum.map(|m| format!("\nthe map summed over it: {m:.4}")).unwrap_or_default();
                resp.on_hover_text(format!("{}: {:+.4}{se}{ms}", c.label, c.value));
            }
        }
        ui.vertical(|ui| {
            reading_line(ui, shapley_sum_text(s), false, SHAPLEY_DEF);
            ui.label(RichText::new(format!("{}.", s.estimator)).small());
            if let Some(rho) = s.map_agreement {
                ui.label(format!("the reading's map summed over each part ranks the parts with Spearman ρ {rho:.2} against these values"))
                    .on_hover_text("ρ near 1: the gradient map and the forwards-only values agree on which parts matter; near 0 or below: they do not.");
            }
            let mut ranked: Vec<_> = s.cells.iter().collect();
            ranked.sort_by(|a, b| b.value.abs().total_cmp(&a.value.abs()));
            ui.label(RichText::new("largest parts:").small().color(look::ASH));
            for c in ranked.iter().take(5) {
                let se = c.stderr.map(|e| format!(" ± {e:.3}")).unwrap_or_default();
                ui.label(RichText::new(format!("{}: {:+.4}{se}", c.label, c.value)).small());
            }
        });
    });
}

impl Inspector {
    /// The texture of a review picture (cascade method `m`, step `s`; `usize::MAX` the Shapley
    /// regions), uploaded the first time it is drawn.
    pub(crate) fn review_texture(&mut self, job: u64, m: usize, s: usize) -> Option<egui::TextureHandle> {
        if let Some(t) = self.review.tex.get(&(job, m, s)) {
            return Some(t.clone());
        }
        let run = self.review.run.as_ref().filter(|r| r.job == job)?;
        let RunState::Done(res) = &run.state else { return None };
        let img = if m == usize::MAX { res.images.shapley_regions.clone()? } else { res.images.cascade.get(m)?.get(s)?.clone() };
        let t = self.ctx.load_texture(format!("review {job} {m} {s}"), img, egui::TextureOptions::NEAREST);
        self.review.tex.insert((job, m, s), t.clone());
        Some(t)
    }
}

/// The top bar's Review button's tooltip.
pub const OPEN_HINT: &str = "Shows, in place of the slide, the tests a reviewer runs before trusting the slide's reading: deletion and insertion \
curves (RISE, Petsiuk et al. 2018), the randomisation cascade (Adebayo et al. 2018), the convergence of integrated \
gradients (Sundararajan et al. 2017) and region Shapley values (Castro et al. 2009); computed on request.";
