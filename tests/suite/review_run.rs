//! The whole review on a model spurion has no reverse pass for (tests/fixtures/review/
//! no_reverse.onnx ends in Atan; made by tests/reference/make_review_fixtures.py): the tests that
//! need only forwards run (occlusion's curves and cascade, the Shapley values), the one that
//! needs gradients is listed as not run with its reason, and review.json says so.

use std::sync::Mutex;

use ndarray::{ArrayD, IxDyn};
use spurion::control::Control;
use spurion::methods::{Baseline, Input, Method, Request, Rule, ScoreKind, TargetSpec};
use spurion::model::{LoadOptions, Model};
use spurion::report::ReviewFile;
use spurion::review::curves::CurveSettings;
use spurion::review::shapley::{Players, ShapleySettings};
use spurion::review::{Phase, Settings, run};

use crate::common::fixture;

#[test]
fn a_model_without_a_reverse_pass_gets_every_forwards_only_test() {
    let model = Model::load(&fixture("review/no_reverse.onnx"), &LoadOptions::default()).unwrap();
    assert!(model.gradient_ready().is_err(), "the fixture must lack a reverse step");
    let x = ArrayD::from_shape_fn(IxDyn(&[1, 1, 8, 8]), |i| ((i[2] * 8 + i[3]) % 5) as f32 / 4.0);
    let input = Input::tensor(x, "x");
    let req = Request { method: Method::Occlusion { window: 2, stride: 2 }, baseline: Baseline::Black, target: TargetSpec::Index(0), score: ScoreKind::Raw };
    let settings = Settings {
        curves: Some(CurveSettings { steps: 4, random_orders: 2, ..Default::default() }),
        shapley: Some(ShapleySettings { players: Players::Grid(2), permutations: 24, seed: 0 }),
        ..Settings::default()
    };
    let phases = Mutex::new(vec![]);
    let r = run(&model, None, &input, &req, &settings, &Control::new(), &|p| phases.lock().unwrap().push(p)).unwrap();
    assert_eq!(
        *phases.lock().unwrap(),
        vec![Phase::Reading, Phase::Curves, Phase::Randomisation, Phase::Convergence, Phase::Shapley]
    );
    assert!(r.curves.is_some());
    let cascade = r.cascade.as_ref().expect("occlusion needs no gradients");
    assert_eq!(cascade.methods[0].steps.len(), 2, "a Conv and a Gemm");
    let sh = r.shapley.as_ref().unwrap();
    assert!(sh.exact);
    assert!((sh.sum - (sh.score_input - sh.score_baseline)).abs() < 1e-9);
    assert!(r.convergence.is_none());
    assert_eq!(r.skipped.len(), 1, "{:?}", r.skipped);
    assert_eq!(r.skipped[0].test, "convergence");
    assert!(r.skipped[0].reason.contains("Atan"), "the reason names the op: {}", r.skipped[0].reason);
    let j = ReviewFile::new(&r, Rule::Midpoint, None).to_json().unwrap();
    assert!(j["convergence"].is_null() && j["skipped"][0]["test"] == "convergence");
    assert!(j["shapley"]["cells"].as_array().unwrap().len() == 4);
}
