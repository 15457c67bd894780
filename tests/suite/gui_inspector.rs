//! Drives the real inspector UI headless (egui_kittest): opens the demo, changes the baseline
//! through the controls, waits for the reading, fills the baseline strip and checks that the
//! strip shows one map per baseline and that the agreement figures on screen are the engine's
//! figures for the same inputs (computed here independently through `spurion::methods`).

use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use std::sync::Arc;

use egui_kittest::Harness;
use egui_kittest::kittest::{NodeT, Queryable};

use spurion::control::Control;
use spurion::feed::{FeedCard, Picture};
use spurion::gui::{GuiOptions, Inspector, InspectorConfig};
use spurion::methods::agree;
use spurion::sign::Sign;
use spurion::methods::{self, Baseline, BaselineKind, Input, Method, Request, ScoreKind, TargetSpec};
use spurion::model::{LoadOptions, Model};

pub(crate) const STEPS: usize = 8;

pub(crate) fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

pub(crate) fn demo_images() -> Vec<PathBuf> {
    let dir = root().join("assets/demo");
    let list = spurion::feed::list_images(&dir)
        .unwrap_or_else(|e| panic!("the demo set is missing ({e:#}); it is committed in assets/demo (spurion demo writes it)"));
    assert!(list.len() >= 2, "the demo set in {} needs at least two images", dir.display());
    list
}

pub(crate) fn model_path() -> PathBuf {
    let p = root().join("sample-models/shortcut.onnx");
    assert!(p.exists(), "sample model {} is missing; it is committed with the repository", p.display());
    p
}

/// Steps the UI until `done` holds, sleeping between frames so the workers run.
pub(crate) fn wait_for(h: &mut Harness<'_, Inspector>, what: &str, secs: u64, done: impl Fn(&Inspector) -> bool) {
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

pub(crate) fn harness(images: Vec<PathBuf>, dir: &Path) -> Harness<'static, Inspector> {
    let mut app = Inspector::new(
        egui::Context::default(),
        GuiOptions { model: Some(model_path()), paths: images, ledger: None },
        InspectorConfig::headless(dir),
    );
    // Keep the test quick: few fixed IG steps (the figures are compared for the same
    // settings); the refined default is checked in src/gui/slide/engine.rs.
    app.form.steps = STEPS;
    app.form.refine = false;
    drive(app)
}

/// The strip's baselines but the custom image, in strip order, written out from the form's
/// parameters as `--baseline` takes them (the dataset mean over the image's folder).
pub(crate) fn single_input_baselines(form: &spurion::gui::form::Form, image: &Path) -> Vec<String> {
    let demo_dir = image.parent().unwrap().display().to_string();
    vec![
        "black".to_string(),
        "grey".to_string(),
        format!("blur:{}", form.blur_sigma),
        format!("uniform-noise:{}", form.noise_seed),
        format!("gaussian-noise:{}:{}", form.noise_sigma, form.noise_seed),
        format!("mean:{demo_dir}"),
    ]
}

/// A headless harness around an inspector, the size of a laptop window.
pub(crate) fn drive(app: Inspector) -> Harness<'static, Inspector> {
    Harness::builder().with_size([1500.0, 950.0]).build_ui_state(|ui, app: &mut Inspector| app.frame(ui), app)
}

#[test]
fn strip_shows_every_baseline_and_the_engines_agreement() {
    let tmp = tempfile::tempdir().unwrap();
    let images = demo_images();
    let (first, custom) = (images[0].clone(), images[1].clone());
    let mut h = harness(vec![first.clone()], tmp.path());

    wait_for(&mut h, "the first reading", 120, |a| a.current_shown().is_some());
    assert_eq!(h.state().form.baseline, methods::defaults::BASELINE.kind(), "the inspector starts on the default baseline");

    // Change the baseline through the combo box, as a person would.
    h.get_by_label("baseline").click();
    h.run_steps(2);
    h.get_by_label("grey").click();
    h.run_steps(2);
    assert_eq!(h.state().form.baseline, BaselineKind::Grey, "clicking 'grey' in the baseline list");
    wait_for(&mut h, "the grey reading", 120, |a| {
        a.current_shown().is_some_and(|(k, _)| k.request.baseline.kind() == BaselineKind::Grey)
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
    let mut baselines = single_input_baselines(form, &first);
    baselines.push(format!("image:{}", custom.display()));
    let input = Input::picture(Picture::open(&first).unwrap(), &card).unwrap();
    let maps: Vec<_> = baselines
        .iter()
        .map(|b| {
            let req = Request {
                method: Method::IntegratedGradients { steps: STEPS, rule: methods::defaults::IG_FIXED_RULE, adaptive: None },
                baseline: Baseline::parse(b).unwrap(),
                target: TargetSpec::Top,
                score: ScoreKind::Logits,
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
    // The top bar's model label changes width when the model is in, which moves the buttons:
    // wait for it, so a click is not aimed at where a button was a frame earlier.
    wait_for(&mut h, "the model", 120, |a| a.session.is_some());
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

// ------------------------------------------------------------------ first view

#[test]
fn with_no_arguments_the_first_view_is_a_marked_positive_under_the_default_baseline_and_it_is_flagged() {
    let tmp = tempfile::tempdir().unwrap();
    // The first Hillmoor image with a finding, read from the manifest here.
    let demo = root().join("assets/demo");
    let rows = spurion::demo::read_manifest(&demo.join("manifest.csv")).unwrap();
    let row = rows.iter().find(|r| r.site == spurion::demo::Site::Hillmoor && r.finding).expect("the demo has Hillmoor positives");
    assert!(row.tag && row.frame, "{row:?}");
    let want = demo.join(&row.file);

    let mut h = drive(Inspector::new(egui::Context::default(), GuiOptions::default(), InspectorConfig::headless(tmp.path())));
    h.step();
    assert_eq!(h.state().current_image().map(|e| e.path.clone()), Some(want.clone()));
    assert_eq!(h.state().images.len(), spurion::feed::list_images(&demo).unwrap().len(), "the whole demo folder is listed");
    assert_eq!(h.state().model_path.as_deref(), Some(model_path().as_path()));
    assert_eq!(h.state().form.baseline, methods::defaults::BASELINE.kind());
    // The tooltip's reason is on screen as a short line under the baseline control.
    assert!(h.query_by_label_contains("noise draws keep a dark frame visible").is_some());

    // A reading starts by itself once the model and image are ready.
    wait_for(&mut h, "the first reading to start", 120, |a| {
        a.wanted_key().is_ok_and(|k| a.cache.slots.contains_key(&k))
    });
    // It is computing, not done: the frame went on while the worker runs.
    let k = h.state().wanted_key().unwrap();
    assert!(matches!(h.state().cache.slots.get(&k), Some(spurion::gui::state::Slot::Pending(_))));
    assert_eq!(h.state().slide_job.as_ref().map(|(sk, _)| sk), Some(&k));
    wait_for(&mut h, "the first reading", 300, |a| a.current_shown().is_some());
    h.run_steps(2);
    let (key, shown) = h.state().current_shown().unwrap();
    assert_eq!(key.request.baseline, methods::defaults::BASELINE);
    assert_eq!(shown.reading.baseline.as_deref(), Some(methods::defaults::BASELINE_TEXT));
    // The main job, on the first view: the shortcut model's reading of a marked positive is
    // flagged (regions_e2e allows at least 5 of 6 such images flagged with the defaults and at
    // most 1 of 6 with the control; it measured 6 and 0).
    assert!(shown.assessment.suspect, "first view not flagged: {}", shown.assessment.reason);
    assert!(h.query_by_label_contains("SUSPECT — ").is_some(), "the suspect banner is shown");

    // The command line with every setting at its default reads the same image the same way.
    let cli = crate::regions_e2e::explain_with_defaults(&model_path(), &want, &tmp.path().join("cli"));
    let prepared = h.state().current_prepared().unwrap();
    let gui = spurion::gui::slide::export::reading_json(&prepared, &shown).unwrap();
    for k in ["method", "settings", "baseline", "steps", "target", "score_kind", "suspect", "suspect_evidence"] {
        assert_eq!(gui[k], cli[k], "field {k}: inspector {} vs spurion explain {}", gui[k], cli[k]);
    }
    let (a, b) = (gui["score_input"].as_f64().unwrap(), cli["score_input"].as_f64().unwrap());
    assert!((a - b).abs() <= 1e-5 * b.abs().max(1.0), "score: inspector {a}, CLI {b}");
}

// ------------------------------------------------------------------ JSON export

/// Every key path of a JSON value: "a", "a.b", "a[].c" (array elements share one path).
fn key_paths(v: &serde_json::Value, at: &str, out: &mut std::collections::BTreeSet<String>) {
    match v {
        serde_json::Value::Object(m) => {
            for (k, x) in m {
                let p = if at.is_empty() { k.clone() } else { format!("{at}.{k}") };
                out.insert(p.clone());
                key_paths(x, &p, out);
            }
        }
        serde_json::Value::Array(a) => {
            for x in a {
                key_paths(x, &format!("{at}[]"), out);
            }
        }
        _ => {}
    }
}

#[test]
fn the_reading_json_export_has_the_fields_of_spurion_explain() {
    let tmp = tempfile::tempdir().unwrap();
    let images = demo_images();
    let img = spurion::gui::first_marked_positive(&root().join("assets/demo")).unwrap_or_else(|| images[0].clone());
    let mut h = harness(vec![img.clone()], tmp.path());
    wait_for(&mut h, "the reading", 120, |a| a.current_shown().is_some());
    let out = tmp.path().join("export");
    h.state_mut().export_dir = out.display().to_string();
    h.get_by_label("reading JSON").click();
    h.run_steps(1);
    wait_for(&mut h, "the JSON export", 60, |a| a.notes.last().is_some_and(|n| n.text.starts_with("written: ")));
    let written: Vec<PathBuf> = std::fs::read_dir(&out).unwrap().map(|e| e.unwrap().path()).collect();
    assert_eq!(written.len(), 1, "{written:?}");
    assert!(written[0].to_string_lossy().ends_with(".reading.json"), "{written:?}");
    let gui: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(&written[0]).unwrap()).unwrap();

    // The same reading from the command line.
    let cli_dir = tmp.path().join("cli");
    let form = &h.state().form;
    let o = std::process::Command::new(env!("CARGO_BIN_EXE_spurion"))
        .args(["explain", "--model", model_path().to_str().unwrap(), "--image", img.to_str().unwrap()])
        .args(["--steps", &STEPS.to_string(), "--baseline", &form.baseline_of(form.baseline, None).unwrap().label()])
        .args(["--quiet", "--out", cli_dir.to_str().unwrap()])
        .output()
        .unwrap();
    assert!(o.status.success(), "spurion explain failed: {}", String::from_utf8_lossy(&o.stderr));
    let cli: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(cli_dir.join("reading.json")).unwrap()).unwrap();

    let (mut gk, mut ck) = (Default::default(), Default::default());
    key_paths(&gui, "", &mut gk);
    key_paths(&cli, "", &mut ck);
    assert!(gk.len() > 10, "{gk:?}");
    assert_eq!(gk, ck, "inspector JSON keys vs reading.json keys");
    // Same request, same reading: the values that do not depend on the clock agree too.
    for k in ["method", "baseline", "target", "suspect", "caution", "input_shape"] {
        assert_eq!(gui[k], cli[k], "field {k}");
    }
    let labels = |v: &serde_json::Value| -> Vec<String> {
        v["regions"].as_array().unwrap().iter().map(|r| r["label"].as_str().unwrap_or_default().to_string()).collect()
    };
    assert_eq!(labels(&gui), labels(&cli), "regions found");
    let (a, b) = (gui["attribution_sum"].as_f64().unwrap(), cli["attribution_sum"].as_f64().unwrap());
    assert!((a - b).abs() <= 1e-4 * b.abs().max(1.0), "attribution sum: inspector {a}, CLI {b}");
    // And the flag in the file is the one the inspector shows.
    let shown = h.state().current_shown().unwrap().1;
    assert_eq!(gui["suspect"].as_bool(), Some(shown.assessment.suspect));
}

/// Steps the UI until the image at `p` has failed to open, and checks the reason names it.
fn wait_for_failed(h: &mut Harness<'_, Inspector>, p: &Path) {
    let start = Instant::now();
    loop {
        h.step();
        let e = h.state().images.iter().find(|e| e.path == p).expect("the image is listed");
        if let spurion::gui::state::ImageState::Failed(m) = &e.state {
            assert!(m.contains(&p.display().to_string()), "{m}");
            return;
        }
        assert!(start.elapsed() < Duration::from_secs(60), "timed out waiting for {} to fail", p.display());
        std::thread::sleep(Duration::from_millis(15));
    }
}

// ------------------------------------------------------------------ drag and drop

#[derive(Debug)]
struct Dropped(PathBuf);

impl egui::DroppedFile for Dropped {
    fn path(&self) -> &Path {
        &self.0
    }
    fn bytes(&self) -> Result<Vec<u8>, String> {
        std::fs::read(&self.0).map_err(|e| e.to_string())
    }
}

fn drop_file(h: &mut Harness<'_, Inspector>, p: &Path) {
    h.input_mut().dropped_files.push(Arc::new(Dropped(p.to_path_buf())));
    h.step();
}

#[test]
fn dropped_images_and_models_open() {
    let tmp = tempfile::tempdir().unwrap();
    let images = demo_images();
    let (first, dropped) = (images[0].clone(), images[5].clone());
    let mut h = harness(vec![first.clone()], tmp.path());
    wait_for(&mut h, "the model", 120, |a| a.session.is_some());
    assert_eq!(h.state().images.len(), 1);

    drop_file(&mut h, &dropped);
    assert_eq!(h.state().images.len(), 2, "the dropped image joins the list");
    assert_eq!(h.state().current_image().map(|e| e.path.clone()), Some(dropped.clone()), "and is shown");
    wait_for(&mut h, "the dropped image to open", 60, |a| a.current_prepared().is_some());
    let name = dropped.file_name().unwrap().to_string_lossy().into_owned();
    assert!(h.query_all_by_label_contains(&name).count() >= 2, "its name in the list and on the slide");

    // Dropping it again adds nothing; dropping the first shows it again.
    drop_file(&mut h, &dropped);
    drop_file(&mut h, &first);
    assert_eq!(h.state().images.len(), 2);
    assert_eq!(h.state().current_image().map(|e| e.path.clone()), Some(first.clone()));

    // A dropped .onnx opens as the model.
    let control = root().join("sample-models/control.onnx");
    drop_file(&mut h, &control);
    wait_for(&mut h, "the dropped model", 120, |a| a.session.as_ref().is_some_and(|s| s.model.path() == control));
    h.run_steps(1);
    assert!(h.query_by_label("model: control.onnx").is_some(), "the top bar names the dropped model");
}

#[test]
fn a_dropped_file_that_is_not_an_image_is_refused_with_a_reason() {
    let tmp = tempfile::tempdir().unwrap();
    let mut h = harness(vec![demo_images()[0].clone()], tmp.path());
    h.step();
    // Let the model load and the first reading finish first: the status line shows the last
    // note, and a late "loaded" note would otherwise take the place of the one checked here.
    wait_for(&mut h, "the first reading", 300, |app| !app.busy());
    let notes_file = tmp.path().join("notes.txt");
    std::fs::write(&notes_file, "not a picture").unwrap();
    drop_file(&mut h, &notes_file);
    h.run_steps(1);
    assert_eq!(h.state().images.len(), 1, "nothing is added");
    let said: Vec<_> = h.state().notes.iter().filter(|n| n.kind == spurion::gui::state::NoteKind::Error).collect();
    assert_eq!(said.len(), 1, "{said:?}");
    let t = &said[0].text;
    // Which file, what is wrong, what to do.
    assert!(t.contains(&notes_file.display().to_string()), "{t}");
    assert!(t.contains(".txt") && t.contains("neither images nor models"), "{t}");
    assert!(t.contains(".onnx") && t.contains("PNG"), "{t}");
    assert!(h.query_by_label(t).is_some(), "the note is on the status line");

    // A damaged DICOM file joins the list (it is an image by its ending) and says, once opened,
    // which file and what is wrong.
    let dcm = tmp.path().join("study.dcm");
    std::fs::write(&dcm, b"DICM").unwrap();
    drop_file(&mut h, &dcm);
    assert_eq!(h.state().images.len(), 2);
    wait_for_failed(&mut h, &dcm);
}

#[test]
fn a_dicom_file_opens_says_what_it_declares_and_takes_a_display_window() {
    let tmp = tempfile::tempdir().unwrap();
    let dcm = root().join("assets/demo-dicom/0005-hillmoor.dcm");
    let mut h = harness(vec![dcm.clone()], tmp.path());
    wait_for(&mut h, "the DICOM image to open", 120, |a| a.current_prepared().is_some());
    h.run_steps(2);
    assert!(
        h.query_by_label_contains("Burned In Annotation: YES").is_some(),
        "the slide says the file declares burned-in text"
    );
    assert!(h.query_by_label_contains("model fed through window C 2040.5 / W 4081").is_some(), "and which window feeds the model");
    // A display window changes the picture shown, on a worker; never what the model reads.
    let fed = h.state().current_prepared().unwrap().picture.pixels.clone();
    h.state_mut().view.display_window = Some(spurion::feed::window::Windowing::MinMax);
    wait_for(&mut h, "the display window", 60, |a| a.display_windows_drawn() > 0);
    h.run_steps(1);
    assert!(h.query_by_label_contains("shown through the display window").is_some());
    assert_eq!(h.state().current_prepared().unwrap().picture.pixels, fed);
    // The reading is the shortcut caught, with the file's own declaration as one more piece of evidence.
    wait_for(&mut h, "the reading", 300, |a| a.current_shown().is_some());
    let shown = h.state().current_shown().unwrap().1;
    assert!(shown.assessment.suspect_evidence.contains(&spurion::regions::Evidence::BurnedInAnnotation), "{:?}", shown.assessment.suspect_evidence);
}
