//! The command line as a script would use it: files written, fields present, and clean errors
//! with exit code 1 on bad input.

use std::process::{Command, Output};

use crate::common::fixture;

fn spurion(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_spurion")).args(args).output().expect("run spurion")
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

#[test]
fn explain_with_a_tensor_writes_the_four_files() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("r");
    let model = fixture("methods/small_cnn.onnx");
    let x = fixture("methods/x16.npy");
    let o = spurion(&[
        "explain", "--model", model.to_str().unwrap(), "--tensor", x.to_str().unwrap(),
        "--method", "integrated-gradients", "--baseline", "blur:2", "--steps", "32", "--target", "1",
        "--out", out.to_str().unwrap(), "--quiet",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    for f in ["reading.json", "map.npy", "map.png", "overlay.png"] {
        assert!(out.join(f).exists(), "{f} missing");
    }
    let j: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(out.join("reading.json")).unwrap()).unwrap();
    for k in ["method", "baseline", "steps", "target", "score_input", "score_baseline", "attribution_sum", "completeness_gap", "elapsed_ms", "model_sha256"] {
        assert!(j.get(k).is_some(), "reading.json lacks {k}: {j}");
    }
    assert_eq!(j["method"], "integrated-gradients");
    assert_eq!(j["baseline"], "blur:2");
    assert_eq!(j["steps"], 32);
    assert_eq!(j["target"]["index"], 1);
    // sha256 of the file, as sha256sum would print it.
    use sha2::Digest;
    let want = format!("{:x}", sha2::Sha256::digest(std::fs::read(&model).unwrap()));
    assert_eq!(j["model_sha256"], want);
    // map.npy has the tensor's shape and sums to attribution_sum.
    let m = spurion::feed::read_tensor(&out.join("map.npy")).unwrap();
    assert_eq!(m.shape(), &[1, 1, 16, 16]);
    let s: f64 = m.iter().map(|v| *v as f64).sum();
    assert!((s - j["attribution_sum"].as_f64().unwrap()).abs() < 1e-4 * s.abs().max(1.0));
    // Completeness: sum ≈ score_input − score_baseline (Sundararajan et al. 2017).
    let d = j["score_input"].as_f64().unwrap() - j["score_baseline"].as_f64().unwrap();
    assert!((s - d).abs() <= 0.01 * d.abs(), "sum {s} vs difference {d}");
}

#[test]
fn bad_inputs_get_one_clear_paragraph_and_exit_code_one() {
    let dir = tempfile::tempdir().unwrap();
    let model = fixture("methods/small_cnn.onnx");
    let m = model.to_str().unwrap();

    // Truncated ONNX.
    let bytes = std::fs::read(&model).unwrap();
    let trunc = dir.path().join("truncated.onnx");
    std::fs::write(&trunc, &bytes[..bytes.len() / 2]).unwrap();
    let o = spurion(&["info", "--model", trunc.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(1), "{}", stderr(&o));
    assert!(stderr(&o).contains("truncated.onnx"), "{}", stderr(&o));

    // A text file given as an image.
    let txt = dir.path().join("notes.png");
    std::fs::write(&txt, "not an image at all").unwrap();
    let o = spurion(&["predict", "--model", m, "--image", txt.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(1));
    assert!(stderr(&o).contains("notes.png") && stderr(&o).contains("not an image"), "{}", stderr(&o));

    // A tensor of the wrong shape.
    let t = dir.path().join("wrong.npy");
    spurion::feed::write_tensor(&t, &ndarray::ArrayD::zeros(ndarray::IxDyn(&[1, 3, 16, 16]))).unwrap();
    let o = spurion(&["explain", "--model", m, "--tensor", t.to_str().unwrap(), "--quiet"]);
    assert_eq!(o.status.code(), Some(1));
    assert!(stderr(&o).contains("[1, 3, 16, 16]") && stderr(&o).contains("[1, 1, 16, 16]"), "{}", stderr(&o));

    // A model whose output is NaN.
    let nan = fixture("methods/nan.onnx");
    let x8 = dir.path().join("x8.npy");
    spurion::feed::write_tensor(&x8, &ndarray::ArrayD::from_elem(ndarray::IxDyn(&[1, 1, 8, 8]), 0.5)).unwrap();
    let o = spurion(&["predict", "--model", nan.to_str().unwrap(), "--tensor", x8.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(1));
    assert!(stderr(&o).to_lowercase().contains("nan"), "{}", stderr(&o));

    // Unknown baseline and method name the choices.
    let x = fixture("methods/x16.npy");
    let o = spurion(&["explain", "--model", m, "--tensor", x.to_str().unwrap(), "--baseline", "purple", "--quiet"]);
    assert_eq!(o.status.code(), Some(1));
    assert!(stderr(&o).contains("uniform-noise:SEED"), "{}", stderr(&o));
    let o = spurion(&["explain", "--model", m, "--tensor", x.to_str().unwrap(), "--method", "magic", "--quiet"]);
    assert_eq!(o.status.code(), Some(1));
    assert!(stderr(&o).contains("smoothgrad"), "{}", stderr(&o));

    assert!(!stderr(&o).contains("panicked"), "{}", stderr(&o));
}

#[test]
fn a_card_that_disagrees_with_its_model_is_refused_naming_both_shapes() {
    let dir = tempfile::tempdir().unwrap();
    let model = dir.path().join("m.onnx");
    std::fs::copy(fixture("methods/small_cnn.onnx"), &model).unwrap();
    std::fs::write(dir.path().join("m.feed.toml"), "[input]\nchannels = 3\nheight = 16\nwidth = 16\ngray_to_rgb = \"refuse\"\n").unwrap();
    let img = dir.path().join("g.png");
    image::GrayImage::from_pixel(20, 20, image::Luma([90])).save(&img).unwrap();
    let o = spurion(&["predict", "--model", model.to_str().unwrap(), "--image", img.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(1));
    assert!(stderr(&o).contains("[1, 3, 16, 16]"), "{}", stderr(&o));
}

#[test]
fn a_model_with_open_height_and_width_takes_its_size_from_the_tensor_or_image() {
    // dynamic_hw.onnx takes (N, 1, H, W) (tests/reference/make_method_fixtures.py).
    let dir = tempfile::tempdir().unwrap();
    let m = fixture("methods/dynamic_hw.onnx");
    let m = m.to_str().unwrap();
    let x = dir.path().join("x.npy");
    spurion::feed::write_tensor(&x, &ndarray::ArrayD::from_shape_fn(ndarray::IxDyn(&[1, 1, 20, 30]), |i| (i[2] * 30 + i[3]) as f32 / 600.0)).unwrap();
    let o = spurion(&["predict", "--model", m, "--tensor", x.to_str().unwrap(), "--json"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!(v["outputs"].as_array().unwrap().len(), 2);
    let out = dir.path().join("r");
    let o = spurion(&["explain", "--model", m, "--tensor", x.to_str().unwrap(), "--baseline", "black", "--quiet", "--out", out.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    let map = spurion::feed::read_tensor(&out.join("map.npy")).unwrap();
    assert_eq!(map.shape(), &[1, 1, 20, 30], "the map has the tensor's shape");
    // An image (256×256 grey) fixes H and W; the graph fixes the one channel.
    let img = crate::common::root().join("assets/demo/0005-hillmoor.png");
    let o = spurion(&["predict", "--model", m, "--image", img.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    // Nothing to fix them: the error says what to pass.
    let o = spurion(&["info", "--model", m]);
    assert_eq!(o.status.code(), Some(1));
    assert!(stderr(&o).contains("--input-shape") && stderr(&o).contains("feed card"), "{}", stderr(&o));
    // The model may also be named without the flag, as a user first tries; the same refusal.
    let o = spurion(&["info", m]);
    assert_eq!(o.status.code(), Some(1));
    assert!(stderr(&o).contains("--input-shape"), "{}", stderr(&o));
    // With the shape given, both forms print the same description.
    let flag = spurion(&["info", "--model", m, "--input-shape", "1,1,20,30"]);
    let bare = spurion(&["info", m, "--input-shape", "1,1,20,30"]);
    assert!(flag.status.success() && bare.status.success(), "{}{}", stderr(&flag), stderr(&bare));
    assert_eq!(flag.stdout, bare.stdout);
    assert!(String::from_utf8_lossy(&bare.stdout).contains("output"), "{}", String::from_utf8_lossy(&bare.stdout));
}

#[test]
fn values_that_cannot_be_right_are_refused_up_front() {
    let dir = tempfile::tempdir().unwrap();
    let m = fixture("methods/small_cnn.onnx");
    let m = m.to_str().unwrap();
    // A NaN in a tensor: the file and the first bad position are named (the issue this closes
    // saw such a tensor run 1,728 refinement steps and write a NaN map).
    let mut t = ndarray::ArrayD::from_elem(ndarray::IxDyn(&[1, 1, 16, 16]), 0.5f32);
    t[[0, 0, 3, 7]] = f32::NAN;
    let bad = dir.path().join("bad.npy");
    spurion::feed::write_tensor(&bad, &t).unwrap();
    let o = spurion(&["explain", "--model", m, "--tensor", bad.to_str().unwrap(), "--quiet"]);
    assert_eq!(o.status.code(), Some(1), "{}", stderr(&o));
    assert!(stderr(&o).contains("bad.npy") && stderr(&o).contains("[0, 0, 3, 7]"), "{}", stderr(&o));
    // Zero steps or samples are usage errors (exit 2), not silently one.
    let x = fixture("methods/x16.npy");
    for args in [["--steps", "0"], ["--samples", "0"], ["--window", "0"]] {
        let o = spurion(&["explain", "--model", m, "--tensor", x.to_str().unwrap(), args[0], args[1], "--quiet"]);
        assert_eq!(o.status.code(), Some(2), "{args:?}: {}", stderr(&o));
        assert!(stderr(&o).contains(args[0]), "{}", stderr(&o));
    }
}
