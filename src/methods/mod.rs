//! Attribution methods. One entry point, [`explain`], turns a model, an input and a
//! [`Request`] into a [`Reading`].
//!
//! Every method works on the model-input tensor through [`Model::gradient_many`] and
//! [`Model::forward_many`]; maps for pictures are then carried back onto the picture with the
//! feeder's adjoint resampling ([`Feeder::map_back`]), which keeps the map's total.
//! Sign convention: positive attribution raises the target score (supporting), negative
//! lowers it (opposing).
//!
//! Files: the method and baseline tables ([`catalog`]), the request ([`request`]), the input,
//! the reading, scoring and targets, and one file per method family (integrated gradients,
//! occlusion, the sampling methods); baselines, quadrature and map agreement beside them.

pub mod agree;
mod baseline;
pub mod catalog;
pub mod defaults;
mod hotspot;
mod input;
mod integrated;
mod occlusion;
mod quadrature;
mod reading;
mod removal;
mod request;
mod sampling;
mod score;

pub use baseline::{Baseline, blur_grid, guess_spatial_axes};
pub use catalog::{BaselineKind, MethodKind};
pub use input::Input;
pub use integrated::MAX_REFINED_STEPS;
pub use occlusion::window_starts;
pub use quadrature::{Rule, gauss_legendre};
pub use reading::{Reading, Target};
pub use hotspot::{add_hotspots, hotspot_removals};
pub use removal::{assess, assess_input, removals};
pub use request::{Method, Request, ScoreKind, TargetSpec};
pub use score::{Scorer, resolve_target, softmax, top_index};

use std::time::Instant;

use anyhow::{Context, Result, bail};
use ndarray::{Array1, Array3, ArrayD};

use crate::control::Control;
use crate::feed::{FeedCard, Feeder};
use crate::model::{Gradient, Model};
use baseline::{FolderCache, Space};

/// Runs one attribution method. Progress goes to `ctl` (units: model passes); cancelling
/// returns an error whose root cause is [`crate::control::Cancelled`].
pub fn explain(model: &Model, card: Option<&FeedCard>, input: &Input, req: &Request, ctl: &Control) -> Result<Reading> {
    let started = Instant::now();
    if req.method.needs_gradient() {
        model.gradient_ready().with_context(|| {
            format!("method {} needs gradients; occlusion works without them", req.method.name())
        })?;
    }
    let x = input.model_tensor()?;
    if x.shape() != model.input_shape() {
        bail!(
            "input {} has shape {:?} but model {} takes {:?}",
            input.name(),
            x.shape(),
            model.path().display(),
            model.input_shape()
        );
    }
    let labels: Vec<String> = match card {
        Some(c) => (0..model.output_len()).map(|i| c.label(i)).collect(),
        None => (0..model.output_len()).map(|i| format!("class {i}")).collect(),
    };
    // Resolve the score on the raw output first: the target is the top class of what the model says.
    let probe = Scorer::new(model, card, req.score, 0)?;
    let scores = model.forward(&x, probe.tap)?;
    let scorer = probe.with_target(resolve_target(&req.target, &scores, &labels)?);
    let grid = match input {
        Input::Picture { feeder, picture } => Some((feeder, feeder.prepare(&picture.pixels)?)),
        Input::Tensor { .. } => None,
    };
    let job = Job {
        model,
        input,
        req,
        scorer,
        score_x: scorer.score(&scores),
        x: &x,
        spatial: input.spatial_axes()?,
        ctl,
        grid: grid.as_ref().map(|(f, g)| (*f, g)),
        cache: FolderCache::default(),
    };
    let out = job.run()?;
    job.reading(out, &scores, &labels, started)
}

/// Draw `draw` of `baseline` for `input` as a model-input tensor: what a reading of `input`
/// measures against (for pictures built on the model's grid, then normalised, as
/// [`explain`] builds it).
pub fn baseline_tensor(input: &Input, baseline: &Baseline, draw: u64) -> Result<ArrayD<f32>> {
    let cache = FolderCache::default();
    match input {
        Input::Picture { feeder, picture } => {
            let grid = feeder.prepare(&picture.pixels)?;
            baseline::build(baseline, &Space::Grid { feeder, grid: &grid }, draw, &cache)
        }
        Input::Tensor { tensor, .. } => {
            baseline::build(baseline, &Space::Tensor { tensor, spatial: input.spatial_axes()? }, draw, &cache)
        }
    }
}

/// Everything one method run reads: the model, the input and its tensor, the request and the
/// resolved scoring.
struct Job<'a> {
    model: &'a Model,
    input: &'a Input,
    req: &'a Request,
    scorer: Scorer,
    /// The target's score at the input.
    score_x: f32,
    /// The model-input tensor and its spatial axes.
    x: &'a ArrayD<f32>,
    spatial: [usize; 2],
    ctl: &'a Control,
    /// For pictures: the feeder and the picture on the model's grid (where baselines are built).
    grid: Option<(&'a Feeder, &'a Array3<f32>)>,
    /// Folder images prepared once per call (mean images and expected-gradient draws).
    cache: FolderCache,
}

/// What a method returns: the map on the model-input tensor and its figures.
struct Outcome {
    map: ArrayD<f32>,
    steps: Option<usize>,
    score_baseline: Option<f32>,
    gap: Option<f64>,
}

/// The relative completeness gap |sum − diff| / |diff|; `None` when the scores do not differ.
fn gap_of(sum: f64, diff: f64) -> Option<f64> {
    if diff.abs() < 1e-12 { None } else { Some((sum - diff).abs() / diff.abs()) }
}

impl Job<'_> {
    /// Draw `draw` of the request's baseline, as a model-input tensor.
    fn baseline(&self, draw: u64) -> Result<ArrayD<f32>> {
        let space = match self.grid {
            Some((feeder, grid)) => Space::Grid { feeder, grid },
            None => Space::Tensor { tensor: self.x, spatial: self.spatial },
        };
        baseline::build(&self.req.baseline, &space, draw, &self.cache)
    }

    fn grads(&self, xs: &[ArrayD<f32>]) -> Result<Vec<Gradient>> {
        let s = self.scorer;
        self.model.gradient_many(xs, s.tap, &move |v: &Array1<f32>| s.seed(v), self.ctl)
    }

    fn run(&self) -> Result<Outcome> {
        let req = self.req;
        if matches!(req.baseline, Baseline::Folder { .. }) && !matches!(req.method, Method::ExpectedGradients { .. }) {
            bail!(
                "baseline \"{}\" draws many baselines and only suits expected-gradients; use mean:DIR for the folder's mean image",
                req.baseline.label()
            );
        }
        Ok(match &req.method {
            Method::Gradient | Method::GradientXInput => {
                self.ctl.begin(1);
                let g = self.grads(std::slice::from_ref(self.x))?.remove(0);
                let map = if matches!(req.method, Method::Gradient) { g.grad } else { &g.grad * self.x };
                Outcome { map, steps: None, score_baseline: None, gap: None }
            }
            Method::IntegratedGradients { steps, rule, adaptive } => {
                integrated::integrated_gradients(self, &self.baseline(0)?, *steps, *rule, *adaptive)?
            }
            Method::SmoothGrad { noise, samples, seed } => sampling::smoothgrad(self, *noise, *samples, *seed)?,
            Method::ExpectedGradients { samples, seed } => {
                let draws = |d: u64| self.baseline(d);
                sampling::expected_gradients(self, &draws, req.baseline.is_distribution(), *samples, *seed)?
            }
            Method::Occlusion { window, stride } => occlusion::occlusion(self, &self.baseline(0)?, *window, *stride)?,
        })
    }

    fn reading(&self, out: Outcome, scores: &Array1<f32>, labels: &[String], started: Instant) -> Result<Reading> {
        let (model, req) = (self.model, self.req);
        let (map, channel_axis) = match self.input {
            Input::Picture { feeder, .. } => (feeder.map_back(&out.map)?.into_dyn(), Some(2)),
            Input::Tensor { .. } => (out.map.clone(), reading::channel_axis_of(self.x.shape(), self.spatial)),
        };
        let target = self.scorer.target;
        Ok(Reading {
            method: req.method.name().into(),
            settings: req.method.clone(),
            baseline: req.method.uses_baseline().then(|| req.baseline.label()),
            steps: out.steps,
            target: Target { index: target, label: labels.get(target).cloned().unwrap_or_default() },
            score_kind: req.score,
            score_input: self.score_x,
            score_baseline: out.score_baseline,
            attribution_sum: out.map.iter().map(|v| *v as f64).sum(),
            completeness_gap: out.gap,
            elapsed_ms: started.elapsed().as_secs_f64() * 1e3,
            model_sha256: model.sha256().to_string(),
            model_file: model.path().file_name().map(|f| f.to_string_lossy().into_owned()).unwrap_or_default(),
            input: self.input.name(),
            input_shape: self.x.shape().to_vec(),
            scores: scores.to_vec(),
            labels: labels.to_vec(),
            map,
            tensor_map: out.map,
            channel_axis,
        })
    }
}
