//! The settings of one reading, as flags: `spurion explain` and `spurion sweep` take the same
//! ones with the same defaults (`methods::defaults`, which the inspector's form reads too).

use anyhow::{Result, bail};
use clap::Args;
use clap::builder::RangedU64ValueParser;

use crate::methods::catalog::{MethodKind, baseline_forms, method_names};
use crate::methods::defaults as d;
use crate::methods::{Baseline, Method, Request, Rule, ScoreKind, TargetSpec};

#[derive(Args, Debug, Clone)]
pub struct ReadingArgs {
    #[arg(long, default_value = d::METHOD_TEXT, help = method_names())]
    pub method: String,
    #[arg(long, default_value = d::BASELINE_TEXT, help = format!("{} (folder: expected-gradients draws). The default, uniform noise with {} draws averaged: a black baseline gives a dark frame no attribution, and one fixed baseline leaves its own pattern in the map whatever the model", baseline_forms(), d::IG_DRAWS))]
    pub baseline: String,
    /// Integrated-gradients steps, a fixed count. Without --steps, integrated gradients start at
    /// 8 midpoint steps and add gradients where the path needs them until the completeness gap
    /// is below 1% (as --adaptive does), up to 1024 gradients for the whole reading (a noise
    /// baseline's draws share them); a reading that stops at that cap says so.
    #[arg(long, value_parser = RangedU64ValueParser::<usize>::new().range(1..))]
    pub steps: Option<usize>,
    /// Integrated-gradients quadrature for a fixed --steps: gauss-legendre | midpoint | trapezoid.
    #[arg(long, default_value = d::RULE_TEXT)]
    pub rule: String,
    /// Refine integrated gradients (from --steps midpoint steps, default 8) until the
    /// completeness gap is below GAP (relative; default 0.01); the default when --steps is not given.
    #[arg(long, num_args = 0..=1, default_missing_value = "0.01", value_name = "GAP")]
    pub adaptive: Option<f32>,
    /// Occlusion window side in model-input pixels.
    #[arg(long, default_value_t = d::WINDOW, value_parser = RangedU64ValueParser::<usize>::new().range(1..))]
    pub window: usize,
    /// Occlusion stride in model-input pixels.
    #[arg(long, default_value_t = d::STRIDE, value_parser = RangedU64ValueParser::<usize>::new().range(1..))]
    pub stride: usize,
    /// SmoothGrad noise, as a share of the input's value range.
    #[arg(long, default_value_t = d::SMOOTHGRAD_NOISE)]
    pub noise: f32,
    /// Samples for SmoothGrad and expected gradients.
    #[arg(long, default_value_t = d::SAMPLES, value_parser = RangedU64ValueParser::<usize>::new().range(1..))]
    pub samples: usize,
    /// Seed for SmoothGrad noise and expected-gradient draws.
    #[arg(long, default_value_t = d::SEED)]
    pub seed: u64,
    /// top | a class index | a label from the feed card.
    #[arg(long, default_value = "top")]
    pub target: String,
    /// logits | softmax | raw.
    #[arg(long, default_value = d::SCORE_TEXT)]
    pub score: String,
}

impl ReadingArgs {
    pub fn method(&self) -> Result<Method> {
        let Some(kind) = MethodKind::parse(&self.method) else {
            bail!("unknown method \"{}\"; use one of: {}", self.method, method_names());
        };
        Ok(match kind {
            MethodKind::IntegratedGradients => match (self.steps, self.adaptive) {
                (Some(steps), None) => Method::IntegratedGradients { steps, rule: Rule::parse(&self.rule)?, adaptive: None },
                (steps, gap) => {
                    let gap = gap.unwrap_or(d::IG_GAP);
                    if !(gap > 0.0 && gap.is_finite()) {
                        bail!("--adaptive {gap}: the completeness gap to reach must be a number above 0, e.g. 0.01");
                    }
                    Method::refined_integrated_gradients(steps.unwrap_or(d::IG_START_STEPS), gap)
                }
            },
            MethodKind::Occlusion => Method::Occlusion { window: self.window, stride: self.stride },
            MethodKind::Gradient => Method::Gradient,
            MethodKind::GradientXInput => Method::GradientXInput,
            MethodKind::SmoothGrad => {
                if !(self.noise >= 0.0 && self.noise.is_finite()) {
                    bail!("--noise {}: the SmoothGrad noise must be a share of the value range, 0 or more", self.noise);
                }
                Method::SmoothGrad { noise: self.noise, samples: self.samples, seed: self.seed }
            }
            MethodKind::ExpectedGradients => Method::ExpectedGradients { samples: self.samples, seed: self.seed },
        })
    }

    /// The engine request these flags ask for.
    pub fn request(&self) -> Result<Request> {
        Ok(Request {
            method: self.method()?,
            baseline: Baseline::parse(&self.baseline)?,
            target: TargetSpec::parse(&self.target),
            score: ScoreKind::parse(&self.score)?,
        })
    }
}
