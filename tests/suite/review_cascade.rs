//! The randomisation cascade (Adebayo et al. 2018) on small networks: which nodes are layers,
//! how each parameter is re-drawn (He et al. 2015 for weights; the usual starting values for
//! biases and normalisation, common practice), and that a tiny network's maps change as its
//! layers are re-drawn.

use spurion::control::Control;
use spurion::feed::read_tensor;
use spurion::methods::{self, Baseline, Input, Method, Request, ScoreKind, TargetSpec};
use spurion::model::{LoadOptions, Model, Tap, read_proto};
use spurion::review::redraw::{Role, layers, redraw, values};
use spurion::review::{Case, randomise};

use crate::common::fixture;

fn sd(v: &[f32]) -> f64 {
    let n = v.len() as f64;
    let m = v.iter().map(|x| *x as f64).sum::<f64>() / n;
    (v.iter().map(|x| (*x as f64 - m).powi(2)).sum::<f64>() / (n - 1.0)).sqrt()
}

#[test]
fn layers_and_their_initialisers() {
    // norm_net.onnx (tests/reference/make_review_fixtures.py): Conv → BatchNormalization → Relu →
    // Flatten → MatMul with a constant weight → Add of a constant.
    let (proto, _) = read_proto(&fixture("review/norm_net.onnx")).unwrap();
    let ls = layers(&proto);
    let summary: Vec<(String, Vec<(String, Role)>)> =
        ls.iter().map(|l| (l.label(), l.params.iter().map(|p| (p.name.clone(), p.role)).collect())).collect();
    assert_eq!(
        summary,
        vec![
            ("Conv conv".to_string(), vec![("cw".to_string(), Role::Weight { fan_in: 9 })]),
            (
                "BatchNormalization norm".to_string(),
                vec![("gamma".into(), Role::Scale), ("beta".into(), Role::Shift), ("mean".into(), Role::Mean), ("var".into(), Role::Variance)]
            ),
            ("MatMul dense".to_string(), vec![("mw".to_string(), Role::Weight { fan_in: 192 })]),
        ],
        "the Add of a constant has no weight: not a layer"
    );
    let all = redraw(&proto, &ls, 7).unwrap();
    assert!(values(&all, "gamma").unwrap().iter().all(|v| *v == 1.0));
    assert!(values(&all, "beta").unwrap().iter().all(|v| *v == 0.0));
    assert!(values(&all, "mean").unwrap().iter().all(|v| *v == 0.0));
    assert!(values(&all, "var").unwrap().iter().all(|v| *v == 1.0));
    // He-normal spread √(2/fan_in); 384 draws put the sample sd within 15 % (common practice).
    let mw = values(&all, "mw").unwrap();
    assert!((sd(&mw) / (2.0f64 / 192.0).sqrt() - 1.0).abs() < 0.15, "sd {}", sd(&mw));
    assert_eq!(values(&all, "mb"), values(&proto, "mb"), "the Add's constant is left alone");
    // Each layer draws from its own stream: re-drawn alone or with the others, the same values.
    let top_only = redraw(&proto, &ls[2..], 7).unwrap();
    assert_eq!(values(&top_only, "mw"), values(&all, "mw"));
    assert_eq!(values(&top_only, "cw"), values(&proto, "cw"), "layers not chosen keep their weights");
    assert_ne!(values(&redraw(&proto, &ls[2..], 8).unwrap(), "mw"), values(&all, "mw"), "another seed, other weights");
    // The re-drawn model loads and computes something else.
    let path = fixture("review/norm_net.onnx");
    let opts = LoadOptions::default();
    let (a, b) = (Model::load(&path, &opts).unwrap(), Model::load_proto(&path, &all, &opts).unwrap());
    assert_ne!(a.sha256(), b.sha256());
    let x = ndarray::ArrayD::from_elem(ndarray::IxDyn(&[1, 1, 8, 8]), 0.3f32);
    assert_ne!(a.forward(&x, Tap::Output).unwrap(), b.forward(&x, Tap::Output).unwrap());
}

#[test]
fn a_tiny_networks_maps_change_as_its_layers_are_re_drawn() {
    let model = Model::load(&fixture("methods/small_cnn.onnx"), &LoadOptions::default()).unwrap();
    let input = Input::tensor(read_tensor(&fixture("methods/x16.npy")).unwrap(), "x16");
    let req = Request { method: Method::Gradient, baseline: Baseline::Black, target: TargetSpec::Index(0), score: ScoreKind::Logits };
    let reading = methods::explain(&model, None, &input, &req, &Control::new()).unwrap();
    let case = Case::new(&model, None, &input, &req, &reading).unwrap();
    let ctl = Control::new();
    let c = randomise::cascade(&case, &reading, &randomise::CascadeSettings::default(), &ctl).unwrap();
    assert_eq!(ctl.progress(), (3, 3), "one unit per map");
    let mc = &c.methods[0];
    assert_eq!(mc.steps.iter().map(|s| s.layers_randomised).collect::<Vec<_>>(), vec![1, 2, 3]);
    for st in &mc.steps {
        let moved = st.map.iter().zip(mc.original.iter()).map(|(a, b)| (a - b).abs()).fold(0.0f32, f32::max);
        assert!(moved > 1e-4, "{} layers re-drawn: the map must change", st.layers_randomised);
        assert!(st.spearman.unwrap() < 0.99, "{} layers re-drawn: ρ {:?}", st.layers_randomised, st.spearman);
    }
    // Whether the last ρ crosses the flag's threshold decides the flag, and the verdict says so.
    let last = mc.steps.last().unwrap().spearman.unwrap();
    assert_eq!(mc.independent, last >= c.threshold);
    assert!(mc.verdict.contains("all 3 layers"), "{}", mc.verdict);
    // At most one layer: one step, and the verdict says how far the cascade went.
    let one = randomise::cascade(&case, &reading, &randomise::CascadeSettings { layers: Some(1), ..Default::default() }, &ctl).unwrap();
    assert_eq!(one.methods[0].steps.len(), 1);
    assert!(one.methods[0].verdict.contains("top 1 of 3"), "{}", one.methods[0].verdict);
    assert_eq!(one.methods[0].steps[0].map, mc.steps[0].map, "the same seed re-draws the same top layer");
}

#[test]
fn a_cancel_stops_the_cascade() {
    let model = Model::load(&fixture("methods/small_cnn.onnx"), &LoadOptions::default()).unwrap();
    let input = Input::tensor(read_tensor(&fixture("methods/x16.npy")).unwrap(), "x16");
    let req = Request { method: Method::Gradient, baseline: Baseline::Black, target: TargetSpec::Top, score: ScoreKind::Logits };
    let reading = methods::explain(&model, None, &input, &req, &Control::new()).unwrap();
    let case = Case::new(&model, None, &input, &req, &reading).unwrap();
    let ctl = Control::new();
    ctl.cancel();
    let e = randomise::cascade(&case, &reading, &Default::default(), &ctl).unwrap_err();
    assert!(spurion::model::is_cancelled(&e), "{e:#}");
}
