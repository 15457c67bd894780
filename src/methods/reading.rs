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

/// The axis of a tensor-shaped map that holds channels: the last non-spatial axis longer than
/// one, else axis 0 of a rank > 2 map.
pub(super) fn channel_axis_of(shape: &[usize], spatial: [usize; 2]) -> Option<usize> {
    (0..shape.len()).rev().find(|a| !spatial.contains(a) && shape[*a] > 1).or(Some(0).filter(|_| shape.len() > 2))
}
