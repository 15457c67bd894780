//! How integrated gradients converge with the step count on this image (Sundararajan, Taly, Yan
//! 2017, "Axiomatic Attribution for Deep Networks", ICML): the attributions should add up to
//! F(x) − F(x′) (completeness), and the paper advises checking that the sum is within 5 % of it
//! and raising the step count (20–300) until it is (section 3).
//!
//! For each quadrature rule and each step count of a ladder (powers of two) the completeness
//! gap |Σ attribution − (F(x) − F(x′))| / |F(x) − F(x′)|. Only the sum matters here, and
//! Σᵢ (xᵢ − x′ᵢ) Σₖ wₖ ∂ᵢF(αₖ) = Σₖ wₖ ⟨x − x′, ∇F(αₖ)⟩, so each path point costs one gradient
//! and a dot product; points the rules share (the midpoint rule's nodes are the trapezoid's at
//! twice the count) are computed once.

use std::collections::BTreeMap;

use anyhow::{Result, bail};
use ndarray::{Array1, ArrayD};
use serde::{Deserialize, Serialize};

use super::defaults;
use crate::control::Control;
use crate::methods::{Rule, Scorer};
use crate::model::Model;

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ConvergenceSettings {
    /// The ladder runs min, 2·min, … up to max (max included).
    pub min_steps: usize,
    pub max_steps: usize,
    /// The gap whose step count is reported.
    pub target_gap: f64,
}

impl Default for ConvergenceSettings {
    fn default() -> Self {
        ConvergenceSettings {
            min_steps: defaults::CONVERGENCE_MIN_STEPS,
            max_steps: defaults::CONVERGENCE_MAX_STEPS,
            target_gap: defaults::CONVERGENCE_GAP,
        }
    }
}

/// One point of a rule's ladder.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Point {
    pub steps: usize,
    /// The relative completeness gap; `None` when F(x) = F(x′).
    pub gap: Option<f64>,
    /// The attribution sum.
    pub sum: f64,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct RuleLadder {
    pub rule: Rule,
    /// In increasing steps.
    pub points: Vec<Point>,
    /// The smallest step count of the ladder from which on every gap is at most the target;
    /// `None` when the largest count's gap is above it.
    pub steps_to_gap: Option<usize>,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Convergence {
    pub baseline: String,
    pub score_input: f64,
    pub score_baseline: f64,
    pub target_gap: f64,
    /// The gap above which a reading is warned of (the paper's 5 %).
    pub warn_gap: f64,
    pub rules: Vec<RuleLadder>,
    /// Gradients computed.
    pub gradients: usize,
}

impl Convergence {
    pub fn ladder(&self, rule: Rule) -> Option<&RuleLadder> {
        self.rules.iter().find(|l| l.rule == rule)
    }
}

/// The step count from which on the ladder's gaps stay at or under `target`: a gap that dips
/// under it once and rises again is not reached yet. `None` when the last one is over it.
pub fn reached(points: &[Point], target: f64) -> Option<usize> {
    let over = |p: &Point| p.gap.is_none_or(|g| g > target);
    match points.iter().rposition(over) {
        Some(i) => points.get(i + 1).map(|p| p.steps),
        None => points.first().map(|p| p.steps),
    }
}

/// The ladder's step counts.
pub fn ladder(settings: &ConvergenceSettings) -> Vec<usize> {
    let mut out = vec![];
    let mut s = settings.min_steps.max(1);
    while s < settings.max_steps {
        out.push(s);
        s *= 2;
    }
    out.push(settings.max_steps.max(1));
    out.dedup();
    out
}

/// The convergence of integrated gradients from `xb` to `x` for the scorer's target, under all
/// three rules. Progress: one unit per gradient.
pub fn convergence(
    model: &Model,
    scorer: &Scorer,
    x: &ArrayD<f32>,
    xb: &ArrayD<f32>,
    baseline: &str,
    settings: &ConvergenceSettings,
    ctl: &Control,
) -> Result<Convergence> {
    if settings.max_steps == 0 || settings.min_steps == 0 || settings.min_steps > settings.max_steps {
        bail!("the convergence ladder needs 1 ≤ smallest step count ≤ largest, not {}..{}", settings.min_steps, settings.max_steps);
    }
    let steps = ladder(settings);
    let rules = [Rule::Midpoint, Rule::Trapezoid, Rule::GaussLegendre];
    // Every node of every rule and step count, keyed by the bits of α so shared points meet.
    let mut alphas: BTreeMap<u64, f64> = BTreeMap::new();
    for r in rules {
        for &m in &steps {
            for (a, _) in r.nodes(m) {
                alphas.insert(a.to_bits(), a);
            }
        }
    }
    let diff = x - xb;
    let keys: Vec<u64> = alphas.keys().copied().collect();
    ctl.begin(keys.len() as u64 + 1);
    let ends = model.forward_many(&[x.clone(), xb.clone()], scorer.tap, &Control::new())?;
    let (fx, fb) = (scorer.score(&ends[0]) as f64, scorer.score(&ends[1]) as f64);
    ctl.advance(1);
    let s = *scorer;
    let mut dots: BTreeMap<u64, f64> = BTreeMap::new();
    for chunk in keys.chunks(16) {
        ctl.check()?;
        let pts: Vec<ArrayD<f32>> = chunk.iter().map(|k| xb + &(&diff * alphas[k] as f32)).collect();
        let gs = model.gradient_many(&pts, s.tap, &move |v: &Array1<f32>| s.seed(v), ctl)?;
        for (k, g) in chunk.iter().zip(gs) {
            dots.insert(*k, g.grad.iter().zip(diff.iter()).map(|(a, b)| *a as f64 * *b as f64).sum());
        }
    }
    let d = fx - fb;
    let ladders = rules
        .iter()
        .map(|&rule| {
            let points: Vec<Point> = steps
                .iter()
                .map(|&m| {
                    let sum: f64 = rule.nodes(m).iter().map(|(a, w)| w * dots[&a.to_bits()]).sum();
                    let gap = (d.abs() > 1e-12).then(|| (sum - d).abs() / d.abs());
                    Point { steps: m, gap, sum }
                })
                .collect();
            let steps_to_gap = reached(&points, settings.target_gap);
            RuleLadder { rule, points, steps_to_gap }
        })
        .collect();
    Ok(Convergence {
        baseline: baseline.to_string(),
        score_input: fx,
        score_baseline: fb,
        target_gap: settings.target_gap,
        warn_gap: defaults::WARN_GAP,
        rules: ladders,
        gradients: keys.len(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ladders_double_and_end_at_the_largest() {
        let s = |a, b| ConvergenceSettings { min_steps: a, max_steps: b, target_gap: 0.01 };
        assert_eq!(ladder(&s(4, 64)), vec![4, 8, 16, 32, 64]);
        assert_eq!(ladder(&s(4, 50)), vec![4, 8, 16, 32, 50]);
        assert_eq!(ladder(&s(8, 8)), vec![8]);
    }

    #[test]
    fn a_gap_is_reached_where_it_stays_under_the_target() {
        let pts = |gaps: &[f64]| -> Vec<Point> { gaps.iter().enumerate().map(|(k, g)| Point { steps: 4 << k, gap: Some(*g), sum: 0.0 }).collect() };
        let reach = |gaps: &[f64]| reached(&pts(gaps), 0.01);
        assert_eq!(reach(&[0.005, 0.02, 0.008, 0.001]), Some(16), "dips under at 4, rises at 8, stays under from 16");
        assert_eq!(reach(&[0.001, 0.002]), Some(4));
        assert_eq!(reach(&[0.001, 0.02]), None);
    }

    #[test]
    fn midpoint_nodes_are_trapezoid_nodes_at_twice_the_count() {
        // (2k+1)/(2m) = j/(2m): the same dyadic numbers, so the same bits and one gradient each.
        let t: std::collections::BTreeSet<u64> = Rule::Trapezoid.nodes(16).iter().map(|(a, _)| a.to_bits()).collect();
        assert!(Rule::Midpoint.nodes(8).iter().all(|(a, _)| t.contains(&a.to_bits())));
    }
}
