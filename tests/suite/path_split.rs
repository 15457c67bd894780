//! Gradient sums along a straight path with the affine head cut off (src/grad/split.rs) against
//! the plain sum of whole gradients at every point, on the family networks of tests/fixtures/torch
//! and the sample models. The two differ by float32 rounding only (measured: relative L2
//! differences of 5e-8 to 1.1e-7). On a ReLU network a rounding-sized change could in principle
//! flip a unit that sits exactly at zero at one point; none does on these fixed inputs, so the
//! bound stays at rounding size.

use ndarray::ArrayD;
use spurion::control::Control;
use spurion::feed::read_tensor;
use spurion::model::{LoadOptions, Model, Tap};

/// ‖a − b‖ / ‖b‖.
fn rel_l2(a: &ArrayD<f32>, b: &ArrayD<f32>) -> f64 {
    let num: f64 = a.iter().zip(b).map(|(p, q)| ((p - q) as f64).powi(2)).sum();
    let den: f64 = b.iter().map(|q| (*q as f64).powi(2)).sum();
    (num / den.max(1e-30)).sqrt()
}

/// Returns the relative L2 difference between the split and the plain sums over 8 midpoint
/// nodes from `xb` to `x`, and the number of nodes the head held.
fn compare(m: &Model, x: &ArrayD<f32>, xb: &ArrayD<f32>, tap: Tap) -> (f64, usize) {
    let nodes: Vec<(f64, f64)> = (0..8).map(|k| ((k as f64 + 0.5) / 8.0, 1.0 / 8.0)).collect();
    let d = x - xb;
    let seed = |v: &ndarray::Array1<f32>| {
        // The top class's score, as a reading with default settings picks it.
        let top = v.iter().enumerate().fold(0, |b, (i, s)| if *s > v[b] { i } else { b });
        let mut s = ndarray::Array1::zeros(v.len());
        s[top] = 1.0;
        s
    };
    let got = m.gradient_path_sum(xb, &d, &nodes, tap, &seed, &Control::new()).unwrap();
    let pts: Vec<ArrayD<f32>> = nodes.iter().map(|(a, _)| xb + &(&d * *a as f32)).collect();
    let mut want = ArrayD::<f32>::zeros(x.raw_dim());
    for (g, (_, w)) in m.gradient_many(&pts, tap, &seed, &Control::new()).unwrap().iter().zip(&nodes) {
        want.scaled_add(*w as f32, &g.grad);
    }
    (rel_l2(&got, &want), m.affine_head_len(tap).unwrap())
}

#[test]
fn path_sums_with_the_affine_head_cut_off_equal_whole_gradients() {
    let dir = crate::common::fixture("torch");
    for name in [
        "resnet", "mobilenet2", "mobilenet3", "efficientnet", "densenet", "squeezenet", "vgg", "mixed", "vit", "swin", "swin2",
        "convnext", "maxvit",
    ] {
        let m = Model::load(&dir.join(format!("{name}.onnx")), &LoadOptions::default()).unwrap();
        let x = read_tensor(&dir.join(format!("{name}.x.npy"))).unwrap();
        let xb = x.mapv(|v| 0.25 * v - 0.1);
        let (err, head) = compare(&m, &x, &xb, Tap::Output);
        eprintln!("{name:14} head of {head} nodes, relative L2 difference {err:.1e}");
        assert!(head > 0, "{name}: every family network begins with a convolution");
        assert!(err < 1e-5, "{name}: split and plain path sums differ by {err:.2e}");
    }
    let samples = crate::common::root().join("sample-models");
    for name in ["shortcut", "control", "shortcut-rgb224"] {
        let m = Model::load(&samples.join(format!("{name}.onnx")), &LoadOptions::default()).unwrap();
        let x = read_tensor(&samples.join(format!("recorded/{name}.0005-hillmoor.npy"))).unwrap();
        let tap = if m.ends_in_softmax() { Tap::BeforeSoftmax } else { Tap::Output };
        let (err, head) = compare(&m, &x, &x.mapv(|_| 0.0), tap);
        eprintln!("{name:14} head of {head} nodes, relative L2 difference {err:.1e}");
        assert!(head > 0 && err < 1e-5, "{name}: head {head}, difference {err:.2e}");
    }
    // A graph that is affine all the way (flatten, gemm, bias) keeps its last op in the rest.
    let linear = Model::load(&crate::common::fixture("methods/linear.onnx"), &LoadOptions::default()).unwrap();
    let x = ArrayD::from_shape_fn(ndarray::IxDyn(&[1, 1, 8, 8]), |i| ((i[2] * 8 + i[3]) as f32 * 0.37).sin());
    let (err, head) = compare(&linear, &x, &x.mapv(|_| 0.0), Tap::Output);
    eprintln!("linear         head of {head} nodes, relative L2 difference {err:.1e}");
    assert!(err < 1e-6, "linear: difference {err:.2e}");
}
