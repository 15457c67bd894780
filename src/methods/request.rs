//! What a reading is asked for: the method with its settings, the baseline, the target class
//! and the score.

use anyhow::{Result, bail};
use serde::{Deserialize, Serialize};

use super::catalog::{MethodEntry, MethodKind};
use super::{Baseline, Rule, defaults};

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
    pub fn kind(&self) -> MethodKind {
        match self {
            Method::Gradient => MethodKind::Gradient,
            Method::GradientXInput => MethodKind::GradientXInput,
            Method::IntegratedGradients { .. } => MethodKind::IntegratedGradients,
            Method::SmoothGrad { .. } => MethodKind::SmoothGrad,
            Method::ExpectedGradients { .. } => MethodKind::ExpectedGradients,
            Method::Occlusion { .. } => MethodKind::Occlusion,
        }
    }

    /// The method's row of [`super::catalog::METHODS`].
    pub fn entry(&self) -> &'static MethodEntry {
        self.kind().entry()
    }

    pub fn name(&self) -> &'static str {
        self.entry().name
    }

    /// Whether the method measures against a baseline.
    pub fn uses_baseline(&self) -> bool {
        self.entry().uses_baseline
    }

    /// Whether the method needs the reverse pass.
    pub fn needs_gradient(&self) -> bool {
        self.entry().needs_gradient
    }

    /// The default reading: integrated gradients refined from [`defaults::IG_START_STEPS`]
    /// midpoint steps until the completeness gap is under [`defaults::IG_GAP`]. A fixed count is
    /// not enough on ReLU networks: 64 Gauss–Legendre steps left gaps of 1.4–3.4 % on the control
    /// sample model, where refinement needed 192–576 steps (measured with `spurion explain --adaptive`).
    pub fn integrated_gradients() -> Method {
        Method::refined_integrated_gradients(defaults::IG_START_STEPS, defaults::IG_GAP)
    }

    /// Integrated gradients refined from `steps` equal cells until the completeness gap is under
    /// `gap` (each cell holds one midpoint gradient, so the rule is the midpoint rule; see
    /// `methods/adaptive.rs`).
    pub fn refined_integrated_gradients(steps: usize, gap: f32) -> Method {
        Method::IntegratedGradients { steps, rule: Rule::Midpoint, adaptive: Some(gap) }
    }
}

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
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
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
    pub const ALL: [ScoreKind; 3] = [ScoreKind::Raw, ScoreKind::Softmax, ScoreKind::Logits];

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
    /// The name shown to people.
    pub fn title(self) -> &'static str {
        match self {
            ScoreKind::Raw => "output as given",
            ScoreKind::Softmax => "softmax probability",
            ScoreKind::Logits => "logit (before softmax)",
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
            baseline: defaults::BASELINE,
            target: TargetSpec::Top,
            score: defaults::SCORE,
        }
    }
}

impl Request {
    /// The request as one canonical line of text: equal requests give equal text, so it can key
    /// caches (the settings hold floats, which do not hash).
    pub fn key_text(&self) -> String {
        serde_json::to_string(self).expect("a request serialises")
    }

    /// One line describing the reading for people: method, its settings, the baseline.
    pub fn describe(&self) -> String {
        let params = match &self.method {
            Method::Gradient | Method::GradientXInput => vec![],
            Method::IntegratedGradients { steps, adaptive: Some(gap), .. } => {
                vec![format!("refined to a {} % gap", gap * 100.0), format!("from {steps} steps")]
            }
            Method::IntegratedGradients { steps, rule, adaptive: None } => vec![format!("steps {steps}"), rule.name().to_string()],
            Method::SmoothGrad { noise, samples, seed } => vec![format!("samples {samples}"), format!("noise {noise}"), format!("seed {seed}")],
            Method::ExpectedGradients { samples, seed } => vec![format!("samples {samples}"), format!("seed {seed}")],
            Method::Occlusion { window, stride } => vec![format!("window {window}"), format!("stride {stride}")],
        };
        let mut s = self.method.entry().title.to_string();
        if !params.is_empty() {
            s.push_str(&format!(" ({})", params.join(", ")));
        }
        if self.method.uses_baseline() {
            s.push_str(&format!(", baseline {}", self.baseline.title()));
            if matches!(self.method, Method::IntegratedGradients { .. }) && self.baseline.is_distribution() {
                s.push_str(&format!(" ({} draws averaged)", defaults::IG_DRAWS));
            }
        }
        s
    }
}
