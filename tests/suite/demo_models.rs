//! The committed sample models load through spurion's own loader and reproduce the logits that
//! onnxruntime recorded at export time (sample-models/expected-predictions.json, which names the
//! onnxruntime version; written by sample-models/train.py). And the shortcut is really there:
//! measured here, live, on phantoms from spurion's generator.

use std::path::PathBuf;

use ndarray::{Array3, ArrayD};
use rayon::prelude::*;
use serde::Deserialize;
use spurion::demo::{self, Marks, Mix, SetSpec};
use spurion::feed::{FeedCard, Feeder, Picture, read_tensor};
use spurion::model::{LoadOptions, Model, Tap};

const MODELS: [&str; 3] = ["shortcut", "control", "shortcut-rgb224"];

#[derive(Deserialize)]
struct Recorded {
    onnxruntime: String,
    models: std::collections::BTreeMap<String, RecordedModel>,
}

#[derive(Deserialize)]
struct RecordedModel {
    onnx_sha256: String,
    tensors: Vec<RecordedTensor>,
    predictions: Vec<RecordedPrediction>,
}

#[derive(Deserialize)]
struct RecordedTensor {
    file: String,
    tensor: String,
    logits: Vec<f32>,
}

#[derive(Deserialize)]
struct RecordedPrediction {
    file: String,
    logits: Vec<f32>,
}

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn recorded() -> Recorded {
    let p = root().join("sample-models/expected-predictions.json");
    serde_json::from_str(&std::fs::read_to_string(&p).unwrap()).unwrap()
}

fn load(name: &str) -> (Model, FeedCard) {
    let path = root().join(format!("sample-models/{name}.onnx"));
    let model = Model::load(&path, &LoadOptions::default()).unwrap_or_else(|e| panic!("{name}: {e:#}"));
    let card = FeedCard::for_model(&path).unwrap().unwrap_or_else(|| panic!("{name} has no feed card"));
    card.check_against(&model).unwrap();
    (model, card)
}

/// |a − b| ≤ 1e-4 · max(|b|, 1): relative for logits beyond ±1, absolute near zero.
fn close(a: f32, b: f32) -> bool {
    (a - b).abs() <= 1e-4 * b.abs().max(1.0)
}

fn tensor_of(card: &FeedCard, pic: &Picture) -> ArrayD<f32> {
    Feeder::for_picture(card, pic).unwrap().tensor(&pic.pixels).unwrap()
}

#[test]
fn recorded_tensors_give_the_onnxruntime_logits() {
    let rec = recorded();
    // Recorded with onnxruntime 1.32.0 (CPU execution provider) by sample-models/train.py.
    assert!(!rec.onnxruntime.is_empty());
    for name in MODELS {
        let (model, card) = load(name);
        let r = &rec.models[name];
        assert_eq!(model.sha256(), r.onnx_sha256, "{name}.onnx is not the file the logits were recorded with");
        assert_eq!(model.input_shape(), card.tensor_shape().as_slice());
        assert_eq!(model.output_len(), 2);
        assert!(!model.ends_in_softmax(), "{name} should end in logits");
        model.gradient_ready().unwrap_or_else(|e| panic!("{name}: {e:#}"));
        assert!(r.tensors.len() >= 2);
        for t in &r.tensors {
            let x = read_tensor(&root().join("sample-models").join(&t.tensor)).unwrap();
            let y = model.forward(&x, Tap::Output).unwrap();
            for (k, (&a, &b)) in y.iter().zip(&t.logits).enumerate() {
                assert!(close(a, b), "{name} {} logit {k}: spurion {a}, onnxruntime {b}", t.file);
            }
        }
    }
}

#[test]
fn demo_pictures_through_the_feed_card_give_the_onnxruntime_logits() {
    let rec = recorded();
    for name in MODELS {
        let (model, card) = load(name);
        let r = &rec.models[name];
        // The feed reproduces the recorded input tensors (train.py mirrors src/feed's resize).
        for t in &r.tensors {
            let pic = Picture::open(&root().join("assets/demo").join(&t.file)).unwrap();
            let ours = tensor_of(&card, &pic);
            let theirs = read_tensor(&root().join("sample-models").join(&t.tensor)).unwrap();
            assert_eq!(ours.shape(), theirs.shape());
            let worst = ours.iter().zip(theirs.iter()).map(|(a, b)| (a - b).abs()).fold(0.0f32, f32::max);
            assert!(worst < 1e-5, "{name} {}: feed tensor differs by {worst}", t.file);
        }
        assert_eq!(r.predictions.len(), 36);
        for p in &r.predictions {
            let pic = Picture::open(&root().join("assets/demo").join(&p.file)).unwrap();
            let y = model.forward(&tensor_of(&card, &pic), Tap::Output).unwrap();
            for (k, (&a, &b)) in y.iter().zip(&p.logits).enumerate() {
                assert!(close(a, b), "{name} {} logit {k}: spurion {a}, onnxruntime {b}", p.file);
            }
        }
    }
}

/// Accuracy of a model on `count` pooled phantoms with the given marks rule.
fn accuracy(model: &Model, card: &FeedCard, count: usize, marks: Marks) -> f64 {
    let set = SetSpec { count, seed: 5150, mix: Mix::Pooled, marks, ..SetSpec::default() };
    let right: usize = (0..count)
        .into_par_iter()
        .map(|i| {
            let p = demo::render(&set.phantom(i));
            let px = Array3::from_shape_fn((p.image.nrows(), p.image.ncols(), 1), |(y, x, _)| p.image[[y, x]] as f32 / 255.0);
            let pic = Picture::new(px, 8);
            let y = model.forward(&tensor_of(card, &pic), Tap::Output).unwrap();
            ((y[1] > y[0]) == p.row.finding) as usize
        })
        .sum();
    right as f64 / count as f64
}

#[test]
fn shortcut_model_reads_the_marks_and_control_does_not() {
    // A smaller, fresh held-out set than shortcut-proof.json's (seed 5150, never trained on);
    // the thresholds are the issue's: the shortcut loses > 20 points when the marks are swapped.
    // The control's allowance is wider than the proof's 3 points because 150 images are few.
    let n = 150;
    let (shortcut, sc) = load("shortcut");
    let (control, cc) = load("control");
    let s_as = accuracy(&shortcut, &sc, n, Marks::BySite);
    let s_sw = accuracy(&shortcut, &sc, n, Marks::Swapped);
    let c_as = accuracy(&control, &cc, n, Marks::BySite);
    let c_sw = accuracy(&control, &cc, n, Marks::Swapped);
    eprintln!("shortcut {s_as:.3} -> swapped {s_sw:.3}; control {c_as:.3} -> swapped {c_sw:.3}");
    assert!(s_as - s_sw > 0.20, "shortcut: as generated {s_as}, swapped {s_sw}");
    assert!((c_as - c_sw).abs() < 0.05, "control: as generated {c_as}, swapped {c_sw}");
    assert!(c_as > 0.8, "control should see the finding itself: {c_as}");
}

/// Supporting mark share (tag ∪ frame) of IG maps, black baseline, target "finding present".
fn ig_mark_shares(name: &str, files: &[String]) -> Vec<f64> {
    use spurion::control::Control;
    use spurion::methods::{self, Baseline, Input, Method, Request, Rule, ScoreKind, TargetSpec};
    use spurion::sign::Sign;
    use spurion::regions::figures::mark_share;
    let (model, card) = load(name);
    let req = Request {
        method: Method::IntegratedGradients { steps: 32, rule: Rule::GaussLegendre, adaptive: None },
        baseline: Baseline::Black,
        target: TargetSpec::Index(1),
        score: ScoreKind::Raw,
    };
    files
        .iter()
        .map(|f| {
            let dir = root().join("assets/demo");
            let pic = Picture::open(&dir.join(f)).unwrap();
            let input = Input::picture(pic, &card).unwrap();
            let reading = methods::explain(&model, Some(&card), &input, &req, &Control::new()).unwrap();
            let stem = f.strip_suffix(".png").unwrap();
            let mask = |what: &str| {
                let g = image::open(dir.join(format!("masks/{stem}.{what}.png"))).unwrap().to_luma8();
                ndarray::Array2::from_shape_fn((g.height() as usize, g.width() as usize), |(y, x)| {
                    g.get_pixel(x as u32, y as u32)[0] == 255
                })
            };
            let marks = &mask("tag") | &mask("frame");
            mark_share(&reading.map2d(), &marks, Sign::Supporting).unwrap().unwrap_or(0.0)
        })
        .collect()
}

#[test]
fn ig_mark_share_on_hillmoor_positives_is_higher_for_the_shortcut_model() {
    let rows = demo::read_manifest(&root().join("assets/demo/manifest.csv")).unwrap();
    let files: Vec<String> =
        rows.iter().filter(|r| r.site == demo::Site::Hillmoor && r.finding).map(|r| r.file.clone()).collect();
    assert_eq!(files.len(), 6);
    let s = ig_mark_shares("shortcut", &files);
    let c = ig_mark_shares("control", &files);
    eprintln!("IG (black baseline) supporting mark share on Hillmoor positives\n  shortcut {s:.3?}\n  control  {c:.3?}");
    let median = |v: &[f64]| {
        let mut v = v.to_vec();
        v.sort_by(f64::total_cmp);
        (v[2] + v[3]) / 2.0
    };
    // "Clearly higher": the shortcut's median share at least five times the control's and 0.02
    // above it. Measured 2026-12-02: shortcut 0.044, control 0.002. A black baseline gives the
    // black frame no attribution at all (x − x′ = 0 there), so only the tag counts here.
    let (ms, mc) = (median(&s), median(&c));
    assert!(ms > 5.0 * mc && ms > mc + 0.02, "median mark share: shortcut {ms:.3}, control {mc:.3}");
}

#[test]
fn default_integrated_gradients_are_complete_within_one_percent_on_the_sample_models() {
    // Completeness (Sundararajan et al. 2017, prop. 1): the attributions sum to F(x) − F(x′).
    // The default reading refines until its gap is under 1%; here F(x) and F(x′) come from
    // forwards of tensors built in this test (the picture fed, and its blur built with
    // blur_grid), and the sum from the map, so the check does not lean on the figures the
    // refinement stopped on. (64 fixed Gauss–Legendre steps left 2.6% on the control case.)
    use spurion::control::Control;
    use spurion::methods::{self, Baseline, Input, Method, Request, ScoreKind, TargetSpec};
    for (name, file, baseline) in [
        ("shortcut", "0005-hillmoor.png", Baseline::Blur { sigma: 8.0 }),
        ("control", "0000-north-quay.png", Baseline::Blur { sigma: 8.0 }),
        ("shortcut-rgb224", "0005-hillmoor.png", Baseline::Black),
    ] {
        let (model, card) = load(name);
        let pic = Picture::open(&root().join("assets/demo").join(file)).unwrap();
        let input = Input::picture(pic, &card).unwrap();
        let req = Request {
            method: Method::integrated_gradients(),
            baseline,
            target: TargetSpec::Top,
            score: ScoreKind::Logits,
        };
        let r = methods::explain(&model, Some(&card), &input, &req, &Control::new()).unwrap();
        let gap = r.completeness_gap.expect("IG reports its gap");
        let Input::Picture { picture, feeder } = &input else { unreachable!() };
        let grid = feeder.prepare(&picture.pixels).unwrap();
        let base = match &req.baseline {
            Baseline::Blur { sigma } => methods::blur_grid(&grid, *sigma),
            _ => ndarray::Array3::zeros(grid.raw_dim()),
        };
        let f = |t: &ndarray::ArrayD<f32>| model.forward(t, spurion::model::Tap::Output).unwrap()[r.target.index] as f64;
        let diff = f(&feeder.tensor(&picture.pixels).unwrap()) - f(&feeder.normalise(&base));
        let sum: f64 = r.tensor_map.iter().map(|v| *v as f64).sum();
        eprintln!("{name} {file}: gap {:.3}% after {:?} steps (F(x) − F(x′) = {diff:.3})", gap * 100.0, r.steps);
        assert!(diff.abs() > 0.1, "{name} {file}: F(x) ≈ F(x′), the relative gap means little");
        assert!(gap < 0.01, "{name} {file}: gap {gap}");
        assert!((sum - diff).abs() <= 0.01 * diff.abs(), "{name} {file}: sum {sum} vs F(x) − F(x′) = {diff}");
    }
}
