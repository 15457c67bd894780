//! Model against model, and sweep against sweep, where the answer is known by construction.

use spurion::control::Control;
use spurion::feed::read_tensor;
use spurion::methods::{self, Baseline, Input, Method, Request, ScoreKind, TargetSpec};
use spurion::model::{LoadOptions, Model};
use spurion::review::against::{against, compare};
use spurion::review::sweeps;
use spurion::review::Case;
use spurion::sign::Sign;
use spurion::sweep::Row;
use spurion::sweep::stats::newcombe;

use crate::common::fixture;

#[test]
fn a_model_against_itself_behind_a_softmax_agrees_perfectly() {
    // small_cnn_softmax.onnx is small_cnn.onnx with a softmax after the same weights
    // (tests/reference/make_method_fixtures.py); explaining the logits, spurion steps before the
    // softmax, so both models must give the very same map.
    let opts = LoadOptions::default();
    let m1 = Model::load(&fixture("methods/small_cnn.onnx"), &opts).unwrap();
    let m2 = Model::load(&fixture("methods/small_cnn_softmax.onnx"), &opts).unwrap();
    let input = Input::tensor(read_tensor(&fixture("methods/x16.npy")).unwrap(), "x16");
    let req = Request { method: Method::GradientXInput, baseline: Baseline::Black, target: TargetSpec::Top, score: ScoreKind::Logits };
    let reading = methods::explain(&m1, None, &input, &req, &Control::new()).unwrap();
    let case = Case::new(&m1, None, &input, &req, &reading).unwrap();
    let a = against(&case, &reading, &m2, None, &[], 0.1, &Control::new()).unwrap();
    assert_eq!(a.first.target, a.second.target);
    assert!((a.first.score_input - a.second.score_input).abs() < 1e-5);
    for s in &a.agreement {
        assert!((s.spearman.unwrap() - 1.0).abs() < 1e-9, "{:?}: ρ {:?}", s.sign, s.spearman);
        assert_eq!(s.top_overlap, Some(1.0));
    }
    assert!(a.notes.is_empty(), "{:?}", a.notes);
    // A reading compared with its own negation: ρ = −1 on the signed maps, and the supporting
    // parts no longer share their top pixels.
    let mut neg = reading.clone();
    neg.map.mapv_inplace(|v| -v);
    let c = compare(&reading, &neg, &[], 0.1).unwrap();
    let both = c.agreement.iter().find(|s| s.sign == Sign::Both).unwrap();
    assert!((both.spearman.unwrap() + 1.0).abs() < 1e-9);
    let mag = c.agreement.iter().find(|s| s.sign == Sign::Magnitude).unwrap();
    assert_eq!(mag.top_overlap, Some(1.0), "the magnitudes are the same");
}

fn row(path: &str, group: &str, suspect: bool, share: Option<f64>, top_after: Option<usize>) -> Row {
    Row {
        path: path.into(),
        group: group.into(),
        top: 1,
        top_label: "finding present".into(),
        top_score: 0.0,
        target: 1,
        target_label: "finding present".into(),
        target_score: 0.0,
        mark_share: share,
        lift: None,
        removal_drop: None,
        removal_probability_drop: None,
        top_after_removal: top_after,
        suspect,
        evidence: String::new(),
        regions: 0,
        region_labels: String::new(),
        completeness_gap: None,
        steps: None,
        burned_in_annotation: None,
        verdict: None,
        seconds: 0.0,
        hotspot_summary: String::new(),
        hotspots: vec![],
    }
}

#[test]
fn sweeps_compare_per_group_paired_when_the_images_are_the_same() {
    // Hillmoor: the same 8 images in both sweeps (paired); North Quay: different images (not).
    let mut a: Vec<Row> = (0..8).map(|i| row(&format!("h{i}"), "hillmoor", i < 6, Some(0.4), Some(if i < 5 { 0 } else { 1 }))).collect();
    let mut b: Vec<Row> = (0..8).map(|i| row(&format!("h{i}"), "hillmoor", i < 2, Some(0.1), Some(1))).collect();
    a.extend((0..5).map(|i| row(&format!("n{i}"), "north-quay", i < 1, None, None)));
    b.extend((0..7).map(|i| row(&format!("m{i}"), "north-quay", i < 3, Some(0.2), None)));
    let c = sweeps::compare(&a, &b);
    assert_eq!(c.groups.iter().map(|g| g.group.as_str()).collect::<Vec<_>>(), vec!["hillmoor", "north-quay"]);
    let h = &c.groups[0];
    assert_eq!((h.paired, h.suspect_first, h.suspect_second), (8, 6, 2));
    assert!(h.suspect_rate.interval.starts_with("paired"));
    // Paired per-image differences of the suspect flag: 4 images lose it, none gains: −4/8.
    let d = h.suspect_rate.difference.unwrap();
    assert!((d.estimate + 0.5).abs() < 1e-12 && d.low <= d.estimate && d.estimate <= d.high);
    assert!((h.flip_rate.difference.unwrap().estimate + 5.0 / 8.0).abs() < 1e-12);
    assert!((h.mark_share.difference.unwrap().estimate + 0.3).abs() < 1e-12);
    let n = &c.groups[1];
    assert_eq!(n.paired, 0);
    assert!(n.suspect_rate.interval.contains("Newcombe"));
    // Unpaired: Newcombe's interval for 3/7 against 1/5 (sweep::stats, checked there against
    // Newcombe's 1998 worked example).
    assert_eq!(n.suspect_rate.difference, newcombe(3, 7, 1, 5));
    // A missing mark share counts as 0, as the sweep's groups.json counts it.
    assert!((n.mark_share.difference.unwrap().estimate - 0.2).abs() < 1e-12);
    assert_eq!(c.overall.images_first, 13);
    assert_eq!(c.overall.images_second, 15);
}
