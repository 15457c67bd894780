//! Integrated gradients (Sundararajan, Taly, Yan 2017): a fixed quadrature of the path
//! integral, or cells refined where the path needs them until the completeness gap is small
//! enough (`adaptive.rs`).

use anyhow::Result;
use ndarray::{Array1, ArrayD};

use super::adaptive::{self, PathIntegral};
use super::reading::Completeness;
use super::{Job, Outcome, Rule, gap_of};
use crate::model::StraightPath;

/// Most gradients the refinement takes for one reading (its cap). The refinement puts its
/// gradients where the path changes, so a reading that needs more has a path the straight line
/// resolves badly (a saturated score turning in a tiny stretch); the reading then says it
/// stopped short of its target.
pub const MAX_REFINED_STEPS: usize = 1024;

/// Most bytes of point gradients the refinement holds at once (cells beyond are folded into the
/// map for good, the ones with the smallest local gaps first).
const HELD_BYTES: usize = 512 << 20;

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
            let gap = gap_of(sum64(&map), diff_scores);
            let completeness =
                Completeness { gap, target: None, reached: None, steps: nodes.len(), forwards: 0, cap: None, rule: rule.name().into() };
            Ok(Outcome { map, steps: Some(steps), score_baseline: Some(fb), gap, completeness: Some(completeness) })
        }
        Some(target) => {
            let s = job.scorer;
            let path = job.model.straight_path(xb, &diff, s.tap)?;
            let settings = adaptive::Settings {
                start: steps,
                cap: MAX_REFINED_STEPS.max(steps),
                keep: (HELD_BYTES / path.point_bytes().max(1)).max(4 * steps),
                unsigned: std::env::var_os("SPURION_IG_UNSIGNED").is_some(),
            };
            job.ctl.begin(steps as u64);
            let mut p = Refining { job, xb, diff: &diff, path: &path, acc: path.zeros(), diff_scores, target: target as f64, begun: false };
            let report = adaptive::refine(&mut p, fb as f64, job.score_x as f64, &settings)?;
            let map = p.path.to_input(&p.acc)? * &diff;
            let gap = gap_of(sum64(&map), diff_scores);
            let completeness = Completeness {
                gap,
                target: Some(target as f64),
                reached: Some(report.reached),
                steps: report.gradients,
                forwards: report.forwards,
                cap: Some(settings.cap),
                rule: "adaptive midpoint".into(),
            };
            Ok(Outcome { map, steps: Some(report.gradients), score_baseline: Some(fb), gap, completeness: Some(completeness) })
        }
    }
}

/// The path of one reading as the refinement sees it: gradients and forwards on the model, the
/// map's folded part on the path's own tensor (the input, or the cut after the affine head).
struct Refining<'a> {
    job: &'a Job<'a>,
    xb: &'a ArrayD<f32>,
    diff: &'a ArrayD<f32>,
    path: &'a StraightPath<'a>,
    acc: ArrayD<f32>,
    diff_scores: f64,
    target: f64,
    /// Whether the first gradients (the progress total begun with) were taken.
    begun: bool,
}

impl PathIntegral for Refining<'_> {
    type Point = ArrayD<f32>;

    fn gradients(&mut self, alphas: &[f64]) -> Result<Vec<(f64, ArrayD<f32>)>> {
        let s = self.job.scorer;
        let seed = move |v: &Array1<f32>| s.seed(v);
        // Progress counts gradients: the first call's were begun, later ones grow the total.
        if self.begun {
            self.job.ctl.grow(alphas.len() as u64);
        }
        self.begun = true;
        let mut out = Vec::with_capacity(alphas.len());
        for chunk in alphas.chunks(self.path.points_per_chunk()) {
            out.extend(self.path.gradients(chunk, &seed, self.job.ctl)?.into_iter().map(|p| (p.slope, p.grad)));
        }
        Ok(out)
    }

    fn scores(&mut self, alphas: &[f64]) -> Result<Vec<f64>> {
        let points: Vec<ArrayD<f32>> = alphas.iter().map(|a| self.xb + &(self.diff * *a as f32)).collect();
        // Forwards do not count as progress units (a third of a gradient each); cancel still acts.
        let outs = self.job.model.forward_many(&points, self.job.scorer.tap, &self.job.ctl.linked())?;
        Ok(outs.iter().map(|o| self.job.scorer.score(o) as f64).collect())
    }

    fn fold(&mut self, weight: f64, point: ArrayD<f32>) -> Result<()> {
        self.acc.scaled_add(weight as f32, &point);
        Ok(())
    }

    fn standing(&mut self, held: &[(f64, &ArrayD<f32>)]) -> Result<adaptive::Standing> {
        let mut acc = self.acc.clone();
        for (w, p) in held {
            acc.scaled_add(*w as f32, p);
        }
        let map = self.path.to_input(&acc)? * self.diff;
        let total = sum64(&map);
        let gap = gap_of(total, self.diff_scores);
        // The error is held to the target share of |F(x) − F(x′)|, or of a floor set by the map's
        // own mass where the difference is tiny beside it (see `defaults::IG_GAP_FLOOR`). No gap
        // (F(x) = F(x′)) or one that is not a number cannot be refined away.
        let mass: f64 = map.iter().map(|v| v.abs() as f64).sum();
        let scale = self.diff_scores.abs().max(super::defaults::IG_GAP_FLOOR * mass);
        if gap.is_none_or(|g| !g.is_finite()) {
            return Ok(adaptive::Standing { within: true, allowed: None });
        }
        let allowed = self.target * scale;
        Ok(adaptive::Standing { within: (total - self.diff_scores).abs() <= allowed, allowed: Some(allowed) })
    }
}

/// A map's total in f64: a float32 sum of many values of both signs errs by more than a small
/// completeness gap.
fn sum64(map: &ArrayD<f32>) -> f64 {
    map.iter().map(|v| *v as f64).sum()
}
