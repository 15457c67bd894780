//! The incremental occlusion (src/model/occlude.rs) against plain forwards of the occluded
//! tensors, window by window, on the family networks of tests/fixtures/torch (ResNet, MobileNet
//! v2/v3, EfficientNet, DenseNet, SqueezeNet, VGG, mixed) and the sample models: the same
//! outputs within float32 rounding, and the crops really in use where the graph allows them.

use ndarray::{ArrayD, Slice};
use spurion::control::Control;
use spurion::feed::read_tensor;
use spurion::methods::window_starts;
use spurion::model::{LoadOptions, Model, Tap};

fn occluded(x: &ArrayD<f32>, xb: &ArrayD<f32>, y0: usize, x0: usize, w: usize) -> ArrayD<f32> {
    let pick = |ax: ndarray::AxisDescription| match ax.axis.index() {
        2 => Slice::from(y0..(y0 + w).min(ax.len)),
        3 => Slice::from(x0..(x0 + w).min(ax.len)),
        _ => Slice::from(..),
    };
    let mut t = x.clone();
    t.slice_each_axis_mut(pick).assign(&xb.slice_each_axis(pick));
    t
}

fn check(name: &str, m: &Model, x: &ArrayD<f32>, window: usize, stride: usize, tap: Tap, want_crops: bool) {
    let (h, w) = (x.shape()[2], x.shape()[3]);
    let wins: Vec<(usize, usize)> = window_starts(h, window, stride)
        .into_iter()
        .flat_map(|y| window_starts(w, window, stride).into_iter().map(move |x| (y, x)))
        .collect();
    // A baseline unlike the input everywhere, so every window changes something.
    let xb = x.mapv(|v| 0.5 - v);
    let nodes = m.incremental_occlusion_nodes(x, window, &wins, tap).unwrap();
    if want_crops {
        assert!(nodes > 0, "{name}: the incremental occlusion did not engage");
    }
    let got = m.occluded_outputs(x, &xb, [2, 3], window, &wins, tap, &Control::new()).unwrap();
    let mut worst = 0f32;
    for (&(y0, x0), g) in wins.iter().zip(&got) {
        let want = m.forward(&occluded(x, &xb, y0, x0, window), tap).unwrap();
        let scale = want.iter().fold(1e-6f32, |a, v| a.max(v.abs()));
        let err = g.iter().zip(&want).fold(0f32, |a, (p, q)| a.max((p - q).abs())) / scale;
        worst = worst.max(err);
    }
    eprintln!("{name:22} {} windows, {nodes:3} nodes on crops, worst rel {worst:.1e}", wins.len());
    assert!(worst < 1e-5, "{name}: incremental occlusion differs from plain forwards by {worst:.2e}");
}

#[test]
fn incremental_occlusion_equals_plain_forwards() {
    let dir = crate::common::fixture("torch");
    for name in ["resnet", "mobilenet2", "mobilenet3", "efficientnet", "densenet", "squeezenet", "vgg", "mixed"] {
        let m = Model::load(&dir.join(format!("{name}.onnx")), &LoadOptions::default()).unwrap();
        let x = read_tensor(&dir.join(format!("{name}.x.npy"))).unwrap();
        // Windows of 8 every 5 pixels on 40×40: edges, overlaps and a ragged last window.
        check(name, &m, &x, 8, 5, Tap::Output, name != "mixed");
    }
    // The transformer and layer-norm families (32×32): attention and global token mixing sit
    // in the tail, which runs whole; the patch or stem convolution still runs on crops.
    for name in ["vit", "swin", "swin2", "convnext", "maxvit"] {
        let m = Model::load(&dir.join(format!("{name}.onnx")), &LoadOptions::default()).unwrap();
        let x = read_tensor(&dir.join(format!("{name}.x.npy"))).unwrap();
        check(name, &m, &x, 8, 5, Tap::Output, true);
    }
    // A graph with nothing to crop (flatten and gemm) takes the plain-forward path.
    let linear = Model::load(&crate::common::fixture("methods/linear.onnx"), &LoadOptions::default()).unwrap();
    let x = ArrayD::from_shape_fn(ndarray::IxDyn(&[1, 1, 8, 8]), |i| ((i[2] * 8 + i[3]) as f32 * 0.37).sin());
    assert_eq!(linear.incremental_occlusion_nodes(&x, 3, &[(0, 0)], Tap::Output).unwrap(), 0);
    check("linear (plain forwards)", &linear, &x, 3, 2, Tap::Output, false);
    let samples = crate::common::root().join("sample-models");
    for name in ["shortcut", "shortcut-rgb224"] {
        let m = Model::load(&samples.join(format!("{name}.onnx")), &LoadOptions::default()).unwrap();
        let x = read_tensor(&samples.join(format!("recorded/{name}.0005-hillmoor.npy"))).unwrap();
        let tap = if m.ends_in_softmax() { Tap::BeforeSoftmax } else { Tap::Output };
        check(name, &m, &x, 24, 40, tap, true);
    }
}
