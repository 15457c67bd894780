//! Counterfactual removal: on a model whose answer is known by construction, and against the
//! sample shortcut model's recorded proof (sample-models/shortcut-proof.json).

use ndarray::{Array2, Array3};
use rayon::prelude::*;
use spurion::control::Control;
use spurion::demo::{self, Marks, Mix, SetSpec};
use spurion::feed::{FeedCard, Feeder, Picture};
use spurion::methods::{self, Input, Method, Request, ScoreKind, TargetSpec, top_index};
use spurion::model::{LoadOptions, Model, Tap};
use spurion::regions::{FinderSettings, Region, RegionKind, find_regions, paint_out_all};

use crate::common::{fixture, root};

fn square(h: usize, w: usize, y: std::ops::Range<usize>, x: std::ops::Range<usize>) -> Region {
    let mask = Array2::from_shape_fn((h, w), |(r, c)| y.contains(&r) && x.contains(&c));
    Region::from_mask(RegionKind::DrawnRegion, mask, 1.0, "test", "drawn by the test").unwrap()
}

#[test]
fn removal_drops_a_known_model_by_exactly_the_painted_patch() {
    // corner_mean.onnx (tests/reference/make_method_fixtures.py): logit 0 is the mean of the
    // top-left 4×4 pixels, logit 1 is 0. On flat ground 0.3 with the patch at 0.9, painting the
    // patch out from its surroundings must give 0.3 there: a drop of exactly 0.6. A region away
    // from the patch (and from its boundary) cannot change the answer: a drop of 0.
    let model = Model::load(&fixture("methods/corner_mean.onnx"), &LoadOptions::default()).unwrap();
    let card: FeedCard = toml::from_str("[input]\nheight = 16\nwidth = 16\n").unwrap();
    let pixels = Array3::from_shape_fn((16, 16, 1), |(y, x, _)| if y < 4 && x < 4 { 0.9 } else { 0.3 });
    let input = Input::picture(Picture::new(pixels, 32), &card).unwrap();
    let req = Request { method: Method::Gradient, baseline: methods::Baseline::Black, target: TargetSpec::Index(0), score: ScoreKind::Logits };
    let reading = methods::explain(&model, Some(&card), &input, &req, &Control::new()).unwrap();
    assert!((reading.score_input - 0.9).abs() < 1e-6);
    let regions = vec![square(16, 16, 0..4, 0..4), square(16, 16, 9..13, 8..14)];
    let r = methods::removals(&model, Some(&card), &input, &reading, &regions).unwrap().unwrap();
    assert_eq!(r.each[0].fill, "harmonic");
    assert!((r.each[0].score - 0.3).abs() < 1e-5, "patch painted out: score {}", r.each[0].score);
    assert!((r.each[0].drop - 0.6).abs() < 1e-5, "drop {}", r.each[0].drop);
    assert_eq!(r.each[1].drop, 0.0, "a region away from the patch changes nothing");
    let all = r.all.unwrap();
    assert!((all.drop - 0.6).abs() < 1e-5);
    // The target's probability: softmax of [score, 0] (common practice), before and after.
    let p = |s: f32| 1.0 / (1.0 + (-s as f64).exp());
    assert!((r.each[0].probability_drop - (p(0.9) - p(0.3))).abs() < 1e-5);
    assert_eq!(r.each[0].top, 0, "0.3 > 0: class 0 stays on top");
}

#[test]
fn painting_the_found_regions_out_costs_the_shortcut_model_what_the_missing_marks_cost_it() {
    // sample-models/train.py measured the shortcut model on 900 held-out phantoms (seed 303,
    // pooled mix) as generated and generated without the marks (shortcut-proof.json). The same
    // generator gives the very same images with other marks (SetSpec::phantom), so here the
    // first 300 are read three ways: as generated, with spurion's found regions painted out,
    // and generated without marks. Removal should cost about what the missing marks cost.
    let model = Model::load(&root().join("sample-models/shortcut.onnx"), &LoadOptions::default()).unwrap();
    let card = FeedCard::for_loaded(&model).unwrap();
    let finding = card.output.labels.iter().position(|l| l == "finding present").unwrap();
    let spec = SetSpec { count: 900, seed: 303, mix: Mix::Pooled, marks: Marks::BySite, ..SetSpec::default() };
    let bare = SetSpec { marks: Marks::None, ..spec.clone() };
    let picture = |img: &Array2<u8>| Picture::from_gray(img.mapv(|v| v as f32 / 255.0));
    let top = |pic: &Picture| -> usize {
        let feeder = Feeder::for_picture(&card, pic).unwrap();
        top_index(&model.forward(&feeder.tensor(&pic.pixels).unwrap(), Tap::Output).unwrap())
    };
    let n = 300;
    let rows: Vec<(bool, bool, bool, bool)> = (0..n)
        .into_par_iter()
        .map(|i| {
            let ph = demo::render(&spec.phantom(i));
            let truth = spec.phantom(i).finding;
            let pic = picture(&ph.image);
            let regions = find_regions(&pic.luminance(), &FinderSettings::default());
            let (painted, _) = paint_out_all(&pic.pixels, &regions);
            let removed = Picture::new(painted, 8);
            let none = picture(&demo::render(&bare.phantom(i)).image);
            let ok = |p: &Picture| (top(p) == finding) == truth;
            (ok(&pic), ok(&removed), ok(&none), !regions.is_empty())
        })
        .collect();
    let acc = |k: usize| 100.0 * rows.iter().filter(|r| [r.0, r.1, r.2][k]).count() as f64 / n as f64;
    let (generated, removed, none) = (acc(0), acc(1), acc(2));
    let proof: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(root().join("sample-models/shortcut-proof.json")).unwrap()).unwrap();
    let card_removed = proof["models"]["shortcut"]["held_out_pooled"]["marks_removed"].as_f64().map(|v| 100.0 * v);
    eprintln!(
        "shortcut model, first {n} held-out phantoms: as generated {generated:.1} %, found regions painted out \
         {removed:.1} %, generated without marks {none:.1} % (card, all 900 without marks: {card_removed:?} %)"
    );
    if let Some(c) = card_removed {
        // The same recipe read by tract here and by onnxruntime for the card: a subset of 300
        // of the 900 lies within a few points of the whole.
        assert!((none - c).abs() <= 5.0, "without marks: {none:.1} % here, {c:.1} % on the card");
    }
    assert!(generated - removed >= 15.0, "painting out should cost the shortcut model much: {generated:.1} → {removed:.1}");
    assert!((removed - none).abs() <= 6.0, "painting out ({removed:.1} %) should cost about what missing marks cost ({none:.1} %)");
}
