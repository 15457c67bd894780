//! `spurion review` and `spurion compare-sweeps` as a script would use them: the files and the
//! fields of review.json, boxes in image pixels, and one clear paragraph with exit code 1 (2 for
//! usage) on bad input.

use std::path::Path;
use std::process::{Command, Output};

use serde_json::Value;

use crate::common::{fixture, root};

fn spurion(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_spurion")).args(args).output().expect("run spurion")
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

fn json(path: &Path) -> Value {
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

fn numbers(v: &Value) -> Vec<f64> {
    v.as_array().unwrap().iter().map(|x| x.as_f64().unwrap()).collect()
}

#[test]
fn review_of_a_tensor_writes_every_figure_asked_for() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("r");
    let (m, x) = (fixture("methods/small_cnn.onnx"), fixture("methods/x16.npy"));
    let o = spurion(&[
        "review", "--model", m.to_str().unwrap(), "--tensor", x.to_str().unwrap(), "--steps", "8", "--grid", "2",
        "--cascade-methods", "occlusion,integrated-gradients", "--curve-steps", "8", "--random-orders", "2",
        "--convergence-max", "16", "--window", "4", "--stride", "4", "--out", out.to_str().unwrap(), "-q",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let j = json(&out.join("review.json"));
    assert_eq!(j["caution"], spurion::CAUTION);
    for key in ["deletion", "insertion"] {
        let c = &j[key];
        assert_eq!(numbers(&c["fractions"]).len(), 9, "{key}: 8 steps, 9 points");
        assert_eq!(numbers(&c["scores"]).len(), 9);
        assert!(c["auc"].is_f64() && c["random_auc"].is_f64(), "{key}: {c}");
    }
    // The reading's method (integrated gradients) leads "randomisation", in cascade order.
    let steps = j["randomisation"].as_array().unwrap();
    assert_eq!(steps.iter().map(|s| s["layers_randomised"].as_u64().unwrap()).collect::<Vec<_>>(), vec![1, 2, 3]);
    assert!(steps.iter().all(|s| s["spearman"].is_f64() && s["top_overlap"].is_f64()));
    let methods: Vec<&str> = j["randomisation_detail"]["methods"].as_array().unwrap().iter().map(|m| m["method"].as_str().unwrap()).collect();
    assert_eq!(methods, vec!["occlusion", "integrated-gradients"]);
    // Fixed steps: the convergence of the reading's own rule, in increasing steps.
    assert_eq!(j["convergence_rule"], "gauss-legendre");
    let conv = j["convergence"].as_array().unwrap();
    assert_eq!(conv.iter().map(|p| p["steps"].as_u64().unwrap()).collect::<Vec<_>>(), vec![4, 8, 16]);
    assert!(conv.iter().all(|p| p["gap"].is_f64()));
    let sh = &j["shapley"];
    assert_eq!(sh["grid"], 2);
    let boxes: Vec<Vec<u64>> = sh["cells"].as_array().unwrap().iter().map(|c| c["box"].as_array().unwrap().iter().map(|v| v.as_u64().unwrap()).collect()).collect();
    assert_eq!(boxes, vec![vec![0, 0, 8, 8], vec![8, 0, 16, 8], vec![0, 8, 8, 16], vec![8, 8, 16, 16]]);
    let sum: f64 = sh["cells"].as_array().unwrap().iter().map(|c| c["value"].as_f64().unwrap()).sum();
    let diff = sh["score_input"].as_f64().unwrap() - sh["score_baseline"].as_f64().unwrap();
    assert!((sum - diff).abs() < 1e-9 && (sh["sum"].as_f64().unwrap() - diff).abs() < 1e-9, "efficiency: {sum} against {diff}");
    assert!(sh["cells"][0]["stderr"].is_f64());
    let png = image::open(out.join("review.png")).unwrap();
    assert!(png.width() >= 1000 && png.height() >= 600, "a panel, {}×{}", png.width(), png.height());
}

#[test]
fn review_of_a_picture_against_a_second_model() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("r");
    let (m, m2) = (root().join("sample-models/shortcut.onnx"), root().join("sample-models/control.onnx"));
    let img = root().join("assets/demo/0005-hillmoor.png");
    let o = spurion(&[
        "review", "--model", m.to_str().unwrap(), "--image", img.to_str().unwrap(), "--method", "gradient",
        "--skip", "randomisation,convergence", "--permutations", "2", "--curve-steps", "4", "--random-orders", "1",
        "--against", m2.to_str().unwrap(), "--out", out.to_str().unwrap(), "-q",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let j = json(&out.join("review.json"));
    assert!(j["randomisation"].is_null() && j["convergence"].is_null(), "skipped tests are null");
    // An 8×8 grid over the 256×256 picture: boxes in image pixels, not model-grid pixels.
    let cells = j["shapley"]["cells"].as_array().unwrap();
    assert_eq!(cells.len(), 64);
    assert_eq!(cells[0]["box"], serde_json::json!([0, 0, 32, 32]));
    assert_eq!(cells[63]["box"], serde_json::json!([224, 224, 256, 256]));
    let a = &j["against"];
    assert_eq!(a["second"]["model_file"], "control.onnx");
    assert_eq!(a["first"]["target"], a["second"]["target"], "both models read the same class");
    let signs: Vec<&str> = a["agreement"].as_array().unwrap().iter().map(|s| s["sign"].as_str().unwrap()).collect();
    assert_eq!(signs, vec!["magnitude", "supporting", "both"]);
}

#[test]
fn bad_input_gets_one_clear_paragraph() {
    let (m, x) = (fixture("methods/small_cnn.onnx"), fixture("methods/x16.npy"));
    let (m, x) = (m.to_str().unwrap(), x.to_str().unwrap());
    let img = root().join("assets/demo/0005-hillmoor.png");
    let cases: Vec<(Vec<&str>, i32, &str)> = vec![
        (vec!["review", "--model", "no/such/model.onnx", "--tensor", x], 1, "no/such/model.onnx"),
        (vec!["review", "--model", m, "--tensor", x, "--grid", "0"], 2, "--grid"),
        (vec!["review", "--model", m, "--tensor", x, "--grid", "99"], 1, "does not fit a 16×16 image"),
        (vec!["review", "--model", m, "--tensor", x, "--skip", "speed"], 1, "--skip speed: not a test"),
        (vec!["review", "--model", m, "--tensor", x, "--baselines", "purple"], 1, "unknown baseline \"purple\""),
        (vec!["review", "--model", m, "--tensor", x, "--against", "no/such/second.onnx"], 1, "no/such/second.onnx"),
        (vec!["review", "--model", m, "--tensor", x, "--cascade-methods", "guessing"], 1, "unknown method \"guessing\""),
    ];
    for (args, code, says) in cases {
        let o = spurion(&args);
        assert_eq!(o.status.code(), Some(code), "{args:?}: {}", stderr(&o));
        assert!(stderr(&o).contains(says), "{args:?} should say {says}: {}", stderr(&o));
    }
    let flat = fixture("review/flat.onnx");
    let o = spurion(&["review", "--model", flat.to_str().unwrap(), "--image", img.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(1));
    assert!(stderr(&o).contains("rank-2 input") && stderr(&o).contains("--tensor"), "{}", stderr(&o));
    assert_eq!(stderr(&o).lines().count(), 1, "one paragraph: {}", stderr(&o));
}

fn row(path: &str, group: &str, suspect: bool, share: f64, flipped: bool) -> spurion::sweep::Row {
    spurion::sweep::Row {
        path: path.into(),
        group: group.into(),
        top: 1,
        top_label: "finding present".into(),
        top_score: 1.0,
        target: 1,
        target_label: "finding present".into(),
        target_score: 1.0,
        mark_share: Some(share),
        lift: Some(2.0),
        removal_drop: Some(0.5),
        removal_probability_drop: Some(0.2),
        top_after_removal: Some(if flipped { 0 } else { 1 }),
        suspect,
        evidence: String::new(),
        regions: 1,
        region_labels: "burned-in mark".into(),
        completeness_gap: None,
        steps: None,
        burned_in_annotation: None,
        verdict: None,
        seconds: 0.1,
        hotspot_summary: String::new(),
        hotspots: vec![],
    }
}

fn write_sweep(dir: &Path, rows: &[spurion::sweep::Row]) {
    std::fs::create_dir_all(dir).unwrap();
    let text: String = rows.iter().map(|r| serde_json::to_string(r).unwrap() + "\n").collect();
    std::fs::write(dir.join("sweep.jsonl"), text).unwrap();
}

#[test]
fn compare_sweeps_writes_each_groups_differences() {
    let dir = tempfile::tempdir().unwrap();
    let (a, b, out) = (dir.path().join("a"), dir.path().join("b"), dir.path().join("cmp"));
    let first: Vec<_> = (0..6).map(|i| row(&format!("hillmoor/{i}.png"), "hillmoor", i < 5, 0.3, i < 4)).collect();
    let second: Vec<_> = (0..6).map(|i| row(&format!("hillmoor/{i}.png"), "hillmoor", i < 1, 0.05, false)).collect();
    write_sweep(&a, &first);
    write_sweep(&b, &second);
    let o = spurion(&["compare-sweeps", a.to_str().unwrap(), b.to_str().unwrap(), "--out", out.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    let j = json(&out.join("compare.json"));
    let g = &j["groups"][0];
    assert_eq!(g["group"], "hillmoor");
    assert_eq!((g["suspect_first"].as_u64(), g["suspect_second"].as_u64(), g["paired"].as_u64()), (Some(5), Some(1), Some(6)));
    // Second minus first: 1/6 − 5/6 suspect, 0.05 − 0.3 mark share, 0 − 4/6 flips.
    assert!((g["suspect_rate"]["difference"]["estimate"].as_f64().unwrap() + 4.0 / 6.0).abs() < 1e-12);
    assert!((g["mark_share"]["difference"]["estimate"].as_f64().unwrap() + 0.25).abs() < 1e-12);
    assert!((g["flip_rate"]["difference"]["estimate"].as_f64().unwrap() + 4.0 / 6.0).abs() < 1e-12);
    let missing = spurion(&["compare-sweeps", a.to_str().unwrap(), dir.path().join("nothing").to_str().unwrap()]);
    assert_eq!(missing.status.code(), Some(1));
    assert!(stderr(&missing).contains("sweep.jsonl"), "{}", stderr(&missing));
}
