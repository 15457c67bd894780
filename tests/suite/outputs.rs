//! Which output of a many-output model is explained (issue 24): the only one, else the one
//! shaped like class scores ([1, C], C the feed card's label count when it has labels), else a
//! refusal that lists the outputs and names `--output` and the feed card's `[output] name`. An
//! intermediate tensor listed first is never explained silently. Fixtures: three_outputs.onnx,
//! two_outputs.onnx, two_heads.onnx from tests/reference/make_method_fixtures.py.

use std::process::{Command, Output};

use ndarray::{Array1, ArrayD, IxDyn};
use spurion::feed::FeedCard;
use spurion::model::{LoadOptions, Model, Tap};

use crate::common::fixture;

fn load(name: &str, output: Option<&str>, classes: Option<usize>) -> anyhow::Result<Model> {
    let opts = LoadOptions { output: output.map(str::to_string), classes, ..Default::default() };
    Model::load(&fixture(&format!("methods/{name}")), &opts)
}

fn x() -> ArrayD<f32> {
    ArrayD::from_shape_fn(IxDyn(&[1, 3, 8, 8]), |i| ((i[1] * 64 + i[2] * 8 + i[3]) as f32 * 0.37).sin())
}

fn spurion(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_spurion")).args(args).output().expect("run spurion")
}

#[test]
fn the_class_shaped_output_is_picked_past_an_intermediate_listed_first() {
    let m = load("two_outputs.onnx", None, None).unwrap();
    assert_eq!(m.output_name(), "logits");
    assert_eq!(m.output_len(), 10, "not the 1×32×1×1 features listed first");
    let info = m.info();
    assert_eq!(info.outputs.iter().map(|o| o.name.as_str()).collect::<Vec<_>>(), ["features", "logits"]);
    assert_eq!(info.scored_output, "logits");
    // The scored values are the logits: the same as asking for them by name, and gradients
    // run through the chosen output.
    let named = load("two_outputs.onnx", Some("logits"), None).unwrap();
    assert_eq!(m.forward(&x(), Tap::Output).unwrap(), named.forward(&x(), Tap::Output).unwrap());
    let g = m.gradient(&x(), Tap::Output, &|v: &Array1<f32>| Array1::from_shape_fn(v.len(), |i| (i == 3) as u8 as f32)).unwrap();
    assert!(g.grad.iter().any(|v| *v != 0.0));
    // The intermediate only when named.
    let f = load("two_outputs.onnx", Some("features"), None).unwrap();
    assert_eq!(f.output_len(), 32);
}

#[test]
fn two_class_shaped_outputs_are_refused_with_the_ways_to_choose() {
    for classes in [None, Some(10)] {
        let e = format!("{:#}", load("three_outputs.onnx", None, classes).err().expect("ambiguous outputs loaded"));
        for want in ["'logits'", "'probs'", "'features' [1, 32, 1, 1]", "--output NAME", "[output]"] {
            assert!(e.contains(want), "the refusal lacks {want}: {e}");
        }
    }
    let p = load("three_outputs.onnx", Some("probs"), None).unwrap();
    assert!(p.ends_in_softmax(), "the softmax output, named, is scored with its logits before it");
    let e = format!("{:#}", load("three_outputs.onnx", Some("score"), None).err().unwrap());
    assert!(e.contains("no output named 'score'") && e.contains("'logits' [1, 10]"), "{e}");
}

#[test]
fn the_feed_cards_label_count_picks_among_heads() {
    assert!(load("two_heads.onnx", None, None).is_err(), "two heads and no label count: ambiguous");
    assert_eq!(load("two_heads.onnx", None, Some(5)).unwrap().output_name(), "b");
    assert_eq!(load("two_heads.onnx", None, Some(10)).unwrap().output_name(), "a");
    let e = format!("{:#}", load("two_heads.onnx", None, Some(7)).err().unwrap());
    assert!(e.contains("none is shaped like class scores") && e.contains("7 labels"), "{e}");
}

#[test]
fn the_command_line_and_the_feed_card_choose_an_output() {
    let dir = tempfile::tempdir().unwrap();
    let model = dir.path().join("m.onnx");
    std::fs::copy(fixture("methods/three_outputs.onnx"), &model).unwrap();
    let xp = dir.path().join("x.npy");
    spurion::feed::write_tensor(&xp, &x()).unwrap();
    let (m, xs) = (model.to_str().unwrap(), xp.to_str().unwrap());
    let o = spurion(&["predict", "--model", m, "--tensor", xs]);
    assert!(!o.status.success());
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("--output NAME"), "{err}");
    let o = spurion(&["predict", "--model", m, "--tensor", xs, "--output", "logits", "--json"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    // The sidecar card names the output; explain records it in reading.json.
    std::fs::write(FeedCard::sidecar_path(&model), "[input]\nchannels = 3\nheight = 8\nwidth = 8\n\n[output]\nname = \"probs\"\n").unwrap();
    let out = dir.path().join("r");
    let o = spurion(&["explain", "--model", m, "--tensor", xs, "--method", "gradient", "--score", "raw", "--out", out.to_str().unwrap(), "-q"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let j: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(out.join("reading.json")).unwrap()).unwrap();
    assert_eq!(j["model_output"], "probs");
    let o = spurion(&["explain", "--model", m, "--tensor", xs, "--method", "gradient", "--output", "logits", "--out", out.to_str().unwrap(), "-q"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let j: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(out.join("reading.json")).unwrap()).unwrap();
    assert_eq!(j["model_output"], "logits", "--output wins over the card");
    // A card naming another output than the one loaded is an error, not a silent switch.
    let loaded = Model::load(&model, &LoadOptions { output: Some("logits".into()), ..Default::default() }).unwrap();
    let e = format!("{:#}", FeedCard::for_loaded(&loaded).err().expect("card and model disagree"));
    assert!(e.contains("names output 'probs'") && e.contains("'logits'"), "{e}");
    let o = spurion(&["info", "--model", m, "--output", "logits"]);
    let text = String::from_utf8_lossy(&o.stdout);
    assert!(o.status.success() && text.contains("logits  [1, 10]  (scored)"), "{text}");
}
