//! Integrated gradients (Sundararajan, Taly, Yan 2017): a fixed quadrature of the path
//! integral, or cells refined where the path needs them until the completeness gap is small
//! enough (`adaptive.rs`).

use anyhow::Result;
use ndarray::{Array1, ArrayD};

use super::adaptive::{self, PathIntegral};
use super::reading::Completeness;
use super::{Job, Outcome, Rule, defaults, gap_of};
use crate::model::StraightPath;

/// Most gradients the refinement takes for one reading (its cap), all paths together: a
/// distribution baseline's draws share it (each draw may take an even share of what the earlier
/// ones left). The refinement puts its gradients where the path changes, so a reading that needs
/// more has a path the straight line resolves badly (a saturated score turning in a tiny
/// stretch); the reading then says it stopped short of its target. One budget for the reading,
/// not one per draw, so that the slowest default reading costs what the cap says (a per-draw cap
/// let four draws take 4,096 gradients on a third-party classifier).
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
    let steps = steps.max(1);
    let cap = MAX_REFINED_STEPS.max(draws * steps);
    let mut map = ArrayD::<f32>::zeros(job.x.raw_dim());
    let mut c = Completeness {
        gap: None,
        target: adaptive.map(|t| t as f64),
        reached: adaptive.map(|_| true),
        steps: 0,
        forwards: 0,
        cap: adaptive.map(|_| cap),
        rule: if adaptive.is_some() { "adaptive midpoint".into() } else { rule.name().into() },
    };
    let mut budget = Budget::new(draws, cap);
    for (k, (xb, fb)) in xbs.iter().zip(&fbs).enumerate() {
        let (path_cap, share) = budget.next(steps);
        let p = one_path(job, xb, *fb, diff_all, steps, rule, adaptive.map(|t| (t as f64, share, path_cap)), k == 0)?;
        map.scaled_add(1.0 / draws as f32, &p.map);
        c.steps += p.report.gradients;
        c.forwards += p.report.forwards;
        budget.spent(p.report.gradients, p.used);
    }
    c.gap = gap_of(sum64(&map), diff_all);
    if let Some(t) = adaptive {
        // Within when the paths kept to their shared allowance, or when the mean's own gap is
        // (the paths' errors can cancel).
        c.reached = Some(budget.held() || c.gap.is_some_and(|g| g <= t as f64));
    }
    Ok(Outcome { map, steps: Some(c.steps), score_baseline: Some(mean_fb as f32), gap: c.gap, completeness: Some(c) })
}

/// What the paths of one reading share: the gradients of the cap, and the completeness error the
/// target allows the mean of the paths. The mean map's error is the mean of the paths' errors,
/// so it is within the target when the paths' errors, each as a share of the target's allowance,
/// sum to at most the number of paths. A path that lands well inside its allowance leaves the
/// rest to the later ones, and one that overshoots (stopped by its cap) tightens them.
struct Budget {
    paths: usize,
    done: usize,
    left: usize,
    /// Σ of the finished paths' |error| / allowance (a path with nothing to judge adds 0, as
    /// the refinement counts it within).
    used: f64,
}

impl Budget {
    fn new(paths: usize, cap: usize) -> Self {
        Budget { paths, done: 0, left: cap, used: 0.0 }
    }

    /// The next path's gradient cap (an even share of what is left, never under the start) and
    /// its share of the target (what the earlier paths left, evenly; at least a quarter, so that
    /// one path's overshoot does not demand the impossible of the rest).
    fn next(&self, start: usize) -> (usize, f64) {
        let rest = (self.paths - self.done).max(1);
        let cap = (self.left / rest).max(start);
        let share = ((self.paths as f64 - self.used) / rest as f64).max(0.25);
        (cap, share)
    }

    /// A path finished with `gradients` spent and its error as a share of its full allowance
    /// (`None`: nothing to judge).
    fn spent(&mut self, gradients: usize, used: Option<f64>) {
        self.done += 1;
        self.left = self.left.saturating_sub(gradients);
        self.used += used.unwrap_or(0.0);
    }

    /// Whether the mean of the paths is within the target.
    fn held(&self) -> bool {
        self.used <= self.paths as f64 * (1.0 + 1e-9)
    }
}

/// One path's map, what the refinement did, and its error as a share of the full target's
/// allowance (`None` for a fixed rule, or when there was nothing to refine).
struct PathMap {
    map: ArrayD<f32>,
    report: adaptive::Report,
    used: Option<f64>,
}

/// One straight path from `xb` (score `fb`): a fixed rule, or the refinement held to
/// `target · share` of `|scale_diff|` and stopped at `cap` gradients (`adaptive` = (target,
/// share, cap)). The first path begins the progress total, later ones grow it.
#[allow(clippy::too_many_arguments)]
fn one_path(
    job: &Job,
    xb: &ArrayD<f32>,
    fb: f64,
    scale_diff: f64,
    steps: usize,
    rule: Rule,
    adaptive: Option<(f64, f64, usize)>,
    first: bool,
) -> Result<PathMap> {
    let diff = job.x - xb;
    let diff_scores = job.score_x as f64 - fb;
    let begin = |n: usize| if first { job.ctl.begin(n as u64) } else { job.ctl.grow(n as u64) };
    match adaptive {
        None => {
            let nodes = rule.nodes(steps);
            begin(nodes.len());
            let map = path_sum(job, xb, &nodes)? * &diff;
            let report = adaptive::Report { gradients: nodes.len(), forwards: 0, reached: true, cells: nodes.len(), rounds: 0 };
            Ok(PathMap { map, report, used: None })
        }
        Some((target, share, cap)) => {
            let path = job.model.straight_path(xb, &diff, job.scorer.tap)?;
            let settings = adaptive::Settings { start: steps, cap: cap.max(steps), keep: (HELD_BYTES / path.point_bytes().max(1)).max(4 * steps) };
            begin(steps);
            let mut p = Refining {
                job,
                xb,
                diff: &diff,
                path: &path,
                acc: path.zeros(),
                diff_scores,
                scale_diff,
                target: target * share,
                begun: false,
                last: None,
            };
            let report = adaptive::refine(&mut p, fb, job.score_x as f64, &settings)?;
            // The error against the full target's allowance (the share only tightened it).
            let used = p.last.map(|(err, scale)| err / (target * scale).max(f64::MIN_POSITIVE));
            let map = p.path.to_input(&p.acc)? * &diff;
            Ok(PathMap { map, report, used })
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
    /// The last standing's |error| and the score scale its allowance is a share of.
    last: Option<(f64, f64)>,
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
            self.last = None;
            return Ok(adaptive::Standing { within: true, allowed: None });
        }
        let allowed = self.target * scale;
        self.last = Some(((total - self.diff_scores).abs(), scale));
        Ok(adaptive::Standing { within: (total - self.diff_scores).abs() <= allowed, allowed: Some(allowed) })
    }
}

/// A map's total in f64: a float32 sum of many values of both signs errs by more than a small
/// completeness gap.
fn sum64(map: &ArrayD<f32>) -> f64 {
    map.iter().map(|v| *v as f64).sum()
}

#[cfg(test)]
mod tests {
    use super::Budget;

    #[test]
    fn the_draws_share_one_cap() {
        // Four paths, a cap of 1024: each may take an even share of what the earlier ones left,
        // and all of them together never more than the cap.
        let mut b = Budget::new(4, 1024);
        assert_eq!(b.next(8), (256, 1.0));
        b.spent(40, Some(0.1));
        let (cap, share) = b.next(8);
        assert_eq!(cap, (1024 - 40) / 3);
        // The first path used a tenth of its allowance: the other three may use the rest evenly.
        assert!((share - 3.9 / 3.0).abs() < 1e-12, "{share}");
        b.spent(cap, Some(1.3));
        b.spent(8, Some(1.0));
        let (cap, _) = b.next(8);
        assert_eq!(cap, 1024 - 40 - 328 - 8);
        b.spent(cap, Some(1.6));
        // 0.1 + 1.3 + 1.0 + 1.6 = 4.0: the mean is just within.
        assert!(b.held());
    }

    #[test]
    fn an_overshoot_tightens_the_rest_and_is_reported() {
        let mut b = Budget::new(4, 64);
        b.spent(16, Some(3.0));
        let (_, share) = b.next(8);
        assert!((share - 1.0 / 3.0).abs() < 1e-12, "{share}");
        b.spent(16, Some(0.9));
        // Never less than a quarter of the target, whatever the earlier paths did.
        assert_eq!(b.next(8).1, 0.25);
        b.spent(16, Some(0.5));
        b.spent(16, Some(0.2));
        assert!(!b.held(), "3.0 + 0.9 + 0.5 + 0.2 > 4");
        // A start larger than the share left still gets its start.
        let b = Budget::new(2, 10);
        assert_eq!(b.next(8).0, 8);
    }
}
