//! The inspector's review, driven headless (egui_kittest) with cheap settings: a strip tile
//! shows its reading on the slide when clicked or on its key; each baseline's curves in the
//! strip are the engine's (`review::run` with the same baselines); the review panel computes on
//! a worker with progress, shows its parts with the engine's figures (`review::run` on a request
//! built here, and `spurion review` with the same flags), and can be cancelled.

use std::path::{Path, PathBuf};

use egui_kittest::kittest::{NodeT, Queryable};

use spurion::control::Control;
use spurion::feed::{FeedCard, Picture};
use spurion::gui::panels;
use spurion::gui::review::{CurveSlot, RunState};
use spurion::methods::{self, Baseline, BaselineKind, Input, Method, MethodKind, Request, ScoreKind, TargetSpec};
use spurion::model::{LoadOptions, Model};
use spurion::review::convergence::{Convergence, ConvergenceSettings};
use spurion::review::curves::{Curve, CurveSettings};
use spurion::review::randomise::{Cascade, CascadeSettings};
use spurion::review::shapley::{Players, Shapley, ShapleySettings};
use spurion::review::{self, Review, Settings};

use crate::gui_inspector::{STEPS, demo_images, harness, model_path, single_input_baselines, wait_for};

fn close(a: f64, b: f64, tol: f64) -> bool {
    (a - b).abs() <= tol * a.abs().max(b.abs()).max(1.0)
}

fn same_curve(what: &str, a: &Curve, b: &Curve, tol: f64) {
    assert_eq!(a.fractions, b.fractions, "{what}: fractions");
    for (x, y) in a.scores.iter().zip(&b.scores).chain(a.random_scores.iter().zip(&b.random_scores)) {
        assert!(close(*x, *y, tol), "{what}: score {x} against {y}");
    }
    assert_eq!(a.scores.len(), b.scores.len());
    assert!(close(a.auc, b.auc, tol) && close(a.random_auc, b.random_auc, tol), "{what}: areas {a:?} against {b:?}");
    match (a.lead, b.lead) {
        (Some(x), Some(y)) => assert!(close(x, y, tol), "{what}: lead {x} against {y}"),
        (x, y) => assert_eq!(x, y, "{what}: lead"),
    }
}

fn same_opt(what: &str, a: Option<f64>, b: Option<f64>, tol: f64) {
    match (a, b) {
        (Some(x), Some(y)) => assert!(close(x, y, tol), "{what}: {x} against {y}"),
        (x, y) => assert_eq!(x, y, "{what}"),
    }
}

fn same_cascade(a: &Cascade, b: &Cascade, tol: f64) {
    assert_eq!(a.layers.len(), b.layers.len());
    assert_eq!(a.methods.len(), b.methods.len());
    for (m, n) in a.methods.iter().zip(&b.methods) {
        assert_eq!(m.steps.len(), n.steps.len());
        assert_eq!(m.independent, n.independent);
        for (s, t) in m.steps.iter().zip(&n.steps) {
            assert_eq!(s.layer, t.layer);
            same_opt("ρ", s.spearman, t.spearman, tol);
            same_opt("top overlap", s.top_overlap, t.top_overlap, tol);
            same_opt("signed ρ", s.spearman_signed, t.spearman_signed, tol);
        }
    }
}

fn same_convergence(a: &Convergence, b: &Convergence, tol: f64) {
    assert_eq!(a.rules.len(), b.rules.len());
    for (l, m) in a.rules.iter().zip(&b.rules) {
        assert_eq!((l.rule, l.steps_to_gap), (m.rule, m.steps_to_gap));
        for (p, q) in l.points.iter().zip(&m.points) {
            assert_eq!(p.steps, q.steps);
            same_opt("gap", p.gap, q.gap, tol);
        }
    }
}

fn same_shapley(a: &Shapley, b: &Shapley, tol: f64) {
    assert_eq!(a.cells.len(), b.cells.len());
    for (c, d) in a.cells.iter().zip(&b.cells) {
        assert_eq!(c.bbox, d.bbox);
        assert!(close(c.value, d.value, tol), "{}: {} against {}", c.label, c.value, d.value);
        same_opt("stderr", c.stderr, d.stderr, tol);
    }
    assert!(close(a.sum, b.sum, tol));
    same_opt("map agreement", a.map_agreement, b.map_agreement, tol);
}

fn load(img: &Path) -> (Model, FeedCard, Input) {
    let model = Model::load(&model_path(), &LoadOptions::default()).unwrap();
    let card = FeedCard::for_loaded(&model).unwrap();
    let input = Input::picture(Picture::open(img).unwrap(), &card).unwrap();
    (model, card, input)
}

fn first_image() -> PathBuf {
    spurion::gui::first_marked_positive(&crate::common::root().join("assets/demo")).unwrap_or_else(|| demo_images()[0].clone())
}

#[test]
fn a_strip_tile_shows_its_reading_on_the_slide_and_each_baseline_has_the_engines_curves() {
    let tmp = tempfile::tempdir().unwrap();
    let img = first_image();
    let mut h = harness(vec![img.clone()], tmp.path());
    h.state_mut().review.form.curve_steps = 4;
    h.state_mut().review.form.random_orders = 1;
    wait_for(&mut h, "the first reading", 120, |a| a.current_shown().is_some());
    h.get_by_label("Compute strip").click();
    h.run_steps(1);
    wait_for(&mut h, "every strip map", 300, |a| a.strip.wanted.as_ref().is_some_and(|p| p.keys().iter().all(|k| a.cache.done(k).is_some())));
    h.run_steps(2);
    let plan = h.state().strip.wanted.clone().unwrap();
    let kinds: Vec<BaselineKind> = plan.tiles.iter().map(|(k, _)| *k).collect();
    assert_eq!(kinds[0], BaselineKind::Black);
    assert_eq!(kinds[1], BaselineKind::Grey);
    let key_of = |i: usize| plan.tiles[i].1.clone().unwrap();

    // A click on the black tile: the slide shows the black reading, with its figures.
    assert_eq!(h.state().form.baseline, methods::defaults::BASELINE.kind());
    h.get_by_label("show black on the slide").click();
    h.run_steps(2);
    assert_eq!(h.state().form.baseline, BaselineKind::Black, "the baseline control follows the tile");
    let (key, shown) = h.state().current_shown().expect("the strip's reading is cached, so it shows at once");
    assert_eq!(key, key_of(0));
    assert_eq!(shown.reading.baseline.as_deref(), Some("black"));
    assert!(h.query_by_label(&key.request.describe()).is_some(), "the slide's header names the black reading");
    let sum = format!("{:.4}", shown.reading.attribution_sum);
    assert!(h.query_by_label(&sum).is_some(), "the figures show the black reading's attribution sum {sum}");
    assert!(!shown.assessment.regions.is_empty(), "the demo image has found regions");
    for rr in &shown.assessment.regions {
        let ms = rr.figures.mark_share.map_or("—".into(), |v| format!("{v:.2}"));
        let t = format!("{}: mark share {ms}", rr.label);
        assert!(h.query_by_label_contains(&t).is_some(), "the black reading's region figure {t:?}");
    }

    // F2 shows the second tile (grey), from the review view too (back on the slide); a tile with
    // no reading (custom, no image chosen) says so. (Opening the review runs it: a cheap one.)
    cheap(&mut h.state_mut().review.form);
    h.get_by_label("Review").click();
    h.run_steps(2);
    assert!(h.state().review.open && h.query_by_label("Run review").is_some());
    h.key_press(egui::Key::F2);
    h.run_steps(2);
    assert!(!h.state().review.open, "the slide is shown again");
    assert!(h.query_by_label("fit").is_some(), "the slide's zoom buttons are back");
    assert_eq!(h.state().form.baseline, BaselineKind::Grey);
    assert_eq!(h.state().current_shown().unwrap().0, key_of(1));
    let custom = kinds.iter().position(|k| *k == BaselineKind::Image).unwrap();
    assert!(plan.tiles[custom].1.is_err());
    h.key_press(panels::TILE_KEYS[custom]);
    h.run_steps(1);
    assert_eq!(h.state().form.baseline, BaselineKind::Grey, "a tile without a reading changes nothing");
    assert!(h.state().notes.last().unwrap().text.contains("has no custom image reading"), "{:?}", h.state().notes.last());
    // The tile's tooltip names its key.
    h.get_by_label("show grey on the slide").hover();
    h.run_steps(45); // past egui's tooltip delay (0.5 s of frames)
    assert!(h.query_by_label_contains("F2 or click: show this reading on the slide").is_some(), "the grey tile's tooltip");

    // The curves under each tile.
    h.get_by_label("Curves").click();
    h.run_steps(1);
    let keys = plan.keys();
    wait_for(&mut h, "the strip's curves", 300, |a| {
        keys.iter().all(|k| matches!(a.strip_curve_key(k).and_then(|ck| a.review.strip_curves.get(&ck)), Some(CurveSlot::Done(_))))
    });
    h.run_steps(2);

    // The engine's own strip: review::run with the same baselines, built here.
    let (model, card, input) = load(&img);
    let form = h.state().form.clone();
    let baselines: Vec<Baseline> = single_input_baselines(&form, &img).iter().map(|b| Baseline::parse(b).unwrap()).collect();
    let req = Request {
        method: Method::IntegratedGradients { steps: STEPS, rule: methods::defaults::IG_FIXED_RULE, adaptive: None },
        baseline: Baseline::parse(methods::defaults::BASELINE_TEXT).unwrap(),
        target: TargetSpec::Top,
        score: ScoreKind::Logits,
    };
    let settings = Settings {
        curves: Some(CurveSettings { steps: 4, random_orders: 1, ..CurveSettings::default() }),
        strip: baselines,
        cascade: None,
        convergence: None,
        shapley: None,
        ..Settings::default()
    };
    let r = review::run(&model, Some(&card), &input, &req, &settings, &Control::new(), &|_| {}).unwrap();
    assert_eq!(r.strip.len(), keys.len(), "{:?}", r.skipped);
    for (e, k) in r.strip.iter().zip(&keys) {
        let Some(CurveSlot::Done(c)) = h.state().strip_curve_key(k).and_then(|ck| h.state().review.strip_curves.get(&ck)) else { unreachable!() };
        assert_eq!(c.fill, e.curves.fill);
        same_curve(&format!("{} deletion", e.title), &c.deletion, &e.curves.deletion, 1e-9);
        same_curve(&format!("{} insertion", e.title), &c.insertion, &e.curves.insertion, 1e-9);
    }
    // Each tile shows its leads: each text as often as the engine's figures give it.
    let mut want: std::collections::HashMap<String, usize> = Default::default();
    for e in &r.strip {
        *want.entry(format!("del {:+.2}", e.curves.deletion.lead.unwrap())).or_default() += 1;
        *want.entry(format!("ins {:+.2}", e.curves.insertion.lead.unwrap())).or_default() += 1;
    }
    for (text, n) in want {
        assert_eq!(h.query_all_by_label(&text).count(), n, "{text:?} on screen");
    }
}

/// The cheap review the panel tests run, as the panel's form.
fn cheap(f: &mut spurion::gui::review::ReviewForm) {
    f.curve_steps = 4;
    f.random_orders = 1;
    f.cascade_all = false;
    f.cascade_layers = 2;
    f.convergence_max = 8;
    f.grid = 2;
    f.permutations = 4;
}

#[test]
fn the_review_panel_computes_with_progress_and_shows_the_engines_figures() {
    let tmp = tempfile::tempdir().unwrap();
    let img = first_image();
    let mut h = harness(vec![img.clone()], tmp.path());
    h.state_mut().form.method = MethodKind::Gradient;
    cheap(&mut h.state_mut().review.form);
    wait_for(&mut h, "the gradient reading", 120, |a| a.current_shown().is_some());
    h.get_by_label("Review").click();
    h.run_steps(2);
    assert_eq!(h.query_all_by_label(spurion::CAUTION).count(), 1, "the caution once, on the status bar");
    // The click that opened the review started it (issue 26: no second click on Run review).
    assert!(h.state().review_running(), "the review runs on a worker; the frame went on");
    // Progress: the phases and a progress bar, seen while it runs.
    let mut seen = std::collections::BTreeSet::new();
    let start = std::time::Instant::now();
    while h.state().review_running() {
        h.step();
        for n in h.query_all_by_label_contains(" — ") {
            seen.insert(n.accesskit_node().label().unwrap_or_default().split(" — ").next().unwrap_or_default().to_string());
        }
        assert!(start.elapsed().as_secs() < 300, "the review did not end");
        std::thread::sleep(std::time::Duration::from_millis(10));
    }
    h.run_steps(2);
    let phases = [review::Phase::Reading, review::Phase::Curves, review::Phase::Randomisation, review::Phase::Convergence, review::Phase::Shapley];
    let shown = phases.iter().filter(|p| seen.contains(p.title())).count();
    assert!(shown >= 2, "progress of several phases was shown: {seen:?}");
    let run = h.state().current_review().expect("the review of the slide's reading");
    let RunState::Done(res) = &run.state else { panic!("the review did not finish") };
    let gui: Review = res.review.clone();

    // The engine on a request and settings built here, as `spurion review --method gradient`
    // with the flags below builds them (its fill: the default baseline).
    let (model, card, input) = load(&img);
    let req = Request { method: Method::Gradient, baseline: Baseline::parse(methods::defaults::BASELINE_TEXT).unwrap(), target: TargetSpec::Top, score: ScoreKind::Logits };
    let settings = Settings {
        fill: None,
        curves: Some(CurveSettings { steps: 4, random_orders: 1, seed: 0, patch: 1 }),
        strip: vec![],
        cascade: Some(CascadeSettings { layers: Some(2), seed: 0, top_share: 0.10, methods: vec![] }),
        convergence: Some(ConvergenceSettings { min_steps: 4, max_steps: 8, target_gap: 0.01 }),
        shapley: Some(ShapleySettings { players: Players::Grid(2), permutations: 4, seed: 0 }),
        finder: Default::default(),
    };
    let eng = review::run(&model, Some(&card), &input, &req, &settings, &Control::new(), &|_| {}).unwrap();
    let (gc, ec) = (gui.curves.as_ref().unwrap(), eng.curves.as_ref().unwrap());
    same_curve("deletion", &gc.deletion, &ec.deletion, 1e-9);
    same_curve("insertion", &gc.insertion, &ec.insertion, 1e-9);
    same_cascade(gui.cascade.as_ref().unwrap(), eng.cascade.as_ref().unwrap(), 1e-9);
    same_convergence(gui.convergence.as_ref().unwrap(), eng.convergence.as_ref().unwrap(), 1e-9);
    same_shapley(gui.shapley.as_ref().unwrap(), eng.shapley.as_ref().unwrap(), 1e-9);
    assert_eq!(gui.warnings, eng.warnings);

    // Every part on screen, read out from the engine's figures.
    let cascade = eng.cascade.as_ref().unwrap();
    let texts = [
        panels::deletion_text(&ec.deletion),
        panels::insertion_text(&ec.insertion),
        panels::cascade_text(&cascade.methods[0], cascade.layers.len()),
        panels::convergence_text(eng.convergence.as_ref().unwrap()),
        panels::shapley_sum_text(eng.shapley.as_ref().unwrap()),
    ];
    for t in &texts {
        assert!(h.query_by_label(t).is_some(), "on screen: {t:?}");
    }
    for (i, st) in cascade.methods[0].steps.iter().enumerate() {
        let t = format!("ρ {:.2} · top {:.2}", st.spearman.unwrap(), st.top_overlap.unwrap());
        assert!(h.query_by_label(&t).is_some(), "cascade step {i}: {t:?}");
    }
    for w in &eng.warnings {
        assert!(h.query_by_label(&format!("Warning: {w}")).is_some(), "warning {w:?}");
    }

    // The Shapley game over the found regions and the rest: drawn on the regions' own pixels.
    h.state_mut().review.form.regions = true;
    h.get_by_label("Run review").click();
    h.step();
    wait_for(&mut h, "the review over regions", 300, |a| a.current_review().is_some_and(|r| matches!(r.state, RunState::Done(_))));
    h.run_steps(2);
    let run = h.state().current_review().unwrap();
    let RunState::Done(res) = &run.state else { unreachable!() };
    let sh = res.review.shapley.as_ref().unwrap();
    assert!(sh.grid.is_none() && sh.cells.last().unwrap().label == "the rest of the image", "{:?}", sh.cells);
    assert_eq!(sh.cells.len(), res.review.regions.len() + 1, "each found region and the rest");
    assert!(res.images.shapley_regions.is_some(), "the values painted on the regions' pixels");
    assert!(h.query_by_label_contains(&format!("the found regions and the rest, absent parts from {}", methods::defaults::BASELINE_TEXT)).is_some());
    assert!(h.query_by_label(&panels::shapley_sum_text(sh)).is_some());

    // And `spurion review` with the same flags writes the same figures.
    let out = tmp.path().join("cli");
    let o = std::process::Command::new(env!("CARGO_BIN_EXE_spurion"))
        .args(["review", "--model", model_path().to_str().unwrap(), "--image", img.to_str().unwrap(), "--method", "gradient"])
        .args(["--curve-steps", "4", "--random-orders", "1", "--cascade-layers", "2", "--convergence-max", "8", "--grid", "2", "--permutations", "4"])
        .args(["--quiet", "--out", out.to_str().unwrap()])
        .output()
        .unwrap();
    assert!(o.status.success(), "spurion review failed: {}", String::from_utf8_lossy(&o.stderr));
    let j: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(out.join("review.json")).unwrap()).unwrap();
    let cli_curve = |k: &str| serde_json::from_value::<Curve>(j[k].clone()).unwrap();
    same_curve("CLI deletion", &gc.deletion, &cli_curve("deletion"), 1e-6);
    same_curve("CLI insertion", &gc.insertion, &cli_curve("insertion"), 1e-6);
    same_cascade(gui.cascade.as_ref().unwrap(), &serde_json::from_value(j["randomisation_detail"].clone()).unwrap(), 1e-6);
    same_convergence(gui.convergence.as_ref().unwrap(), &serde_json::from_value(j["convergence_detail"].clone()).unwrap(), 1e-6);
    same_shapley(gui.shapley.as_ref().unwrap(), &serde_json::from_value(j["shapley"].clone()).unwrap(), 1e-6);
}

#[test]
fn a_running_review_can_be_cancelled_and_the_panel_says_so() {
    let tmp = tempfile::tempdir().unwrap();
    let mut h = harness(vec![first_image()], tmp.path());
    h.state_mut().form.method = MethodKind::Gradient;
    // The review's own defaults: far longer than the wait below.
    wait_for(&mut h, "the gradient reading", 120, |a| a.current_shown().is_some());
    h.get_by_label("Review").click();
    h.run_steps(2);
    assert!(h.state().review_running(), "opening the review runs it");
    wait_for(&mut h, "the curves phase", 120, |a| {
        matches!(&a.review.run, Some(r) if matches!(&r.state, RunState::Running { phase: Some(review::Phase::Curves), .. }))
    });
    h.get_by_label("Cancel review").click();
    wait_for(&mut h, "the review to stop", 60, |a| !a.review_running());
    h.run_steps(2);
    assert!(matches!(h.state().review.run.as_ref().unwrap().state, RunState::Cancelled));
    assert!(h.query_by_label_contains("Review cancelled").is_some(), "the panel says it was cancelled");
    assert!(!h.state().busy(), "no job is left running");
    assert!(h.query_by_label("Run review").is_some(), "and it can be run again");
}
