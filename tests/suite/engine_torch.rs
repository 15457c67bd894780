//! Whole networks against a general autodiff library: forward outputs and input gradients of
//! eight small members of the usual classifier families (ResNet, MobileNet v2/v3, EfficientNet,
//! DenseNet, SqueezeNet, VGG, and one with the remaining activations and resize ops), exported
//! with both of PyTorch's ONNX exporters at opsets 11–20, and of six built from torchvision's own
//! classes at small sizes (ViT at opsets 17 and 16, that is layer normalisation as one op and
//! written out; Swin with shifted windows; Swin V2; ConvNeXt; MaxViT).
//!
//! Reference: PyTorch 2.15.0 autograd on a float64 copy of each network, committed by
//! tests/reference/torch_grad_fixtures.py (see tests/fixtures/torch/manifest.json for versions,
//! exporters, opsets and op types). spurion computes in float32; the bars are 1e-4 relative
//! (largest coordinate error over the largest reference coordinate; issue 11) and 1e-5 relative
//! L2 (issue 24).

use std::path::PathBuf;

use ndarray::{Array1, ArrayD};
use ndarray_npy::ReadNpyExt;
use serde_json::Value;
use spurion::model::{LoadOptions, Model, Tap};

fn dir() -> PathBuf {
    crate::common::fixture("torch")
}

fn read64(name: &str) -> ArrayD<f64> {
    let f = std::fs::File::open(dir().join(name)).unwrap_or_else(|e| panic!("{name}: {e}"));
    ArrayD::<f64>::read_npy(f).unwrap_or_else(|e| panic!("{name}: {e}"))
}

fn rel(a: &[f64], b: &[f64]) -> f64 {
    let scale = b.iter().fold(1e-12f64, |m, v| m.max(v.abs()));
    a.iter().zip(b).fold(0.0f64, |m, (x, y)| m.max((x - y).abs())) / scale
}

/// ‖a − b‖ / ‖b‖.
fn rel_l2(a: &[f64], b: &[f64]) -> f64 {
    let num: f64 = a.iter().zip(b).map(|(x, y)| (x - y).powi(2)).sum();
    let den: f64 = b.iter().map(|y| y * y).sum();
    (num / den.max(1e-300)).sqrt()
}

#[test]
fn family_networks_match_pytorch_autograd() {
    let manifest: Value =
        serde_json::from_str(&std::fs::read_to_string(dir().join("manifest.json")).unwrap()).unwrap();
    let nets = manifest["nets"].as_object().expect("nets");
    assert_eq!(nets.len(), 14, "the fixture set has fourteen networks");
    let mut failures = vec![];
    // Whether some network runs convolutions by Winograd both in the taped forward and in the
    // reverse pass, so that this comparison covers them.
    let (mut exercised, mut winograd) = (false, vec![]);
    for (name, meta) in nets {
        let target = meta["target"].as_u64().unwrap() as usize;
        let m = Model::load(&dir().join(format!("{name}.onnx")), &LoadOptions::default())
            .unwrap_or_else(|e| panic!("{name}: {e:#}"));
        let x = spurion::feed::read_tensor(&dir().join(format!("{name}.x.npy"))).unwrap();
        let want_y = read64(&format!("{name}.logits.npy"));
        let want_g = read64(&format!("{name}.grad.npy"));
        let y = m.forward(&x, Tap::Output).unwrap_or_else(|e| panic!("{name}: {e:#}"));
        let n = y.len();
        let g = m
            .gradient(&x, Tap::Output, &move |_: &Array1<f32>| Array1::from_shape_fn(n, |i| (i == target) as u8 as f32))
            .unwrap_or_else(|e| panic!("{name}: gradient: {e:#}"));
        assert_eq!(g.grad.shape(), want_g.shape(), "{name}: gradient shape");
        let (wf, wr) = m.winograd_convolutions().unwrap();
        winograd.push(format!("{name} {wf}/{wr}"));
        exercised |= wf > 0 && wr > 0;
        let ey = rel(&y.iter().map(|v| *v as f64).collect::<Vec<_>>(), want_y.as_slice().unwrap());
        let got_g: Vec<f64> = g.grad.iter().map(|v| *v as f64).collect();
        let eg = rel(&got_g, want_g.as_slice().unwrap());
        let eg2 = rel_l2(&got_g, want_g.as_slice().unwrap());
        eprintln!(
            "{name:13} {:6} opset {:2}  output rel {ey:.1e}  gradient rel {eg:.1e}, relative L2 {eg2:.1e}",
            meta["exporter"].as_str().unwrap(),
            meta["opset"]
        );
        // The gradient must not be trivially small either: a zero gradient would "match" nothing.
        let gmax = want_g.iter().fold(0f64, |m, v| m.max(v.abs()));
        assert!(gmax > 1e-6, "{name}: reference gradient is ~0, the fixture checks nothing");
        if ey > 1e-4 || eg > 1e-4 || eg2 > 1e-5 {
            failures.push(format!("{name}: output rel {ey:.2e}, gradient rel {eg:.2e}, relative L2 {eg2:.2e}"));
        }
    }
    assert!(
        failures.is_empty(),
        "beyond 1e-4 relative (or 1e-5 relative L2) of PyTorch autograd:\n{}",
        failures.join("\n")
    );
    eprintln!("Winograd convolutions (taped forward / reverse): {}", winograd.join(", "));
    assert!(exercised, "no network runs a Winograd convolution: {}", winograd.join(", "));
}
