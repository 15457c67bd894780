//! Drives the real inspector UI headless (egui_kittest): opens the demo, changes the baseline
//! through the controls, waits for the reading, fills the baseline strip and checks that the
//! strip shows one map per baseline and that the agreement figures on screen are the engine's
//! figures for the same inputs (computed here independently through `spurion::methods`).

use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use egui_kittest::Harness;
use egui_kittest::kittest::{NodeT, Queryable};

use spurion::control::Control;
use spurion::feed::{FeedCard, Picture};
use spurion::gui::form::BaselineChoice;
use spurion::gui::{GuiOptions, Inspector, InspectorConfig};
use spurion::methods::agree::{self, Sign};
use spurion::methods::{self, Baseline, Input, Method, Request, ScoreKind, TargetSpec};
use spurion::model::{LoadOptions, Model};

const STEPS: usize = 8;

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn demo_images() -> Vec<PathBuf> {
    let dir = root().join("assets/demo");
    let list = spurion::feed::list_images(&dir)
        .unwrap_or_else(|e| panic!("the demo set is missing ({e:#}); it is committed in assets/demo (spurion demo writes it)"));
    assert!(list.len() >= 2, "the demo set in {} needs at least two images", dir.display());
    list
}

fn model_path() -> PathBuf {
    let p = root().join("sample-models/shortcut.onnx");
    assert!(p.exists(), "sample model {} is missing; it is committed with the repository", p.display());
    p
}

/// Steps the UI until `done` holds, sleeping between frames so the workers run.
fn wait_for(h: &mut Harness<'_, Inspector>, what: &str, secs: u64, done: impl Fn(&Inspector) -> bool) {
    let start = Instant::now();
    loop {
        h.step();
        if done(h.state()) {
            return;
        }
        let errors: Vec<String> = h
            .state()
            .notes
            .iter()
            .filter(|n| n.kind == spurion::gui::state::NoteKind::Error)
            .map(|n| n.text.clone())
            .collect();
        assert!(errors.is_empty(), "while waiting for {what}: {errors:?}");
        assert!(start.elapsed() < Duration::from_secs(secs), "timed out waiting for {what}");
        std::thread::sleep(Duration::from_millis(15));
    }
}

fn harness(images: Vec<PathBuf>, dir: &Path) -> Harness<'static, Inspector> {
    let mut app = Inspector::new(
        egui::Context::default(),
        GuiOptions { model: Some(model_path()), paths: images },
        InspectorConfig::headless(dir),
    );
    // Keep the test quick: few IG steps (the figures are compared for the same settings).
    app.form.steps = STEPS;
    Harness::builder().with_size([1500.0, 950.0]).build_ui_state(|ui, app: &mut Inspector| app.frame(ui), app)
}

#[test]
fn strip_shows_every_baseline_and_the_engines_agreement() {
    let tmp = tempfile::tempdir().unwrap();
    let images = demo_images();
    let (first, custom) = (images[0].clone(), images[1].clone());
    let mut h = harness(vec![first.clone()], tmp.path());

    wait_for(&mut h, "the first reading", 120, |a| a.current_shown().is_some());
    assert_eq!(h.state().form.baseline, BaselineChoice::Black);

    // Change the baseline through the combo box, as a person would.
    h.get_by_label("baseline").click();
    h.run_steps(2);
    h.get_by_label("blur").click();
    h.run_steps(2);
    assert_eq!(h.state().form.baseline, BaselineChoice::Blur, "clicking 'blur' in the baseline list");
    wait_for(&mut h, "the blur reading", 120, |a| {
        a.current_shown().is_some_and(|(k, _)| k.ask.baseline.choice() == BaselineChoice::Blur)
    });

    // The custom baseline needs an image: type its path into the field.
    h.get_by_label("baseline parameters").click();
    h.run_steps(2);
    h.get_by_label("custom image").focus();
    h.run_steps(1);
    h.get_by_label("custom image").type_text(&custom.display().to_string());
    h.run_steps(2);
    assert_eq!(h.state().form.custom_path, custom.display().to_string());

    h.get_by_label("Compute strip").click();
    h.run_steps(1);
    wait_for(&mut h, "the baseline strip and its agreement", 300, |a| a.current_agreement().is_some());
    h.run_steps(3);

    // One map per baseline: black, grey, blur, uniform noise, Gaussian noise, dataset mean, custom.
    let tiles: Vec<String> =
        h.query_all_by_label_contains("map · ").map(|n| n.accesskit_node().label().unwrap_or_default()).collect();
    assert_eq!(tiles.len(), 7, "strip tiles: {tiles:?}");

    // The same seven readings straight from the engine.
    let model = Model::load(&model_path(), &LoadOptions::default()).unwrap();
    let card = FeedCard::for_loaded(&model).unwrap();
    let form = &h.state().form;
    let demo_dir = first.parent().unwrap().display().to_string();
    let baselines = [
        "black".to_string(),
        "grey".to_string(),
        format!("blur:{}", form.blur_sigma),
        format!("uniform-noise:{}", form.noise_seed),
        format!("gaussian-noise:{}:{}", form.noise_sigma, form.noise_seed),
        format!("mean:{demo_dir}"),
        format!("image:{}", custom.display()),
    ];
    let input = Input::picture(Picture::open(&first).unwrap(), &card).unwrap();
    let maps: Vec<_> = baselines
        .iter()
        .map(|b| {
            let req = Request {
                method: Method::IntegratedGradients { steps: STEPS, rule: methods::DEFAULT_RULE, adaptive: None },
                baseline: Baseline::parse(b).unwrap(),
                target: TargetSpec::Top,
                score: ScoreKind::Raw,
            };
            methods::explain(&model, Some(&card), &input, &req, &Control::new()).unwrap().map2d()
        })
        .collect();
    let refs: Vec<_> = maps.iter().collect();
    let sign = h.state().view.sign;
    assert_eq!(sign, Sign::Supporting);
    let expected = agree::agreement(&refs, sign, h.state().view.top_share);

    let shown = h.state().current_agreement().unwrap();
    for i in 0..7 {
        for j in 0..7 {
            let (a, b) = (shown.spearman[i][j], expected.spearman[i][j]);
            assert!(
                matches!((a, b), (Some(x), Some(y)) if (x - y).abs() < 1e-9) || (a.is_none() && b.is_none()),
                "Spearman {i},{j}: inspector {a:?}, engine {b:?}"
            );
            let (a, b) = (shown.overlap[i][j], expected.overlap[i][j]);
            assert!(
                matches!((a, b), (Some(x), Some(y)) if (x - y).abs() < 1e-9) || (a.is_none() && b.is_none()),
                "overlap {i},{j}: inspector {a:?}, engine {b:?}"
            );
        }
    }
    // And the matrix on screen carries those numbers: each expected cell text appears as often
    // as the engine's figures say it should.
    let mut want: std::collections::HashMap<String, usize> = Default::default();
    for i in 0..7 {
        for j in 0..7 {
            let t = if j > i {
                spurion::gui::panels::agreement_cell_rho(expected.spearman[i][j])
            } else if j < i {
                spurion::gui::panels::agreement_cell_overlap(expected.overlap[i][j])
            } else {
                continue;
            };
            *want.entry(t).or_default() += 1;
        }
    }
    for (text, n) in want {
        let found = h.query_all_by_label(&text).count();
        assert_eq!(found, n, "cell text {text:?} on screen {found} times, the engine's figures give {n}");
    }
}

#[test]
fn a_dialog_that_returns_nothing_is_explained() {
    let tmp = tempfile::tempdir().unwrap();
    let mut h = harness(vec![], tmp.path());
    h.step();
    h.get_by_label("Model…").click();
    h.run_steps(2);
    // Workers (the default model loading) may add notes after the dialog's, so look at them all.
    let notes: Vec<String> = h.state().notes.iter().map(|n| n.text.clone()).collect();
    assert!(
        notes.iter().any(|t| t.contains("path") && t.contains("Recent") && t.contains("drop")),
        "{notes:?}"
    );
    // The path field is the way in that always works.
    let img = demo_images()[0].clone();
    h.get_by_label("path").focus();
    h.run_steps(1);
    h.get_by_label("path").type_text(&img.display().to_string());
    h.get_by_label("Open").click();
    h.run_steps(2);
    assert_eq!(h.state().images.len(), 1);
    assert_eq!(h.state().images[0].path, img);
    // It is remembered.
    let (recent, _) = spurion::gui::recent::Recent::load(&tmp.path().join("recent.json"));
    assert!(recent.images.iter().any(|p| p.file_name() == img.file_name()), "{recent:?}");
}
