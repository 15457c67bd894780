//! Attribution methods. One entry point, [`explain`], turns a model, an input and a
//! [`Request`] into a [`Reading`].
//!
//! Every method works on the model-input tensor through [`Model::gradient_many`] and
//! [`Model::forward_many`]; maps for pictures are then carried back onto the picture with the
//! feeder's adjoint resampling ([`Feeder::map_back`]), which keeps the map's total.
//! Sign convention: positive attribution raises the target score (supporting), negative
//! lowers it (opposing).

pub mod agree;
mod baseline;
mod quadrature;

pub use baseline::{BASELINE_FORMS, Baseline, blur_grid, guess_spatial_axes};
pub use quadrature::{Rule, gauss_legendre};

use std::path::PathBuf;
use std::time::Instant;

use anyhow::{Context, Result, bail};
use ndarray::{Array1, Array2, Array3, ArrayD, Axis};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal, Uniform};
use serde::{Deserialize, Serialize};

use crate::control::Control;
use crate::feed::{FeedCard, Feeder, OutputKind, Picture};
use crate::model::{Gradient, Model, Tap};
use baseline::{FolderCache, Space};

/// Integrated-gradients step count (the start of the default adaptive refinement) and the rule
/// for a fixed step count.
pub const DEFAULT_STEPS: usize = 64;
pub const DEFAULT_RULE: Rule = Rule::GaussLegendre;
/// Default completeness-gap target of adaptive integrated gradients: the paper's advice is
/// 5% (Sundararajan et al. 2017, section 3); we ask for 1%.
pub const DEFAULT_ADAPTIVE_GAP: f32 = 0.01;

/// An attribution method and its settings.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "name", rename_all = "kebab-case")]
pub enum Method {
    /// ∂F/∂x (Simonyan, Vedaldi, Zisserman 2014).
    Gradient,
    /// x ⊙ ∂F/∂x.
    GradientXInput,
    /// (x − x′) ⊙ ∫₀¹ ∂F/∂x(x′ + α(x − x′)) dα (Sundararajan, Taly, Yan 2017).
    IntegratedGradients {
        steps: usize,
        rule: Rule,
        /// Refine until the completeness gap is below this (relative); `steps` is the start.
        adaptive: Option<f32>,
    },
    /// Mean gradient over noisy copies of the input (Smilkov et al. 2017); `noise` is the
    /// standard deviation as a share of the input's value range.
    SmoothGrad { noise: f32, samples: usize, seed: u64 },
    /// E over baselines x′ and α ~ U(0,1) of (x − x′) ⊙ ∂F/∂x(x′ + α(x − x′)) (Erion et al.
    /// 2021); baselines come from the request's baseline (a folder or a noise family).
    ExpectedGradients { samples: usize, seed: u64 },
    /// F(x) − F(x with a window replaced by the baseline), averaged over the windows covering
    /// each pixel (Zeiler and Fergus 2014).
    Occlusion { window: usize, stride: usize },
}

impl Method {
    pub fn name(&self) -> &'static str {
        match self {
            Method::Gradient => "gradient",
            Method::GradientXInput => "gradient-x-input",
            Method::IntegratedGradients { .. } => "integrated-gradients",
            Method::SmoothGrad { .. } => "smoothgrad",
            Method::ExpectedGradients { .. } => "expected-gradients",
            Method::Occlusion { .. } => "occlusion",
        }
    }

    /// Whether the method measures against a baseline.
    pub fn uses_baseline(&self) -> bool {
        matches!(
            self,
            Method::IntegratedGradients { .. } | Method::ExpectedGradients { .. } | Method::Occlusion { .. }
        )
    }

    /// Whether the method needs the reverse pass.
    pub fn needs_gradient(&self) -> bool {
        !matches!(self, Method::Occlusion { .. })
    }

    /// The default reading: integrated gradients refined from [`DEFAULT_STEPS`] midpoint steps
    /// until the completeness gap is under [`DEFAULT_ADAPTIVE_GAP`]. A fixed count is not enough
    /// on ReLU networks: 64 Gauss–Legendre steps left gaps of 1.4–3.4 % on the control sample
    /// model, where refinement needed 192–576 steps (measured with `spurion explain --adaptive`).
    pub fn integrated_gradients() -> Method {
        Method::refined_integrated_gradients(DEFAULT_STEPS, DEFAULT_ADAPTIVE_GAP)
    }

    /// Integrated gradients refined from `steps` until the completeness gap is under `gap`
    /// (the refinement triples midpoint cells, so the rule is the midpoint rule).
    pub fn refined_integrated_gradients(steps: usize, gap: f32) -> Method {
        Method::IntegratedGradients { steps, rule: Rule::Midpoint, adaptive: Some(gap) }
    }
}

pub const METHOD_NAMES: &[&str] =
    &["integrated-gradients", "occlusion", "gradient", "gradient-x-input", "smoothgrad", "expected-gradients"];

/// Which class the reading explains.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum TargetSpec {
    Top,
    Index(usize),
    Label(String),
}

impl TargetSpec {
    /// `top`, a class index, or a label.
    pub fn parse(s: &str) -> TargetSpec {
        if s == "top" {
            TargetSpec::Top
        } else if let Ok(i) = s.parse::<usize>() {
            TargetSpec::Index(i)
        } else {
            TargetSpec::Label(s.to_string())
        }
    }
}

/// Which number is the score being explained.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ScoreKind {
    /// The model's output as it is.
    Raw,
    /// Softmax of the output (the output itself if the model already gives probabilities).
    Softmax,
    /// The logits: the input of a final softmax if the graph ends in one, else the raw output
    /// of a logits model. Avoids the saturated-softmax gradients of confident models.
    Logits,
}

impl ScoreKind {
    pub fn parse(s: &str) -> Result<ScoreKind> {
        Ok(match s {
            "raw" => ScoreKind::Raw,
            "softmax" | "probability" => ScoreKind::Softmax,
            "logits" | "logit" => ScoreKind::Logits,
            _ => bail!("unknown score \"{s}\"; use raw, softmax or logits"),
        })
    }
    pub fn name(self) -> &'static str {
        match self {
            ScoreKind::Raw => "raw",
            ScoreKind::Softmax => "softmax",
            ScoreKind::Logits => "logits",
        }
    }
}

/// Everything that decides a reading besides the model and the input.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Request {
    pub method: Method,
    pub baseline: Baseline,
    pub target: TargetSpec,
    pub score: ScoreKind,
}

impl Default for Request {
    fn default() -> Self {
        Request {
            method: Method::integrated_gradients(),
            baseline: Baseline::Black,
            target: TargetSpec::Top,
            score: ScoreKind::Logits,
        }
    }
}

/// What is explained: a picture fed through a feed card, or a tensor fed as is.
#[derive(Clone, Debug)]
pub enum Input {
    Picture { picture: Picture, feeder: Feeder },
    Tensor { tensor: ArrayD<f32>, name: String },
}

impl Input {
    /// A picture, planned through `card` (checked against the model by the caller).
    pub fn picture(picture: Picture, card: &FeedCard) -> Result<Input> {
        let feeder = Feeder::for_picture(card, &picture).with_context(|| format!("feeding {}", picture.name()))?;
        Ok(Input::Picture { picture, feeder })
    }

    pub fn tensor(tensor: ArrayD<f32>, name: impl Into<String>) -> Input {
        Input::Tensor { tensor, name: name.into() }
    }

    pub fn name(&self) -> String {
        match self {
            Input::Picture { picture, .. } => picture.name(),
            Input::Tensor { name, .. } => name.clone(),
        }
    }

    /// The model-input tensor.
    pub fn model_tensor(&self) -> Result<ArrayD<f32>> {
        match self {
            Input::Picture { picture, feeder } => feeder.tensor(&picture.pixels),
            Input::Tensor { tensor, .. } => Ok(tensor.clone()),
        }
    }

    /// The spatial axes of the model-input tensor.
    pub fn spatial_axes(&self) -> Result<[usize; 2]> {
        match self {
            Input::Picture { feeder, .. } => Ok(match feeder.card().input.layout {
                crate::feed::Layout::Nchw => [2, 3],
                crate::feed::Layout::Nhwc => [1, 2],
            }),
            Input::Tensor { tensor, .. } => guess_spatial_axes(tensor.shape()),
        }
    }
}

/// Target class of a reading.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Target {
    pub index: usize,
    pub label: String,
}

/// One attribution result for one image: method, baseline, target, settings and the map.
#[derive(Clone, Debug, Serialize)]
pub struct Reading {
    pub method: String,
    /// The method with all its settings.
    pub settings: Method,
    pub baseline: Option<String>,
    /// Integrated-gradients steps actually used (adaptive: the count it needed), samples for
    /// sampling methods, forwards for occlusion.
    pub steps: Option<usize>,
    pub target: Target,
    pub score_kind: ScoreKind,
    pub score_input: f32,
    pub score_baseline: Option<f32>,
    pub attribution_sum: f64,
    /// |sum − (F(x) − F(x′))| / |F(x) − F(x′)|; null for methods without completeness.
    pub completeness_gap: Option<f64>,
    pub elapsed_ms: f64,
    pub model_sha256: String,
    pub model_file: String,
    pub input: String,
    pub input_shape: Vec<usize>,
    /// The score vector at the input (the tapped output), for target lists.
    pub scores: Vec<f32>,
    pub labels: Vec<String>,
    /// Image H×W×C for pictures; the model-input shape for tensors.
    #[serde(skip)]
    pub map: ArrayD<f32>,
    /// The map on the model-input tensor.
    #[serde(skip)]
    pub tensor_map: ArrayD<f32>,
    /// Which axis of `map` holds channels (summed by [`Reading::map2d`]).
    #[serde(skip)]
    pub channel_axis: Option<usize>,
}

impl Reading {
    /// The map on the image grid, channels summed (H×W).
    pub fn map2d(&self) -> Array2<f32> {
        let m = match self.channel_axis {
            Some(a) => self.map.sum_axis(Axis(a)),
            None => self.map.clone(),
        };
        let m = squeeze_to_2d(m);
        m.into_dimensionality::<ndarray::Ix2>().expect("map reduces to two dimensions")
    }
}

fn squeeze_to_2d(mut m: ArrayD<f32>) -> ArrayD<f32> {
    while m.ndim() > 2 {
        match m.shape().iter().position(|&d| d == 1) {
            Some(a) => m = m.index_axis_move(Axis(a), 0),
            None => break,
        }
    }
    m
}

/// Resolves the score kind against the model and card: which tap, and how scores and seeds
/// follow from the tapped vector.
#[derive(Clone, Copy, Debug)]
pub struct Scorer {
    pub tap: Tap,
    softmax: bool,
    pub target: usize,
}

impl Scorer {
    pub fn new(model: &Model, card: Option<&FeedCard>, kind: ScoreKind, target: usize) -> Result<Scorer> {
        let probabilities = model.ends_in_softmax()
            || card.map(|c| c.output.kind == OutputKind::Probabilities).unwrap_or(false);
        let (tap, softmax) = match kind {
            ScoreKind::Raw => (Tap::Output, false),
            ScoreKind::Softmax => (Tap::Output, !probabilities),
            ScoreKind::Logits if model.ends_in_softmax() => (Tap::BeforeSoftmax, false),
            ScoreKind::Logits if probabilities => bail!(
                "the score \"logits\" needs the logits, but model {} gives probabilities and its graph does \
                 not end in a softmax spurion can step before. Use --score raw or --score softmax.",
                model.path().display()
            ),
            ScoreKind::Logits => (Tap::Output, false),
        };
        Ok(Scorer { tap, softmax, target })
    }

    /// The score from a tapped vector.
    pub fn score(&self, v: &Array1<f32>) -> f32 {
        if self.softmax { softmax(v)[self.target] } else { v[self.target] }
    }

    /// The cotangent of the tapped vector: e_t, or p_t (e_t − p) through a softmax.
    pub fn seed(&self, v: &Array1<f32>) -> Array1<f32> {
        if self.softmax {
            let p = softmax(v);
            let pt = p[self.target];
            let mut s = p.mapv(|q| -pt * q);
            s[self.target] += pt;
            s
        } else {
            let mut s = Array1::zeros(v.len());
            s[self.target] = 1.0;
            s
        }
    }
}

pub fn softmax(v: &Array1<f32>) -> Array1<f32> {
    let m = v.fold(f32::NEG_INFINITY, |a, b| a.max(*b));
    let e = v.mapv(|x| ((x - m) as f64).exp());
    let s = e.sum();
    e.mapv(|x| (x / s) as f32)
}

/// Picks the target index from the spec and the scores at the input.
pub fn resolve_target(spec: &TargetSpec, scores: &Array1<f32>, labels: &[String]) -> Result<usize> {
    match spec {
        TargetSpec::Top => Ok(scores
            .iter()
            .enumerate()
            .fold((0, f32::NEG_INFINITY), |b, (i, v)| if *v > b.1 { (i, *v) } else { b })
            .0),
        TargetSpec::Index(i) if *i < scores.len() => Ok(*i),
        TargetSpec::Index(i) => bail!("target class {i} does not exist: the model has {} outputs (0..{})", scores.len(), scores.len() - 1),
        TargetSpec::Label(l) => labels
            .iter()
            .position(|x| x.eq_ignore_ascii_case(l))
            .with_context(|| {
                if labels.is_empty() {
                    format!("target \"{l}\" is not a class index and the model has no labels (add them to its feed card)")
                } else {
                    format!("target \"{l}\" is not one of the labels: {}", labels.join(", "))
                }
            }),
    }
}

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
    let target = resolve_target(&req.target, &scores, &labels)?;
    let scorer = Scorer { target, ..probe };
    let cache = FolderCache::default();
    let grid = match input {
        Input::Picture { feeder, picture } => Some((feeder, feeder.prepare(&picture.pixels)?)),
        Input::Tensor { .. } => None,
    };
    let grid = grid.as_ref().map(|(f, g)| (*f, g));
    finish(model, input, req, &scorer, &x, &scores, &labels, &cache, ctl, started, grid)
}

#[allow(clippy::too_many_arguments)]
fn finish(
    model: &Model,
    input: &Input,
    req: &Request,
    scorer: &Scorer,
    x: &ArrayD<f32>,
    scores: &Array1<f32>,
    labels: &[String],
    cache: &FolderCache,
    ctl: &Control,
    started: Instant,
    grid: Option<(&Feeder, &Array3<f32>)>,
) -> Result<Reading> {
    let spatial = input.spatial_axes()?;
    let space = match grid {
        Some((feeder, g)) => Space::Grid { feeder, grid: g },
        None => Space::Tensor { tensor: x, spatial },
    };
    if matches!(req.baseline, Baseline::Folder { .. }) && !matches!(req.method, Method::ExpectedGradients { .. }) {
        bail!(
            "baseline \"{}\" draws many baselines and only suits expected-gradients; use mean:DIR for the folder's mean image",
            req.baseline.label()
        );
    }
    let make_baseline = |draw: u64| baseline::build(&req.baseline, &space, draw, cache);
    let score_x = scorer.score(scores);
    let out = match &req.method {
        Method::Gradient | Method::GradientXInput => {
            ctl.begin(1);
            let g = grads(model, scorer, std::slice::from_ref(x), ctl)?.remove(0);
            let map = if matches!(req.method, Method::Gradient) { g.grad } else { &g.grad * x };
            Outcome { map, steps: None, score_baseline: None, gap: None }
        }
        Method::IntegratedGradients { steps, rule, adaptive } => {
            let xb = make_baseline(0)?;
            integrated_gradients(model, scorer, x, &xb, *steps, *rule, *adaptive, score_x, ctl)?
        }
        Method::SmoothGrad { noise, samples, seed } => {
            let n = (*samples).max(1);
            let (lo, hi) = x.iter().fold((f32::INFINITY, f32::NEG_INFINITY), |(a, b), v| (a.min(*v), b.max(*v)));
            let sd = noise * (hi - lo).max(f32::EPSILON);
            let mut rng = ChaCha8Rng::seed_from_u64(*seed);
            let xs: Vec<ArrayD<f32>> = (0..n)
                .map(|_| {
                    x.mapv(|v| {
                        let z: f32 = StandardNormal.sample(&mut rng);
                        v + sd * z
                    })
                })
                .collect();
            ctl.begin(n as u64);
            let gs = grads(model, scorer, &xs, ctl)?;
            let mut acc = ArrayD::<f32>::zeros(x.raw_dim());
            for g in &gs {
                acc += &g.grad;
            }
            Outcome { map: acc / n as f32, steps: Some(n), score_baseline: None, gap: None }
        }
        Method::ExpectedGradients { samples, seed } => {
            let n = (*samples).max(1);
            let mut rng = ChaCha8Rng::seed_from_u64(*seed);
            let unif = Uniform::new(0.0f32, 1.0).expect("valid range");
            let mut bases = Vec::with_capacity(n);
            let mut points = Vec::with_capacity(n);
            for k in 0..n {
                let draw = if req.baseline.is_distribution() { k as u64 } else { 0 };
                let b = make_baseline(draw ^ (*seed << 20))?;
                let a = unif.sample(&mut rng);
                points.push(&b + &((x - &b) * a));
                bases.push(b);
            }
            ctl.begin(2 * n as u64);
            let gs = grads(model, scorer, &points, ctl)?;
            let fb = model.forward_many(&bases, scorer.tap, ctl)?;
            let mut acc = ArrayD::<f32>::zeros(x.raw_dim());
            for (g, b) in gs.iter().zip(&bases) {
                acc += &(&g.grad * &(x - b));
            }
            let map = acc / n as f32;
            let mean_fb = fb.iter().map(|v| scorer.score(v) as f64).sum::<f64>() / n as f64;
            let gap = gap_of(map.sum() as f64, score_x as f64 - mean_fb);
            Outcome { map, steps: Some(n), score_baseline: Some(mean_fb as f32), gap }
        }
        Method::Occlusion { window, stride } => {
            let xb = make_baseline(0)?;
            occlusion(model, scorer, x, &xb, spatial, *window, *stride, score_x, ctl)?
        }
    };
    let (map, channel_axis) = match input {
        Input::Picture { feeder, .. } => (feeder.map_back(&out.map)?.into_dyn(), Some(2)),
        Input::Tensor { .. } => (out.map.clone(), channel_axis_of(x.shape(), spatial)),
    };
    Ok(Reading {
        method: req.method.name().into(),
        settings: req.method.clone(),
        baseline: req.method.uses_baseline().then(|| req.baseline.label()),
        steps: out.steps,
        target: Target { index: scorer.target, label: labels.get(scorer.target).cloned().unwrap_or_default() },
        score_kind: req.score,
        score_input: score_x,
        score_baseline: out.score_baseline,
        attribution_sum: out.map.iter().map(|v| *v as f64).sum(),
        completeness_gap: out.gap,
        elapsed_ms: started.elapsed().as_secs_f64() * 1e3,
        model_sha256: model.sha256().to_string(),
        model_file: model.path().file_name().map(|f| f.to_string_lossy().into_owned()).unwrap_or_default(),
        input: input.name(),
        input_shape: x.shape().to_vec(),
        scores: scores.to_vec(),
        labels: labels.to_vec(),
        map,
        tensor_map: out.map,
        channel_axis,
    })
}

fn channel_axis_of(shape: &[usize], spatial: [usize; 2]) -> Option<usize> {
    (0..shape.len()).rev().find(|a| !spatial.contains(a) && shape[*a] > 1).or(Some(0).filter(|_| shape.len() > 2))
}

struct Outcome {
    map: ArrayD<f32>,
    steps: Option<usize>,
    score_baseline: Option<f32>,
    gap: Option<f64>,
}

fn gap_of(sum: f64, diff: f64) -> Option<f64> {
    if diff.abs() < 1e-12 { None } else { Some((sum - diff).abs() / diff.abs()) }
}

fn grads(model: &Model, scorer: &Scorer, xs: &[ArrayD<f32>], ctl: &Control) -> Result<Vec<Gradient>> {
    let s = *scorer;
    model.gradient_many(xs, s.tap, &move |v: &Array1<f32>| s.seed(v), ctl)
}

/// Sum over (alpha, weight) nodes of weight · ∂F/∂x at x′ + alpha (x − x′).
fn path_sum(model: &Model, scorer: &Scorer, x: &ArrayD<f32>, xb: &ArrayD<f32>, nodes: &[(f64, f64)], ctl: &Control) -> Result<ArrayD<f32>> {
    let diff = x - xb;
    let mut acc = ArrayD::<f32>::zeros(x.raw_dim());
    // Chunks bound memory on large inputs and let cancel act between them.
    for chunk in nodes.chunks(16) {
        ctl.check()?;
        let pts: Vec<ArrayD<f32>> = chunk.iter().map(|(a, _)| xb + &(&diff * *a as f32)).collect();
        let gs = grads(model, scorer, &pts, ctl)?;
        for (g, (_, w)) in gs.iter().zip(chunk) {
            acc.scaled_add(*w as f32, &g.grad);
        }
    }
    Ok(acc)
}

#[allow(clippy::too_many_arguments)]
fn integrated_gradients(
    model: &Model,
    scorer: &Scorer,
    x: &ArrayD<f32>,
    xb: &ArrayD<f32>,
    steps: usize,
    rule: Rule,
    adaptive: Option<f32>,
    score_x: f32,
    ctl: &Control,
) -> Result<Outcome> {
    let steps = steps.max(1);
    let fb = scorer.score(&model.forward(xb, scorer.tap)?);
    let diff_scores = score_x as f64 - fb as f64;
    let diff = x - xb;
    match adaptive {
        None => {
            let nodes = rule.nodes(steps);
            ctl.begin(nodes.len() as u64);
            let avg = path_sum(model, scorer, x, xb, &nodes, ctl)?;
            let map = avg * &diff;
            let gap = gap_of(map.sum() as f64, diff_scores);
            Ok(Outcome { map, steps: Some(steps), score_baseline: Some(fb), gap })
        }
        Some(target_gap) => {
            // Midpoint rule refined by tripling the cell count: the old midpoints are among the
            // new ones, so every gradient computed so far is reused.
            const MAX_STEPS: usize = 2187;
            let mut m = steps;
            ctl.begin(m as u64);
            let mut sum = path_sum(model, scorer, x, xb, &Rule::Midpoint.nodes(m), ctl)? * (m as f32);
            loop {
                let map = &sum / m as f32 * &diff;
                let gap = gap_of(map.sum() as f64, diff_scores);
                let done = gap.map(|g| g <= target_gap as f64).unwrap_or(true);
                if done || m * 3 > MAX_STEPS {
                    return Ok(Outcome { map, steps: Some(m), score_baseline: Some(fb), gap });
                }
                let m3 = m * 3;
                let new: Vec<(f64, f64)> = (0..m3)
                    .filter(|k| k % 3 != 1)
                    .map(|k| ((k as f64 + 0.5) / m3 as f64, 1.0))
                    .collect();
                ctl.grow(new.len() as u64);
                sum += &path_sum(model, scorer, x, xb, &new, ctl)?;
                m = m3;
            }
        }
    }
}

/// Start positions of windows along one axis: every `stride`, plus the last full window so
/// every pixel is covered.
pub fn window_starts(n: usize, window: usize, stride: usize) -> Vec<usize> {
    if window >= n {
        return vec![0];
    }
    let mut v: Vec<usize> = (0..=n - window).step_by(stride.max(1)).collect();
    if *v.last().unwrap() != n - window {
        v.push(n - window);
    }
    v
}

#[allow(clippy::too_many_arguments)]
fn occlusion(
    model: &Model,
    scorer: &Scorer,
    x: &ArrayD<f32>,
    xb: &ArrayD<f32>,
    spatial: [usize; 2],
    window: usize,
    stride: usize,
    score_x: f32,
    ctl: &Control,
) -> Result<Outcome> {
    if window == 0 || stride == 0 {
        bail!("occlusion window and stride must be at least 1 pixel");
    }
    let (h, w) = (x.shape()[spatial[0]], x.shape()[spatial[1]]);
    let ys = window_starts(h, window, stride);
    let xs = window_starts(w, window, stride);
    let wins: Vec<(usize, usize)> = ys.iter().flat_map(|y| xs.iter().map(move |x| (*y, *x))).collect();
    ctl.begin(wins.len() as u64 + 1);
    let fb = scorer.score(&model.forward(xb, scorer.tap)?);
    ctl.advance(1);
    let mut total = Array2::<f64>::zeros((h, w));
    let mut count = Array2::<f64>::zeros((h, w));
    // All windows in one call: the incremental plan is prepared once for the whole set.
    let outs = model.occluded_outputs(x, xb, spatial, window, &wins, scorer.tap, ctl)?;
    for (&(y0, x0), o) in wins.iter().zip(&outs) {
        let d = (score_x - scorer.score(o)) as f64;
        let (y1, x1) = ((y0 + window).min(h), (x0 + window).min(w));
        for yy in y0..y1 {
            for xx in x0..x1 {
                total[[yy, xx]] += d;
                count[[yy, xx]] += 1.0;
            }
        }
    }
    let per_pixel = Array2::from_shape_fn((h, w), |(i, j)| (total[[i, j]] / count[[i, j]].max(1.0)) as f32);
    // Spread each pixel's value evenly over its channels, so channel sums give the pixel map.
    let channels: usize = x.len() / (h * w);
    let map = ArrayD::from_shape_fn(x.raw_dim(), |i| per_pixel[[i[spatial[0]], i[spatial[1]]]] / channels as f32);
    Ok(Outcome { map, steps: Some(wins.len()), score_baseline: Some(fb), gap: None })
}

/// Where to write a reading's files.
#[derive(Clone, Debug)]
pub struct OutDir(pub PathBuf);

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn softmax_seed_is_the_softmax_jacobian_row() {
        // d p_t / d z_j = p_t (δ_tj − p_j) (common practice).
        let s = Scorer { tap: Tap::Output, softmax: true, target: 1 };
        let z = ndarray::arr1(&[0.3f32, -1.2, 2.0]);
        let seed = s.seed(&z);
        let h = 1e-3f32;
        for j in 0..3 {
            let mut a = z.clone();
            a[j] += h;
            let mut b = z.clone();
            b[j] -= h;
            let fd = (s.score(&a) - s.score(&b)) / (2.0 * h);
            assert!((fd - seed[j]).abs() < 1e-4, "j={j} fd={fd} seed={}", seed[j]);
        }
    }

    #[test]
    fn windows_cover_every_pixel() {
        assert_eq!(window_starts(10, 4, 3), vec![0, 3, 6]);
        assert_eq!(window_starts(11, 4, 3), vec![0, 3, 6, 7]);
        assert_eq!(window_starts(3, 4, 3), vec![0]);
    }

    #[test]
    fn targets_resolve_by_index_label_and_top() {
        let s = ndarray::arr1(&[0.1f32, 0.7, 0.2]);
        let l: Vec<String> = ["a", "Finding present", "c"].iter().map(|s| s.to_string()).collect();
        assert_eq!(resolve_target(&TargetSpec::Top, &s, &l).unwrap(), 1);
        assert_eq!(resolve_target(&TargetSpec::parse("2"), &s, &l).unwrap(), 2);
        assert_eq!(resolve_target(&TargetSpec::parse("finding present"), &s, &l).unwrap(), 1);
        assert!(resolve_target(&TargetSpec::Index(3), &s, &l).unwrap_err().to_string().contains("0..2"));
        assert!(resolve_target(&TargetSpec::parse("nope"), &s, &l).unwrap_err().to_string().contains("Finding present"));
    }
}
