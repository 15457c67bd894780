//! Per-op reverse steps against central finite differences.
//!
//! Oracle: central differences of the very same forward (tract), per input coordinate, for a
//! random cotangent — the textbook check of a vector–Jacobian product (common practice). The
//! graphs are the one-op ONNX files made by tests/reference/engine_op_fixtures.py (onnx 1.23.2),
//! and each fixture also asserts that tract's simplified graph holds the op family it is meant to
//! exercise (listed in ops.json).

use std::path::PathBuf;

use ndarray::{Array1, ArrayD, IxDyn};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};
use spurion::model::{LoadOptions, Model, Tap};

fn dir() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/engine/ops")
}

fn randn(shape: &[usize], rng: &mut ChaCha8Rng) -> ArrayD<f32> {
    let n: usize = shape.iter().product();
    let v: Vec<f32> = (0..n).map(|_| StandardNormal.sample(rng)).collect();
    ArrayD::from_shape_vec(IxDyn(shape), v).unwrap()
}

fn score(m: &Model, x: &ArrayD<f32>, c: &Array1<f32>) -> f64 {
    let y = m.forward(x, Tap::Output).unwrap();
    y.iter().zip(c).map(|(a, b)| *a as f64 * *b as f64).sum()
}

/// Largest coordinate error of the reverse-mode gradient against central differences, relative
/// to the gradient's largest entry. Each coordinate takes the better of two step sizes, so a
/// kink (relu, max) that happens to lie within one step does not fail a correct gradient.
fn check(name: &str, shape: &[usize], expect: &[String]) -> Result<f64, String> {
    let m = Model::load(&dir().join(format!("{name}.onnx")), &LoadOptions::default())
        .map_err(|e| format!("{e:#}"))?;
    let info = m.info();
    for op in expect {
        if !info.ops.iter().any(|o| &o.op == op) {
            return Err(format!("expected op {op} in the simplified graph, got {:?}",
                info.ops.iter().map(|o| o.op.clone()).collect::<Vec<_>>()));
        }
    }
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let x = randn(shape, &mut rng);
    let c: Array1<f32> = Array1::from_vec(randn(&[m.output_len()], &mut rng).into_raw_vec_and_offset().0);
    let cc = c.clone();
    let g = m.gradient(&x, Tap::Output, &move |_o: &Array1<f32>| cc.clone()).map_err(|e| format!("{e:#}"))?;
    let scale = g.grad.iter().fold(1e-3f32, |a, b| a.max(b.abs())) as f64;
    let mut worst = 0f64;
    for i in 0..x.len() {
        let mut best = f64::INFINITY;
        for h in [1e-2f32, 1e-3] {
            let mut xp = x.clone();
            xp.as_slice_mut().unwrap()[i] += h;
            let mut xm = x.clone();
            xm.as_slice_mut().unwrap()[i] -= h;
            let fd = (score(&m, &xp, &c) - score(&m, &xm, &c)) / (2.0 * h as f64);
            let err = (fd - g.grad.as_slice().unwrap()[i] as f64).abs() / scale;
            best = best.min(err);
        }
        worst = worst.max(best);
    }
    Ok(worst)
}

#[test]
fn every_op_reverse_step_matches_central_differences() {
    let manifest: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir().join("ops.json")).unwrap()).unwrap();
    let mut failures = vec![];
    let mut count = 0;
    for (name, spec) in manifest.as_object().unwrap() {
        let shape: Vec<usize> =
            spec["input_shape"].as_array().unwrap().iter().map(|v| v.as_u64().unwrap() as usize).collect();
        let expect: Vec<String> =
            spec["expect"].as_array().unwrap().iter().map(|v| v.as_str().unwrap().to_string()).collect();
        count += 1;
        match check(name, &shape, &expect) {
            // 2e-3 of the largest gradient entry: float32 central differences at h = 1e-2..1e-3
            // are good to about 1e-4..1e-3 here.
            Ok(err) if err < 2e-3 => {}
            Ok(err) => failures.push(format!("{name}: relative error {err:.2e}")),
            Err(e) => failures.push(format!("{name}: {e}")),
        }
    }
    assert!(count > 70, "only {count} fixtures");
    assert!(failures.is_empty(), "{} of {count} fixtures failed:\n{}", failures.len(), failures.join("\n"));
}
