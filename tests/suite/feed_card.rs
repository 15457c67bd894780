//! The feed a model is given: a card written in one step by `spurion card` feeds a model exported
//! without its normalisation the way numpy and onnxruntime do (the reference); the feed recorded
//! in reading.json makes the read tensor again, bit for bit; a guessed feed is said once, and
//! not when there is a card or the graph normalises itself; `spurion info` prints the feed.
//! Models: tests/reference/make_feed_fixtures.py (plain_rgb, graph_norm_rgb, plain_nhwc).

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use crate::common::{fixture, reference_python, rel_err, run_python};

fn spurion(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_spurion")).args(args).output().expect("run spurion")
}

fn ok(o: Output, what: &str) -> Output {
    assert!(o.status.success(), "{what} failed: {}", String::from_utf8_lossy(&o.stderr));
    o
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

/// A copy of the fixture model `name` in `dir` (so that its card is written beside the copy).
fn model_in(dir: &Path, name: &str) -> PathBuf {
    let to = dir.join(name);
    std::fs::copy(fixture(&format!("feed/{name}")), &to).unwrap();
    to
}

/// A seeded RGB picture of `h`×`w` with structure in every channel, written as PNG (lossless)
/// and as the same uint8 values in .npy for the reference.
fn picture(dir: &Path, name: &str, h: usize, w: usize) -> (PathBuf, PathBuf) {
    let mut state = 0x2545_f491_4f6c_dd1du64;
    let mut px = ndarray::Array3::<u8>::zeros((h, w, 3));
    for ((y, x, c), v) in px.indexed_iter_mut() {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        let smooth = (y * 3 + x * 2 + c * 70) % 256;
        *v = ((smooth + (state % 60) as usize) % 256) as u8;
    }
    let png = dir.join(format!("{name}.png"));
    image::RgbImage::from_raw(w as u32, h as u32, px.iter().copied().collect()).unwrap().save(&png).unwrap();
    let npy = dir.join(format!("{name}.npy"));
    ndarray_npy::write_npy(&npy, &px).unwrap();
    (png, npy)
}

fn predict(model: &Path, image: &Path) -> Vec<f32> {
    let o = ok(spurion(&["predict", "--model", s(model), "--image", s(image), "--json"]), "predict");
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    v["outputs"].as_array().unwrap().iter().map(|x| x.as_f64().unwrap() as f32).collect()
}

fn reference(py: &Path, model: &Path, npy: &Path, mode: &[&str]) -> Vec<f32> {
    let mut args = vec![s(model), s(npy)];
    args.extend_from_slice(mode);
    let out = run_python(py, "ort_feed.py", &args);
    let v: serde_json::Value = serde_json::from_str(out.trim()).unwrap();
    v["scores"].as_array().unwrap().iter().map(|x| x.as_f64().unwrap() as f32).collect()
}

const IMAGENET: (&str, &str) = ("0.485,0.456,0.406", "0.229,0.224,0.225");

#[test]
fn a_card_written_by_the_command_scores_as_onnxruntime_on_numpy_normalised_pictures() {
    // Reference: onnxruntime 1.32 on the picture normalised in numpy 2.4 (tests/reference/ort_feed.py).
    let Some(py) = reference_python() else { return };
    let dir = tempfile::tempdir().unwrap();
    // 64×64 onto a 32×32 grid: area averaging halves by exact 2×2 means, which numpy does too.
    let (png, npy) = picture(dir.path(), "pic", 64, 64);
    for name in ["plain_rgb.onnx", "plain_nhwc.onnx"] {
        let model = model_in(dir.path(), name);
        let guessed = predict(&model, &png);
        let cases: [(&[&str], Vec<&str>); 4] = [
            (&["--preset", "imagenet"], vec!["fixed", IMAGENET.0, IMAGENET.1]),
            (&["--preset", "signed-unit"], vec!["fixed", "0.5,0.5,0.5", "0.5,0.5,0.5"]),
            (&["--preset", "per-image"], vec!["per-image"]),
            (&["--mean", "0.2,0.3,0.4", "--std", "0.5,0.25,2"], vec!["fixed", "0.2,0.3,0.4", "0.5,0.25,2"]),
        ];
        for (args, mode) in cases {
            let mut cmd = vec!["card", "--model", s(&model), "--force"];
            cmd.extend_from_slice(args);
            ok(spurion(&cmd), "spurion card");
            let got = predict(&model, &png);
            let want = reference(&py, &model, &npy, &mode);
            let e = rel_err(&got, &want, 1e-3);
            assert!(e < 1e-5, "{name} {args:?}: spurion {got:?}, onnxruntime on numpy's feed {want:?} (rel {e:e})");
            // The check can fail: the guessed feed (0..1, no mean or std) scores otherwise.
            assert!(rel_err(&guessed, &want, 1e-3) > 1e-3, "{name} {args:?}: the normalisation changed nothing");
        }
        // The card says NHWC for the NHWC model: the layout came from the graph.
        let card = std::fs::read_to_string(model.with_extension("feed.toml")).unwrap();
        let layout = if name.contains("nhwc") { "layout = \"nhwc\"" } else { "layout = \"nchw\"" };
        assert!(card.contains(layout) && card.contains("height = 32"), "{card}");
    }
}

#[test]
fn the_feed_in_reading_json_makes_the_read_tensor_again_bit_for_bit() {
    let dir = tempfile::tempdir().unwrap();
    let model = model_in(dir.path(), "plain_rgb.onnx");
    // 50×70: a resize that is no whole factor, so every pixel is a weighted mix.
    let (png, _) = picture(dir.path(), "odd", 50, 70);
    let labels = dir.path().join("labels.txt");
    std::fs::write(&labels, "clear\n\nhazy\nmarked\n").unwrap();
    for preset in ["imagenet", "per-image"] {
        ok(
            spurion(&["card", "--model", s(&model), "--preset", preset, "--labels", s(&labels), "--resize", "shorter-side-crop", "--force"]),
            "spurion card",
        );
        let out = dir.path().join(format!("r-{preset}"));
        ok(
            spurion(&["explain", "--model", s(&model), "--image", s(&png), "--method", "gradient", "--out", s(&out), "--quiet"]),
            "explain",
        );
        let reading: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(out.join("reading.json")).unwrap()).unwrap();
        let feed = &reading["feed"];
        assert_eq!(feed["fed"], "picture");
        assert_eq!(feed["guessed"], false);
        assert_eq!(feed["normalise"]["from"], "card");
        assert_eq!(feed["size"]["from"], "card", "spurion card writes the size it read from the graph");
        assert_eq!(feed["resize"]["value"], "shorter-side-crop");
        assert_eq!(feed["picture"], serde_json::json!({"height": 50, "width": 70, "channels": 3, "bit_depth": 8}));
        assert_eq!(feed["standardise"].is_object(), preset == "per-image", "{feed}");
        assert_eq!(reading["labels"], serde_json::json!(["clear", "hazy", "marked"]));

        // The card beside the model changes after the reading: the reading's own file still
        // makes the tensor it read.
        ok(spurion(&["card", "--model", s(&model), "--preset", "unit", "--force"]), "spurion card");
        let fed = out.join("fed.npy");
        ok(
            spurion(&["feed", "--from-reading", s(&out.join("reading.json")), "--image", s(&png), "--out", s(&fed)]),
            "feed --from-reading",
        );
        let t = spurion::feed::read_tensor(&fed).unwrap();
        // The tensor the reading was made of, built here through the library from its card.
        let input: spurion::feed::InputCard = serde_json::from_value(feed["input"].clone()).unwrap();
        let card = spurion::feed::FeedCard { input, output: Default::default(), origin: Default::default() };
        let pic = spurion::feed::Picture::open(&png).unwrap();
        let x = spurion::methods::Input::picture(pic.clone(), &card).unwrap().model_tensor().unwrap();
        assert_eq!(t.shape(), x.shape());
        assert!(t.iter().zip(x.iter()).all(|(a, b)| a.to_bits() == b.to_bits()), "{preset}: not the same tensor, bit for bit");
        // And the model scores it exactly as the reading recorded (logits: output 0, no softmax).
        let o = ok(spurion(&["predict", "--model", s(&model), "--tensor", s(&fed), "--json"]), "predict --tensor");
        let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
        assert_eq!(v["outputs"], reading["scores"], "{preset}");
        // The card now beside the model feeds another tensor: the check can fail.
        let now = spurion::feed::FeedCard::load(&model.with_extension("feed.toml")).unwrap();
        let y = spurion::methods::Input::picture(pic, &now).unwrap().model_tensor().unwrap();
        assert!(y.iter().zip(t.iter()).any(|(a, b)| a != b), "{preset}: the unit card fed the same tensor");
    }
    // Another picture than the one read is refused, saying which.
    let (other, _) = picture(dir.path(), "other", 40, 40);
    let o = spurion(&["feed", "--from-reading", s(&dir.path().join("r-imagenet/reading.json")), "--image", s(&other), "--out", s(&dir.path().join("no.npy"))]);
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stderr).contains("give the image that was read"), "{}", String::from_utf8_lossy(&o.stderr));
    // A reading of a tensor file records that and refuses to be fed again.
    let out = dir.path().join("r-tensor");
    let x = dir.path().join("x.npy");
    spurion::feed::write_tensor(&x, &ndarray::ArrayD::from_elem(ndarray::IxDyn(&[1, 3, 32, 32]), 0.25)).unwrap();
    ok(spurion(&["explain", "--model", s(&model), "--tensor", s(&x), "--method", "gradient", "--out", s(&out), "--quiet"]), "explain");
    let r: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(out.join("reading.json")).unwrap()).unwrap();
    assert_eq!(r["feed"]["fed"], "tensor");
    let o = spurion(&["feed", "--from-reading", s(&out.join("reading.json")), "--image", s(&png), "--out", s(&dir.path().join("no.npy"))]);
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stderr).contains("tensor file"), "{}", String::from_utf8_lossy(&o.stderr));
}

#[test]
fn a_dicom_reading_records_its_window_and_is_fed_again_exactly() {
    let dir = tempfile::tempdir().unwrap();
    let model = model_in(dir.path(), "plain_rgb.onnx");
    ok(spurion(&["demo", "--out", s(&dir.path().join("demo")), "--count", "1", "--dicom", "1", "--no-masks"]), "demo");
    let dcm = std::fs::read_dir(dir.path().join("demo/dicom")).unwrap().next().unwrap().unwrap().path();
    ok(spurion(&["card", "--model", s(&model), "--preset", "imagenet"]), "spurion card");
    let out = dir.path().join("r");
    ok(spurion(&["explain", "--model", s(&model), "--image", s(&dcm), "--method", "gradient", "--out", s(&out), "--quiet"]), "explain");
    let reading: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(out.join("reading.json")).unwrap()).unwrap();
    let feed = &reading["feed"];
    assert!(feed["window_used"].is_object(), "a DICOM picture's window is recorded: {feed}");
    assert_eq!(feed["window"]["from"], "default");
    assert_eq!(feed["channel_rule"], "replicate", "a grey picture to an RGB model");
    let fed = dir.path().join("fed.npy");
    ok(spurion(&["feed", "--from-reading", s(&out.join("reading.json")), "--image", s(&dcm), "--out", s(&fed)]), "feed --from-reading");
    let o = ok(spurion(&["predict", "--model", s(&model), "--tensor", s(&fed), "--json"]), "predict --tensor");
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!(v["outputs"], reading["scores"]);
}

#[test]
fn a_guessed_feed_is_said_once_and_not_with_a_card_or_a_normalising_graph() {
    let dir = tempfile::tempdir().unwrap();
    let (png, _) = picture(dir.path(), "pic", 32, 32);
    let explain = |model: &Path, out: &str| {
        let out = dir.path().join(out);
        let o = ok(spurion(&["explain", "--model", s(model), "--image", s(&png), "--method", "gradient", "--out", s(&out), "--quiet"]), "explain");
        let r: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(out.join("reading.json")).unwrap()).unwrap();
        (String::from_utf8_lossy(&o.stderr).into_owned(), r)
    };
    let plain = model_in(dir.path(), "plain_rgb.onnx");
    let (err, r) = explain(&plain, "a");
    assert_eq!(err.matches("warning: no feed card").count(), 1, "said once: {err}");
    assert!(err.contains("spurion card --model") && err.contains("0..1"), "names what was assumed and how to write a card: {err}");
    assert_eq!(r["feed"]["guessed"], true);
    assert!(r["feed"]["warning"].is_string());
    assert_eq!(r["feed"]["size"]["from"], "graph");
    assert_eq!(r["feed"]["layout"]["from"], "graph");
    assert_eq!(r["feed"]["normalise"]["from"], "default");

    // A review says it once too, and records the feed in review.json.
    let out = dir.path().join("rv");
    let o = ok(
        spurion(&[
            "review", "--model", s(&plain), "--image", s(&png), "--method", "gradient", "--skip", "curves,randomisation,convergence,shapley",
            "--out", s(&out), "--quiet",
        ]),
        "review",
    );
    assert_eq!(String::from_utf8_lossy(&o.stderr).matches("warning: no feed card").count(), 1);
    let rv: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(out.join("review.json")).unwrap()).unwrap();
    assert_eq!(rv["feed"]["fed"], "picture");
    assert_eq!(rv["feed"]["guessed"], true);

    // The graph normalises its own input (Sub, Div by constants after it): nothing to warn of.
    let normed = model_in(dir.path(), "graph_norm_rgb.onnx");
    let (err, r) = explain(&normed, "b");
    assert!(!err.contains("warning"), "{err}");
    let how = r["feed"]["graph_normalises"].as_str().unwrap_or_else(|| panic!("graph normalisation not found: {}", r["feed"]));
    assert!(how.contains("Sub"), "{how}");
    assert_eq!(plain_feed_graph(&plain), serde_json::Value::Null, "the plain graph does not normalise");

    // With a card: no warning, and the card named.
    ok(spurion(&["card", "--model", s(&plain), "--preset", "unit"]), "spurion card");
    let (err, r) = explain(&plain, "c");
    assert!(!err.contains("warning"), "{err}");
    assert_eq!(r["feed"]["guessed"], false);
    assert!(r["feed"]["card"].as_str().unwrap().ends_with("plain_rgb.feed.toml"));
    assert!(r["feed"].get("warning").is_none());

    // A sweep says it once for all its images and records the feed in run.json.
    std::fs::remove_file(plain.with_extension("feed.toml")).unwrap();
    let images = dir.path().join("images/site");
    std::fs::create_dir_all(&images).unwrap();
    for i in 0..3 {
        picture(&images, &format!("p{i}"), 32, 32);
        std::fs::remove_file(images.join(format!("p{i}.npy"))).unwrap();
    }
    let out = dir.path().join("sweep");
    let o = ok(
        spurion(&["sweep", "--model", s(&plain), "--images", s(&dir.path().join("images")), "--out", s(&out), "--method", "gradient", "--quiet"]),
        "sweep",
    );
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(err.matches("warning: no feed card").count(), 1, "{err}");
    let run: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(out.join("run.json")).unwrap()).unwrap();
    assert_eq!(run["feed"]["guessed"], true, "{run}");
    assert_eq!(run["feed"]["scale"]["value"], "unit");
}

/// `graph_normalises` of a model as `spurion info --json` reports it.
fn plain_feed_graph(model: &Path) -> serde_json::Value {
    let o = ok(spurion(&["info", "--model", s(model), "--json"]), "info");
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    v["feed"]["graph_normalises"].clone()
}

#[test]
fn card_refuses_to_overwrite_and_info_prints_the_feed() {
    let dir = tempfile::tempdir().unwrap();
    let model = model_in(dir.path(), "plain_rgb.onnx");
    let card = model.with_extension("feed.toml");

    let o = ok(spurion(&["info", "--model", s(&model)]), "info");
    let text = String::from_utf8_lossy(&o.stdout);
    assert!(text.contains("feed of an image"), "{text}");
    assert!(text.contains("none: guessed from the graph"), "{text}");
    assert!(text.contains("32×32 (width×height, graph)"), "{text}");
    assert!(text.contains("warning: no feed card"), "{text}");

    // Nothing said about the normalisation: refused, no file written.
    let o = spurion(&["card", "--model", s(&model)]);
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stderr).contains("--preset"));
    assert!(!card.exists());

    ok(spurion(&["card", "--model", s(&model), "--preset", "imagenet"]), "spurion card");
    let first = std::fs::read_to_string(&card).unwrap();
    let o = spurion(&["card", "--model", s(&model), "--preset", "unit"]);
    assert_eq!(o.status.code(), Some(1), "a second card without --force is refused");
    assert!(String::from_utf8_lossy(&o.stderr).contains("--force"), "{}", String::from_utf8_lossy(&o.stderr));
    assert_eq!(std::fs::read_to_string(&card).unwrap(), first, "the card is left as it was");

    let o = ok(spurion(&["info", "--model", s(&model)]), "info");
    let text = String::from_utf8_lossy(&o.stdout);
    assert!(text.contains("plain_rgb.feed.toml") && text.contains("[0.485, 0.456, 0.406]") && text.contains("(card)"), "{text}");
    assert!(!text.contains("warning"), "{text}");
    let o = ok(spurion(&["info", "--model", s(&model), "--json"]), "info --json");
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!(v["feed"]["normalise"]["from"], "card");
    assert_eq!(v["feed"]["output"]["value"], "logits");

    // A labels file whose count is not the model's output count is refused.
    let labels = dir.path().join("labels.txt");
    std::fs::write(&labels, "one\ntwo\n").unwrap();
    let o = spurion(&["card", "--model", s(&model), "--preset", "unit", "--labels", s(&labels), "--force"]);
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stderr).contains("3 outputs"), "{}", String::from_utf8_lossy(&o.stderr));
}

#[test]
fn the_inspector_shows_a_guessed_feed_and_writes_a_card_beside_the_model() {
    use egui_kittest::kittest::Queryable;
    use spurion::gui::{GuiOptions, Inspector, InspectorConfig};
    let dir = tempfile::tempdir().unwrap();
    let model = model_in(dir.path(), "plain_rgb.onnx");
    let app = Inspector::new(
        egui::Context::default(),
        GuiOptions { model: Some(model.clone()), paths: vec![], ledger: None },
        InspectorConfig::headless(dir.path()),
    );
    let mut h = crate::gui_inspector::drive(app);
    crate::gui_inspector::wait_for(&mut h, "the model", 60, |a| a.session.is_some());
    h.step();
    let warned = h.state().notes.iter().filter(|n| n.kind == spurion::gui::state::NoteKind::Warning && n.text.contains("no feed card")).count();
    assert_eq!(warned, 1, "the guessed feed is said once");
    assert!(h.state().feed_window.open, "the window that writes a card is offered");
    h.get_by_label("Write the card and use it").click();
    crate::gui_inspector::wait_for(&mut h, "the model with its new card", 60, |a| a.session.as_ref().is_some_and(|s| !s.feed.guessed));
    let card = spurion::feed::FeedCard::load(&model.with_extension("feed.toml")).unwrap();
    assert_eq!(card.input.mean, vec![0.485, 0.456, 0.406], "the first preset, ImageNet's");
    assert!(h.state().session.as_ref().unwrap().feed.warning.is_none());
}
