//! Integrated gradients (Sundararajan, Taly, Yan 2017): a fixed quadrature of the path
//! integral, or the midpoint rule refined until the completeness gap is small enough.

use anyhow::Result;
use ndarray::{Array1, ArrayD};

use super::{Job, Outcome, Rule, gap_of};

/// Largest step count the refinement goes to (64 · 3³ = 1728 from the default start; 2187 = 3⁷).
pub const MAX_REFINED_STEPS: usize = 2187;

/// Sum over (alpha, weight) nodes of weight · ∂F/∂x at x′ + alpha (x − x′).
fn path_sum(job: &Job, xb: &ArrayD<f32>, nodes: &[(f64, f64)]) -> Result<ArrayD<f32>> {
    let s = job.scorer;
    let diff = job.x - xb;
    job.model.gradient_path_sum(xb, &diff, nodes, s.tap, &move |v: &Array1<f32>| s.seed(v), job.ctl)
}

pub(super) fn integrated_gradients(job: &Job, xb: &ArrayD<f32>, steps: usize, rule: Rule, adaptive: Option<f32>) -> Result<Outcome> {
    let steps = steps.max(1);
    let fb = job.scorer.score(&job.model.forward(xb, job.scorer.tap)?);
    let diff_scores = job.score_x as f64 - fb as f64;
    let diff = job.x - xb;
    match adaptive {
        None => {
            let nodes = rule.nodes(steps);
            job.ctl.begin(nodes.len() as u64);
            let avg = path_sum(job, xb, &nodes)?;
            let map = avg * &diff;
            let gap = gap_of(map.sum() as f64, diff_scores);
            Ok(Outcome { map, steps: Some(steps), score_baseline: Some(fb), gap })
        }
        Some(target_gap) => {
            // Midpoint rule refined by tripling the cell count: the old midpoints are among the
            // new ones, so every gradient computed so far is reused.
            let mut m = steps;
            job.ctl.begin(m as u64);
            let mut sum = path_sum(job, xb, &Rule::Midpoint.nodes(m))? * (m as f32);
            loop {
                let map = &sum / m as f32 * &diff;
                let total = map.sum() as f64;
                let gap = gap_of(total, diff_scores);
                // The error is held to the target share of |F(x) − F(x′)|, or of a floor set by
                // the map's own mass where the difference is tiny beside it (see
                // `defaults::IG_GAP_FLOOR`). No gap (F(x) = F(x′)) or one that is not a number
                // cannot be refined away.
                let mass: f64 = map.iter().map(|v| v.abs() as f64).sum();
                let scale = diff_scores.abs().max(super::defaults::IG_GAP_FLOOR * mass);
                let done = gap.is_none_or(|g| !g.is_finite()) || (total - diff_scores).abs() <= target_gap as f64 * scale;
                if done || m * 3 > MAX_REFINED_STEPS {
                    return Ok(Outcome { map, steps: Some(m), score_baseline: Some(fb), gap });
                }
                let m3 = m * 3;
                let new: Vec<(f64, f64)> = (0..m3)
                    .filter(|k| k % 3 != 1)
                    .map(|k| ((k as f64 + 0.5) / m3 as f64, 1.0))
                    .collect();
                job.ctl.grow(new.len() as u64);
                sum += &path_sum(job, xb, &new)?;
                m = m3;
            }
        }
    }
}
