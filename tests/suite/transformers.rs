//! Every method on the transformer and layer-norm families (issue 24): the small torchvision
//! networks of tests/fixtures/torch (ViT, Swin with shifted windows, Swin V2, ConvNeXt, MaxViT;
//! their gradients are checked against PyTorch in `engine_torch.rs`) read through a feed card
//! from a picture, with integrated gradients, SmoothGrad, expected gradients and occlusion, the
//! found regions painted out (removal), and a review. Each result is checked against an
//! independent computation or a published property, not only for running.

use ndarray::{Array1, Array2, Array3};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Uniform};
use spurion::control::Control;
use spurion::feed::{FeedCard, Picture};
use spurion::methods::{self, Baseline, Input, Method, Request, Rule, ScoreKind, TargetSpec};
use spurion::model::{LoadOptions, Model, Tap};
use spurion::regions::{Region, RegionKind, paint_out_all};
use spurion::review::curves::CurveSettings;
use spurion::review::randomise::CascadeSettings;
use spurion::review::shapley::{Players, ShapleySettings};
use spurion::review::{Settings, run};

const NETS: [&str; 5] = ["vit", "swin", "swin2", "convnext", "maxvit"];

/// A 32×32 RGB picture: smooth colour gradients and a bright square in the top-left corner.
fn picture() -> Picture {
    let px = Array3::from_shape_fn((32, 32, 3), |(y, x, c)| {
        if (2..8).contains(&y) && (2..8).contains(&x) {
            0.95
        } else {
            (0.3 + 0.25 * ((x as f32 * 0.21 + y as f32 * 0.13 + c as f32).sin())).clamp(0.0, 1.0)
        }
    });
    Picture::new(px, 8)
}

fn card() -> FeedCard {
    toml::from_str("[input]\nchannels = 3\nheight = 32\nwidth = 32\nmean = [0.5]\nstd = [0.25]\n").unwrap()
}

fn norm(a: &ndarray::ArrayD<f32>) -> f64 {
    a.iter().map(|v| (*v as f64).powi(2)).sum::<f64>().sqrt()
}

#[test]
fn every_method_reads_the_transformer_families() {
    let dir = crate::common::fixture("torch");
    let card = card();
    for name in NETS {
        let m = Model::load(&dir.join(format!("{name}.onnx")), &LoadOptions::default()).unwrap();
        let input = Input::picture(picture(), &card).unwrap();
        let read = |method: Method, baseline: Baseline| {
            let req = Request { method, baseline, target: TargetSpec::Top, score: ScoreKind::Logits };
            methods::explain(&m, Some(&card), &input, &req, &Control::new()).unwrap_or_else(|e| panic!("{name}: {e:#}"))
        };
        // Integrated gradients (Sundararajan et al. 2017): the map sums to F(x) − F(x′) up to the
        // quadrature's error. With re-drawn weights the path from black is steep in places
        // (attention switching over; ViT: 6.5 with 16 Gauss–Legendre nodes), so 256 midpoint
        // steps, which leave under 1 %. The affine head (the patch or stem convolution) is cut
        // off on every one.
        assert!(m.affine_head_len(Tap::Output).unwrap() > 0, "{name}: no affine head cut");
        let ig = read(Method::IntegratedGradients { steps: 256, rule: Rule::Midpoint, adaptive: None }, Baseline::Black);
        let gap = ig.completeness_gap.unwrap();
        eprintln!("{name:9} IG gap {gap:.1e}, sum {:.4}, F(x) − F(x′) {:.4}", ig.attribution_sum, ig.score_input - ig.score_baseline.unwrap());
        assert!(gap < 0.01, "{name}: integrated gradients' completeness gap {gap:.2e}");
        // SmoothGrad with no noise is the plain gradient.
        let plain = read(Method::Gradient, Baseline::Black);
        let sg = read(Method::SmoothGrad { noise: 0.0, samples: 2, seed: 1 }, Baseline::Black);
        let diff = norm(&(&sg.tensor_map - &plain.tensor_map)) / norm(&plain.tensor_map);
        assert!(norm(&plain.tensor_map) > 0.0 && diff < 1e-6, "{name}: SmoothGrad at noise 0 differs from the gradient by {diff:.2e}");
        let sg = read(Method::SmoothGrad { noise: 0.1, samples: 3, seed: 1 }, Baseline::Black);
        assert!(sg.tensor_map.iter().all(|v| v.is_finite()) && norm(&sg.tensor_map) > 0.0, "{name}: SmoothGrad");
        // Expected gradients (Erion et al. 2021) from its definition: the mean over draws of
        // (x − x′) ⊙ ∇F(x′ + α(x − x′)), α uniform on [0, 1), here with one baseline (grey) and
        // the method's own seeded draws of α, each gradient taken separately.
        let eg = read(Method::ExpectedGradients { samples: 6, seed: 2 }, Baseline::Grey);
        let x = input.model_tensor().unwrap();
        let grey = Input::picture(Picture::new(Array3::from_elem((32, 32, 3), 0.5), 8), &card).unwrap().model_tensor().unwrap();
        let mut rng = ChaCha8Rng::seed_from_u64(2);
        let unif = Uniform::new(0.0f32, 1.0).unwrap();
        let t = eg.target.index;
        let onehot = move |v: &Array1<f32>| Array1::from_shape_fn(v.len(), |i| (i == t) as u8 as f32);
        let mut want = ndarray::ArrayD::<f32>::zeros(x.raw_dim());
        for _ in 0..6 {
            let a = unif.sample(&mut rng);
            let g = m.gradient(&(&grey + &((&x - &grey) * a)), Tap::Output, &onehot).unwrap();
            want += &(&g.grad * &(&x - &grey));
        }
        want /= 6.0;
        let diff = norm(&(&eg.tensor_map - &want)) / norm(&want);
        assert!(diff < 1e-5, "{name}: expected gradients differ from their definition by {diff:.2e}");
        // Occlusion: each window's value is the score drop of one plain forward of the occluded
        // picture (the incremental path is checked against plain forwards window by window in
        // occlusion_incremental.rs).
        let occ = read(Method::Occlusion { window: 8, stride: 8 }, Baseline::Black);
        assert!(occ.tensor_map.iter().all(|v| v.is_finite()) && norm(&occ.tensor_map) > 0.0, "{name}: occlusion");
        // Removal: painting the corner square out costs exactly what a plain forward of the
        // painted picture says.
        let mask = Array2::from_shape_fn((32, 32), |(y, x)| (2..8).contains(&y) && (2..8).contains(&x));
        let region = Region::from_mask(RegionKind::DrawnRegion, mask, 1.0, "test", "the bright square").unwrap();
        let r = methods::removals(&m, Some(&card), &input, &ig, std::slice::from_ref(&region)).unwrap().unwrap();
        let (painted, _) = paint_out_all(&picture().pixels, std::slice::from_ref(&region));
        let x = Input::picture(picture().with_pixels(painted), &card).unwrap();
        let y = m.forward(&x.model_tensor().unwrap(), Tap::Output).unwrap();
        let t = ig.target.index;
        assert!((r.each[0].score - y[t]).abs() < 1e-5, "{name}: removal {} against a forward {}", r.each[0].score, y[t]);
    }
}

#[test]
fn a_review_of_a_vision_transformer_runs_every_test() {
    let m = Model::load(&crate::common::fixture("torch/vit.onnx"), &LoadOptions::default()).unwrap();
    let card = card();
    let input = Input::picture(picture(), &card).unwrap();
    let req = Request {
        method: Method::IntegratedGradients { steps: 8, rule: Rule::GaussLegendre, adaptive: None },
        baseline: Baseline::Black,
        target: TargetSpec::Top,
        score: ScoreKind::Logits,
    };
    let settings = Settings {
        curves: Some(CurveSettings { steps: 4, random_orders: 1, ..Default::default() }),
        cascade: Some(CascadeSettings { layers: Some(3), ..Default::default() }),
        shapley: Some(ShapleySettings { players: Players::Grid(2), permutations: 8, seed: 0 }),
        ..Settings::default()
    };
    let r = run(&m, Some(&card), &input, &req, &settings, &Control::new(), &|_| {}).unwrap();
    assert!(r.skipped.is_empty(), "skipped: {:?}", r.skipped);
    let cascade = r.cascade.as_ref().unwrap();
    assert_eq!(cascade.methods[0].steps.len(), 3, "three layers re-drawn from the output side");
    assert!(r.convergence.is_some() && r.curves.is_some());
    // Shapley values over a 2×2 grid are exact and efficient (Shapley 1953): they sum to the
    // score at the input minus the score at the baseline.
    let sh = r.shapley.as_ref().unwrap();
    assert!((sh.sum - (sh.score_input - sh.score_baseline)).abs() < 1e-6 * sh.score_input.abs().max(1.0));
}
