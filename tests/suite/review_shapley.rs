//! Region Shapley values on a nonlinear network (tests/fixtures/methods/small_cnn.onnx: two
//! convolutions, swish, pooling), against their definitions:
//! - efficiency: along any one order the marginals telescope, so each sampled order's values sum
//!   to v(all) − v(∅) = F(x) − F(fill) (Castro, Gómez, Tejada 2009);
//! - the Shapley value by enumeration of coalitions, φᵢ = Σ_{S ⊆ N∖{i}} |S|!(n−|S|−1)!/n! ·
//!   (v(S ∪ {i}) − v(S)) (Shapley 1953), against the estimate over all orders (exact) and over a
//!   few sampled antithetic pairs (within its standard error).

use spurion::control::Control;
use spurion::feed::read_tensor;
use ndarray::ArrayD;
use spurion::methods::{self, Baseline, Input, Method, Reading, Request, ScoreKind, TargetSpec};
use spurion::model::{LoadOptions, Model};
use spurion::review::Case;
use spurion::review::curves::shuffled;
use spurion::review::shapley::{Game, Player, estimate, grid_players};

use crate::common::fixture;

struct Setup {
    model: Model,
    input: Input,
    req: Request,
}

fn setup() -> Setup {
    let model = Model::load(&fixture("methods/small_cnn.onnx"), &LoadOptions::default()).unwrap();
    let x = read_tensor(&fixture("methods/x16.npy")).unwrap();
    let req = Request { method: Method::Gradient, baseline: Baseline::Blur { sigma: 2.0 }, target: TargetSpec::Index(2), score: ScoreKind::Logits };
    Setup { model, input: Input::tensor(x, "x16"), req }
}

/// The reading's case, the players of an n×n grid and the fill.
fn parts(s: &Setup, n: usize) -> (Reading, Case<'_>, Vec<Player>, ArrayD<f32>) {
    let reading = methods::explain(&s.model, None, &s.input, &s.req, &Control::new()).unwrap();
    let case = Case::new(&s.model, None, &s.input, &s.req, &reading).unwrap();
    let players = grid_players(&s.input, n).unwrap();
    let xb = case.fill(&s.req.baseline).unwrap();
    (reading, case, players, xb)
}

#[test]
fn every_sampled_order_adds_up_to_the_difference_of_the_ends() {
    let s = setup();
    let (_, case, players, xb) = parts(&s, 4);
    let game = Game::new(&s.model, case.scorer, &case.x, &xb, case.spatial, &players).unwrap();
    let diff = game.score_input() - game.score_fill();
    assert!(diff.abs() > 1e-3, "a test needs ends that differ");
    let orders: Vec<Vec<usize>> = (0..10).map(|k| shuffled(16, 42, k)).collect();
    for (o, m) in orders.iter().zip(game.marginals(&orders, &Control::new()).unwrap()) {
        let sum: f64 = m.iter().sum();
        assert!((sum - diff).abs() <= 1e-12 * diff.abs().max(1.0), "order {o:?}: {sum} against {diff}");
        // Not additive: a cell's marginal depends on who came before it.
        assert!(m.iter().any(|v| *v != 0.0));
    }
    let sh = estimate(&game, 12, 9, &s.req.baseline.label(), Some(4), &Control::new()).unwrap();
    assert!(sh.efficiency_error <= 1e-12 * diff.abs().max(1.0));
    assert!((sh.sum - diff).abs() <= 1e-9 * diff.abs().max(1.0));
}

#[test]
fn the_estimate_matches_the_shapley_value_by_enumeration_on_four_cells() {
    let s = setup();
    let (reading, case, players, xb) = parts(&s, 2);
    let game = Game::new(&s.model, case.scorer, &case.x, &xb, case.spatial, &players).unwrap();
    let n = 4usize;
    let subsets: Vec<Vec<bool>> = (0..1u32 << n).map(|b| (0..n).map(|i| b >> i & 1 == 1).collect()).collect();
    let v = game.values(&subsets, &Control::new()).unwrap();
    let fact = |k: usize| (1..=k).product::<usize>() as f64;
    let exact: Vec<f64> = (0..n)
        .map(|i| {
            (0..1usize << n)
                .filter(|b| b >> i & 1 == 0)
                .map(|b| {
                    let s = b.count_ones() as usize;
                    fact(s) * fact(n - s - 1) / fact(n) * (v[b | 1 << i] - v[b])
                })
                .sum()
        })
        .collect();
    // All 24 orders: the estimate is the value itself.
    let all = estimate(&game, 24, 0, "blur:2", Some(2), &Control::new()).unwrap();
    assert!(all.exact && all.permutations == 24);
    for (c, e) in all.cells.iter().zip(&exact) {
        assert!((c.value - e).abs() < 1e-9, "{}: {} against {e}", c.label, c.value);
    }
    // Six antithetic pairs: within four standard errors of the value.
    let some = estimate(&game, 12, 4, "blur:2", Some(2), &Control::new()).unwrap();
    assert!(!some.exact && some.permutations == 12);
    for (c, e) in some.cells.iter().zip(&exact) {
        let se = c.stderr.unwrap();
        assert!((c.value - e).abs() <= 4.0 * se + 1e-9, "{}: {} ± {se} against {e}", c.label, c.value);
    }
    // And the ends: v(∅) = F(fill), v(all) = F(x).
    assert_eq!(v[0], game.score_fill());
    assert_eq!(v[(1 << n) - 1], game.score_input());
    assert!((game.score_input() - reading.score_input as f64).abs() < 1e-6);
}
