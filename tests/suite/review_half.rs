//! A model that reads only the left half of its input (tests/fixtures/review/half.onnx: a Slice
//! of columns 0..8 before everything else; made by tests/reference/make_review_fixtures.py).
//! Whatever its weights, its score does not depend on the right half, so by construction:
//! - every gradient map, and the map of every re-drawn model in the randomisation cascade
//!   (Adebayo et al. 2018), is exactly 0 on the right half, while the left half changes;
//! - every Shapley value (Shapley 1953) of a right-half cell is exactly 0: adding the cell to any
//!   coalition leaves the model's input on the left half, bit for bit, as it was.

use ndarray::{ArrayD, IxDyn, s};
use spurion::control::Control;
use spurion::methods::{self, Baseline, Input, Method, Request, Rule, ScoreKind, TargetSpec};
use spurion::model::{LoadOptions, Model};
use spurion::review::shapley::{Players, ShapleySettings, grid_players};
use spurion::review::{Case, randomise};

use crate::common::fixture;

fn half() -> (Model, Input) {
    let model = Model::load(&fixture("review/half.onnx"), &LoadOptions::default()).unwrap();
    let x = ArrayD::from_shape_fn(IxDyn(&[1, 1, 16, 16]), |i| (((i[2] * 16 + i[3]) * 53) % 97) as f32 / 97.0);
    (model, Input::tensor(x, "x"))
}

#[test]
fn the_cascade_leaves_the_unread_half_at_zero_and_changes_the_read_half() {
    let (model, input) = half();
    let req = Request { method: Method::Gradient, baseline: Baseline::Black, target: TargetSpec::Index(0), score: ScoreKind::Logits };
    let reading = methods::explain(&model, None, &input, &req, &Control::new()).unwrap();
    let case = Case::new(&model, None, &input, &req, &reading).unwrap();
    let settings = randomise::CascadeSettings {
        methods: vec![
            Method::Gradient,
            Method::IntegratedGradients { steps: 8, rule: Rule::GaussLegendre, adaptive: None },
            Method::Occlusion { window: 4, stride: 4 },
        ],
        ..Default::default()
    };
    let c = randomise::cascade(&case, &reading, &settings, &Control::new()).unwrap();
    let names: Vec<String> = c.layers.iter().map(|l| l.label()).collect();
    assert_eq!(names, vec!["Conv conv1", "Conv conv2", "Gemm fc"], "layers input side first");
    for mc in &c.methods {
        assert_eq!(mc.steps.len(), 3);
        assert_eq!(mc.steps.iter().map(|s| s.layer.as_str()).collect::<Vec<_>>(), vec!["Gemm fc", "Conv conv2", "Conv conv1"], "cascade from the output side");
        let exact = mc.method != "occlusion";
        for (k, st) in std::iter::once(&mc.original).chain(mc.steps.iter().map(|s| &s.map)).enumerate() {
            let right = st.slice(s![.., 8..]);
            if exact {
                assert!(right.iter().all(|v| *v == 0.0), "{} step {k}: the right half is not read, its map is 0", mc.method);
            } else {
                // Occlusion windows of the right half replace pixels the model never reads.
                assert!(right.iter().all(|v| v.abs() < 1e-5), "{} step {k}: right half {right:?}", mc.method);
            }
        }
        for st in &mc.steps {
            let moved = st.map.slice(s![.., ..8]).iter().zip(mc.original.slice(s![.., ..8]).iter()).map(|(a, b)| (a - b).abs()).fold(0.0f32, f32::max);
            assert!(moved > 1e-4, "{} with {} layers re-drawn: the read half must change", mc.method, st.layers_randomised);
        }
    }
}

#[test]
fn shapley_values_of_the_unread_half_are_exactly_zero() {
    let (model, input) = half();
    let req = Request { method: Method::Gradient, baseline: Baseline::Value { value: 0.5 }, target: TargetSpec::Index(1), score: ScoreKind::Logits };
    let reading = methods::explain(&model, None, &input, &req, &Control::new()).unwrap();
    let case = Case::new(&model, None, &input, &req, &reading).unwrap();
    let players = grid_players(&input, 4).unwrap();
    let s = ShapleySettings { players: Players::Grid(4), permutations: 8, seed: 1 };
    let sh = case.shapley(&players, &req.baseline, &s, &Control::new()).unwrap();
    let mut left = 0.0;
    for c in &sh.cells {
        if c.bbox[0] >= 8 {
            assert_eq!(c.value, 0.0, "{} lies in the unread half", c.label);
            assert_eq!(c.stderr, Some(0.0));
        } else {
            left += c.value.abs();
        }
    }
    assert!(left > 1e-3, "the read half carries the difference");
    let diff = sh.score_input - sh.score_baseline;
    assert!((sh.sum - diff).abs() <= 1e-9 * diff.abs().max(1.0));
}
