//! The review's tests on a linear model, where every figure can be worked out by hand:
//! y = W·x + b (tests/fixtures/methods/linear.onnx, W in linear_w.npy; made by
//! tests/reference/make_method_fixtures.py).
//!
//! - Integrated gradients on a linear model equal (x − x′) ⊙ w exactly, and the completeness gap
//!   is 0 at any step count (Sundararajan, Taly, Yan 2017, section 3 and "linear models").
//! - Deletion (insertion) removes (adds) pixels most attributed first (Petsiuk, Das, Saenko 2018,
//!   RISE, section 4.1); on a linear model the score after removing set S is F(x) − Σ_S aᵢ.
//! - The game v(S) = F(x′ + 1_S ⊙ (x − x′)) of a linear model is additive, so every marginal
//!   of a cell is its Σ aᵢ and the Shapley value (Shapley 1953) equals it for every order.
//! - Re-drawing the only layer (Adebayo et al. 2018) makes the gradient map the new weight row.

use ndarray::{Array2, ArrayD, IxDyn};
use spurion::control::Control;
use spurion::feed::read_tensor;
use spurion::methods::agree::{spearman, top_overlap, view};
use spurion::methods::{self, Baseline, Input, Method, Reading, Request, Rule, ScoreKind, TargetSpec};
use spurion::model::{LoadOptions, Model, read_proto};
use spurion::review::curves::{CurveSettings, counts, patches, random_order, trapezoid};
use spurion::review::randomise::CascadeSettings;
use spurion::review::redraw::{layers, redraw, values};
use spurion::review::shapley::{Players, ShapleySettings, cross_check, grid_players};
use spurion::review::{Case, convergence::ConvergenceSettings, randomise};
use spurion::sign::Sign;

use crate::common::fixture;

const TARGET: usize = 1;
const FILL: f32 = 0.25;

struct Linear {
    model: Model,
    input: Input,
    x: Vec<f64>,
    w: Vec<f64>,
}

fn linear() -> Linear {
    let model = Model::load(&fixture("methods/linear.onnx"), &LoadOptions::default()).unwrap();
    let wall = read_tensor(&fixture("methods/linear_w.npy")).unwrap();
    let w: Vec<f64> = (0..64).map(|i| wall[[TARGET, i]] as f64).collect();
    // Spread-out values with no pattern the weights could share.
    let x = ArrayD::from_shape_fn(IxDyn(&[1, 1, 8, 8]), |i| ((i[2] * 8 + i[3]) * 37 % 64) as f32 / 64.0 - 0.2);
    let xs: Vec<f64> = x.iter().map(|v| *v as f64).collect();
    Linear { model, input: Input::tensor(x, "x"), x: xs, w }
}

fn request(method: Method) -> Request {
    Request { method, baseline: Baseline::Value { value: FILL }, target: TargetSpec::Index(TARGET), score: ScoreKind::Raw }
}

fn ig() -> Method {
    Method::IntegratedGradients { steps: 4, rule: Rule::GaussLegendre, adaptive: None }
}

/// The reading of `req` and its case.
fn read<'a>(l: &'a Linear, req: &Request) -> (Reading, Case<'a>) {
    let reading = methods::explain(&l.model, None, &l.input, req, &Control::new()).unwrap();
    let case = Case::new(&l.model, None, &l.input, req, &reading).unwrap();
    (reading, case)
}

/// aᵢ = (xᵢ − x′ᵢ) wᵢ.
fn attributions(l: &Linear) -> Vec<f64> {
    l.x.iter().zip(&l.w).map(|(x, w)| (x - FILL as f64) * w).collect()
}

#[test]
fn curves_are_the_cumulative_attributions_in_the_maps_order_and_in_random_orders() {
    let l = linear();
    let req = request(ig());
    let (reading, case) = read(&l, &req);
    let a = attributions(&l);
    for (m, h) in reading.tensor_map.iter().zip(&a) {
        assert!((*m as f64 - h).abs() < 1e-5, "IG on a linear model is (x − x′)·w: {m} against {h}");
    }
    let fill = Baseline::Value { value: FILL };
    for patch in [1usize, 2] {
        let settings = CurveSettings { steps: 16, random_orders: 3, seed: 5, patch };
        let c = case.curves(&reading, &fill, &settings, &Control::new()).unwrap();
        let fx = c.score_input;
        let fb = c.score_fill;
        assert!((fx - fb - a.iter().sum::<f64>()).abs() < 1e-4, "F(x) − F(x′) = Σ a on a linear model");
        // The map's order by hand: units (patches) by their sum of a, most first, ties by unit.
        let units = patches(8, 8, patch);
        let mut by_unit: Vec<usize> = (0..units.len()).collect();
        let sums: Vec<f64> = units.iter().map(|u| u.iter().map(|&p| a[p]).sum()).collect();
        by_unit.sort_by(|&p, &q| sums[q].total_cmp(&sums[p]));
        let order: Vec<usize> = by_unit.iter().flat_map(|&u| units[u].clone()).collect();
        let ks = counts(64, 16);
        let moved = |order: &[usize], k: usize| -> f64 { order[..k].iter().map(|&p| a[p]).sum() };
        let hand_del: Vec<f64> = ks.iter().map(|&k| fx - moved(&order, k)).collect();
        let hand_ins: Vec<f64> = ks.iter().map(|&k| fb + moved(&order, k)).collect();
        let close = |e: &[f64], h: &[f64], what: &str| {
            for (k, (e, h)) in e.iter().zip(h).enumerate() {
                assert!((e - h).abs() < 1e-4, "patch {patch}, {what} at point {k}: {e} against {h}");
            }
        };
        close(&c.deletion.scores, &hand_del, "deletion");
        close(&c.insertion.scores, &hand_ins, "insertion");
        let fr: Vec<f64> = ks.iter().map(|&k| k as f64 / 64.0).collect();
        assert_eq!(c.deletion.fractions, fr);
        assert!((c.deletion.auc - trapezoid(&fr, &hand_del)).abs() < 1e-4);
        assert!((c.insertion.auc - trapezoid(&fr, &hand_ins)).abs() < 1e-4);
        // The random reference: the mean of the seeded orders' curves.
        let orders: Vec<Vec<usize>> = (0..3).map(|k| random_order(&units, 5, k)).collect();
        let mean_del: Vec<f64> = ks.iter().map(|&k| orders.iter().map(|o| fx - moved(o, k)).sum::<f64>() / 3.0).collect();
        close(&c.deletion.random_scores, &mean_del, "random deletion");
        assert!((c.deletion.random_auc - trapezoid(&fr, &mean_del)).abs() < 1e-4);
        // Removing the most supporting pixels first lowers a linear score fastest of all orders
        // (the partial sums of a sorted list are the largest): below the random mean.
        assert!(c.deletion.auc < c.deletion.random_auc && c.insertion.auc > c.insertion.random_auc);
        assert!(c.deletion.lead.unwrap() > 0.0);
    }
}

#[test]
fn shapley_values_of_cells_are_their_attributions_for_every_order() {
    let l = linear();
    let req = request(ig());
    let (reading, case) = read(&l, &req);
    let s = ShapleySettings { players: Players::Grid(4), permutations: 6, seed: 3 };
    let players = grid_players(&l.input, 4).unwrap();
    let fill = Baseline::Value { value: FILL };
    let sh = case.shapley(&players, &fill, &s, &Control::new()).unwrap();
    assert!(!sh.exact, "16 players have far more orders than 6: sampled");
    let a = attributions(&l);
    assert_eq!(sh.cells.len(), 16);
    for c in &sh.cells {
        let [x0, y0, x1, y1] = c.bbox;
        assert_eq!((x1 - x0, y1 - y0), (2, 2), "4×4 cells of an 8×8 input");
        let hand: f64 = (y0..y1).flat_map(|y| (x0..x1).map(move |x| y * 8 + x)).map(|p| a[p]).sum();
        assert!((c.value - hand).abs() < 1e-4, "{}: {} against {hand}", c.label, c.value);
        assert!(c.stderr.unwrap() < 1e-5, "an additive game has one marginal per player: no spread");
    }
    let diff = sh.score_input - sh.score_baseline;
    assert!((sh.sum - diff).abs() <= 1e-9 * diff.abs().max(1.0), "efficiency: {} against {diff}", sh.sum);
    // The cross-check: integrated gradients summed over a cell are that cell's Shapley value on
    // a linear model, so the two rank the cells alike.
    let mut sh = sh;
    cross_check(&mut sh, &players, &case.grid_map(&reading));
    for c in &sh.cells {
        assert!((c.map_sum.unwrap() - c.value).abs() < 1e-4, "{}: map {:?} against {}", c.label, c.map_sum, c.value);
    }
    assert!((sh.map_agreement.unwrap() - 1.0).abs() < 1e-12);
}

#[test]
fn integrated_gradients_converge_at_once_on_a_linear_model() {
    let l = linear();
    let req = request(ig());
    let (_, case) = read(&l, &req);
    let c = case.convergence(&ConvergenceSettings { min_steps: 1, max_steps: 8, target_gap: 1e-4 }, &Control::new()).unwrap();
    assert_eq!(c.rules.len(), 3);
    for l in &c.rules {
        assert_eq!(l.points.iter().map(|p| p.steps).collect::<Vec<_>>(), vec![1, 2, 4, 8]);
        for p in &l.points {
            assert!(p.gap.unwrap() < 1e-5, "{:?} at {} steps: gap {:?}", l.rule, p.steps, p.gap);
        }
        assert_eq!(l.steps_to_gap, Some(1));
    }
}

#[test]
fn re_drawing_the_only_layer_makes_the_gradient_map_the_new_weights() {
    let l = linear();
    let req = request(Method::Gradient);
    let (reading, case) = read(&l, &req);
    let settings = CascadeSettings { seed: 11, ..Default::default() };
    let c = randomise::cascade(&case, &reading, &settings, &Control::new()).unwrap();
    assert_eq!(c.layers.len(), 1, "one Gemm");
    let steps = &c.methods[0].steps;
    assert_eq!(steps.len(), 1);
    // The new weights, read back from the re-drawn model.
    let (proto, _) = read_proto(&fixture("methods/linear.onnx")).unwrap();
    let changed = redraw(&proto, &layers(&proto), 11).unwrap();
    let w2 = values(&changed, "w").unwrap();
    assert_eq!(w2.len(), 192);
    let new_row = Array2::from_shape_vec((8, 8), w2[TARGET * 64..(TARGET + 1) * 64].to_vec()).unwrap();
    let old_row = Array2::from_shape_vec((8, 8), l.w.iter().map(|v| *v as f32).collect()).unwrap();
    for (m, w) in steps[0].map.iter().zip(new_row.iter()) {
        assert!((m - w).abs() < 1e-6, "the gradient of a linear score is its weight row");
    }
    // The figures by hand from the two weight rows (Spearman and top-k overlap as defined in
    // methods::agree, whose own tests work them out by hand).
    let (oa, na) = (view(&old_row, Sign::Magnitude), view(&new_row, Sign::Magnitude));
    assert_eq!(steps[0].spearman, spearman(&oa, &na));
    assert_eq!(steps[0].top_overlap, top_overlap(&oa, &na, c.top_share));
    assert_eq!(steps[0].spearman_signed, spearman(&old_row, &new_row));
    // He-normal: mean 0 and standard deviation √(2/64) (He et al. 2015). With 192 draws the
    // sample sd is within 15 % and the mean within 4 standard errors (common practice).
    let n = w2.len() as f64;
    let mean = w2.iter().map(|v| *v as f64).sum::<f64>() / n;
    let sd = (w2.iter().map(|v| (*v as f64 - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
    let want = (2.0f64 / 64.0).sqrt();
    assert!((sd / want - 1.0).abs() < 0.15, "sd {sd} against {want}");
    assert!(mean.abs() < 4.0 * want / n.sqrt(), "mean {mean}");
    assert!(values(&changed, "b").unwrap().iter().all(|v| *v == 0.0), "biases are re-drawn as 0");
}
