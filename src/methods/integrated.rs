//! Integrated gradients (Sundararajan, Taly, Yan 2017): a fixed quadrature of the path
//! integral, or cells refined where the path needs them until the completeness gap is small
//! enough (`adaptive.rs`).

use anyhow::Result;
use ndarray::{Array1, ArrayD};

use super::adaptive::{self, PathIntegral};
use super::reading::Completeness;
use super::{Job, Outcome, Rule, defaults, gap_of};
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

/// Integrated gradients from the request's baseline. A baseline that is a distribution (the
/// noise families) gives [`defaults::IG_DRAWS`] draws, each with its own straight path, and the
/// map is their mean: completeness then holds against the mean of the draws' scores,
/// F(x) − mean F(x′ₖ) (Sturmfels, Lundberg, Lee 2020 average over baseline distributions this
/// way). Each path is held to the target share of that one difference, so their mean is too.
pub(super) fn integrated_gradients(job: &Job, steps: usize, rule: Rule, adaptive: Option<f32>) -> Result<Outcome> {
    let draws = if job.req.baseline.is_distribution() { defaults::IG_DRAWS } else { 1 };
    let xbs: Vec<ArrayD<f32>> = (0..draws as u64).map(|d| job.baseline(d)).collect::<Result<_>>()?;
    let fbs: Vec<f64> = xbs.iter().map(|xb| Ok(job.scorer.score(&job.model.forward(xb, job.scorer.tap)?) as f64)).collect::<Result<_>>()?;
    let mean_fb = fbs.iter().sum::<f64>() / draws as f64;
    let diff_all = job.score_x as f64 - mean_fb;
    let mut map = ArrayD::<f32>::zeros(job.x.raw_dim());
    let mut c = Completeness {
        gap: None,
        target: adaptive.map(|t| t as f64),
        reached: adaptive.map(|_| true),
        steps: 0,
        forwards: 0,
        cap: adaptive.map(|_| draws * MAX_REFINED_STEPS.max(steps)),
        rule: if adaptive.is_some() { "adaptive midpoint".into() } else { rule.name().into() },
    };
    for (k, (xb, fb)) in xbs.iter().zip(&fbs).enumerate() {
        let (m, report) = one_path(job, xb, *fb, diff_all, steps.max(1), rule, adaptive, k == 0)?;
        map.scaled_add(1.0 / draws as f32, &m);
        c.steps += report.gradients;
        c.forwards += report.forwards;
        if adaptive.is_some() {
            c.reached = Some(c.reached == Some(true) && report.reached);
        }
    }
    c.gap = gap_of(sum64(&map), diff_all);
    Ok(Outcome { map, steps: Some(c.steps), score_baseline: Some(mean_fb as f32), gap: c.gap, completeness: Some(c) })
}

/// One straight path from `xb` (score `fb`): a fixed rule, or the refinement held to the target
/// share of `|scale_diff|`. The first path begins the progress total, later ones grow it.
#[allow(clippy::too_many_arguments)]
fn one_path(
    job: &Job,
    xb: &ArrayD<f32>,
    fb: f64,
    scale_diff: f64,
    steps: usize,
    rule: Rule,
    adaptive: Option<f32>,
    first: bool,
) -> Result<(ArrayD<f32>, adaptive::Report)> {
    let diff = job.x - xb;
    let diff_scores = job.score_x as f64 - fb;
    let begin = |n: usize| if first { job.ctl.begin(n as u64) } else { job.ctl.grow(n as u64) };
    match adaptive {
        None => {
            let nodes = rule.nodes(steps);
            begin(nodes.len());
            let map = path_sum(job, xb, &nodes)? * &diff;
            let report = adaptive::Report { gradients: nodes.len(), forwards: 0, reached: true, cells: nodes.len(), rounds: 0 };
            Ok((map, report))
        }
        Some(target) => {
            let path = job.model.straight_path(xb, &diff, job.scorer.tap)?;
            let settings = adaptive::Settings {
                start: steps,
                cap: MAX_REFINED_STEPS.max(steps),
                keep: (HELD_BYTES / path.point_bytes().max(1)).max(4 * steps),
            };
            begin(steps);
            let mut p = Refining {
                job,
                xb,
                diff: &diff,
                path: &path,
                acc: path.zeros(),
                diff_scores,
                scale_diff,
                target: target as f64,
                begun: false,
            };
            let report = adaptive::refine(&mut p, fb, job.score_x as f64, &settings)?;
            Ok((p.path.to_input(&p.acc)? * &diff, report))
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
    /// The score difference the target is a share of (this path's, or the mean one of several).
    scale_diff: f64,
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
        let scale = self.scale_diff.abs().max(super::defaults::IG_GAP_FLOOR * mass);
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
