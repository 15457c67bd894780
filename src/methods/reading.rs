//! One attribution result for one image: method, baseline, target, settings and the map.

use ndarray::{Array2, ArrayD, Axis};
use serde::{Deserialize, Serialize};

use super::{Method, ScoreKind};

/// Target class of a reading.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Target {
    pub index: usize,
    pub label: String,
}

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
    /// How the gap was reached (integrated gradients): the target, whether the refinement got
    /// there before its cap, the gradients and forwards it took. Absent for other methods.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub completeness: Option<Completeness>,
    pub elapsed_ms: f64,
    pub model_sha256: String,
    pub model_file: String,
    /// The ONNX name of the model output the reading scores.
    #[serde(default)]
    pub model_output: String,
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

/// Integrated gradients' completeness: the gap, and for a refined reading the target it was
/// refined to and whether it got there. `reached: false` means the cap stopped the refinement
/// first: the map is then a coarser estimate of the path integral than asked for, and every
/// front end says so ([`Completeness::shortfall`]).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Completeness {
    /// |sum − (F(x) − F(x′))| / |F(x) − F(x′)|, of the map as it is; null when F(x) = F(x′).
    pub gap: Option<f64>,
    /// The gap the refinement was asked to reach; null for a fixed step count.
    pub target: Option<f64>,
    /// Whether the refinement reached the target (where F(x) − F(x′) is tiny beside the map's
    /// mass, the target is held against a floor instead, see `defaults::IG_GAP_FLOOR`); false:
    /// the cap stopped it first; null for a fixed step count.
    pub reached: Option<bool>,
    /// Gradients the map sums.
    pub steps: usize,
    /// Forwards (no reverse pass) the refinement took at cell ends to place its gradients.
    pub forwards: usize,
    /// Most gradients the refinement may take; null for a fixed step count.
    pub cap: Option<usize>,
    /// The quadrature: "adaptive midpoint" or the fixed rule's name.
    pub rule: String,
}

impl Completeness {
    /// One sentence when the refinement stopped at its cap before its target, else `None`.
    pub fn shortfall(&self) -> Option<String> {
        if self.reached != Some(false) {
            return None;
        }
        let pct = |g: f64| format!("{:.2} %", g * 100.0);
        Some(format!(
            "target not reached: the completeness gap is {} against the {} asked for; the refinement stopped at its \
             cap of {} gradients. The map is a coarser estimate of the path integral than asked for: the score \
             turns in stretches of the path the steps do not resolve. Read it with care, or try the logit score \
             (--score logits) or another baseline",
            self.gap.map_or("undefined".into(), pct),
            self.target.map_or("target".into(), pct),
            self.cap.unwrap_or(self.steps)
        ))
    }
}

impl Reading {
    /// The sentence of [`Completeness::shortfall`], when the refinement missed its target.
    pub fn completeness_shortfall(&self) -> Option<String> {
        self.completeness.as_ref().and_then(|c| c.shortfall())
    }

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

/// The axis of a tensor-shaped map that holds channels: the last non-spatial axis longer than
/// one, else axis 0 of a rank > 2 map.
pub(super) fn channel_axis_of(shape: &[usize], spatial: [usize; 2]) -> Option<usize> {
    (0..shape.len()).rev().find(|a| !spatial.contains(a) && shape[*a] > 1).or(Some(0).filter(|_| shape.len() > 2))
}
