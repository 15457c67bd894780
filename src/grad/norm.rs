//! Reverse step of tract's `RmsNorm`: what layer normalisation becomes after declutter (the
//! mean is taken out before it by a `Reduce<Sum>`, a scale and a `Sub`; the learned scale and
//! shift are a `Mul` and an `Add` after it), whether the ONNX file holds one
//! LayerNormalization op (opset 17+) or the ReduceMean/Sub/Pow/Sqrt/Div of older exports.
//!
//! Along the axis, with n positions, m = Σ x² / n and r = (m + ε)^(−1/2), the forward is
//! y = r·x. Its vector–Jacobian product is dx = r·dy − (r³/n)·x·Σ(x·dy).

use anyhow::{Result, anyhow};
use ndarray::{ArrayD, Axis, Zip};
use tract_onnx::prelude::*;
use tract_onnx::tract_core::ops::nn::RmsNorm;

use super::{Cx, ReverseStep};

pub(super) fn build(node: &TypedNode) -> Option<Result<Box<dyn ReverseStep>>> {
    let op = node.op_as::<RmsNorm>()?;
    let eps = op.eps.cast_to_scalar::<f32>().map_err(|e| anyhow!("RMS normalisation epsilon: {e}"));
    Some(eps.map(|eps| Box::new(RmsStep { axis: op.axis, eps }) as _))
}

struct RmsStep {
    axis: usize,
    eps: f32,
}

impl ReverseStep for RmsStep {
    fn needs_inputs(&self) -> bool {
        true
    }

    fn back(&self, cx: &Cx, mut dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        let x = cx.input(0)?;
        let ax = Axis(self.axis);
        let n = x.shape()[self.axis] as f64;
        let eps = self.eps as f64;
        // One lane along the axis per normalised row; its sums in f64.
        Zip::from(dy.lanes_mut(ax)).and(x.lanes(ax)).for_each(|mut g, x| {
            let (mut sq, mut dot) = (0f64, 0f64);
            for (&gi, &xi) in g.iter().zip(x.iter()) {
                sq += xi as f64 * xi as f64;
                dot += xi as f64 * gi as f64;
            }
            let r = 1.0 / (sq / n + eps).sqrt();
            let c = r * r * r * dot / n;
            for (gi, &xi) in g.iter_mut().zip(x.iter()) {
                *gi = (r * *gi as f64 - c * xi as f64) as f32;
            }
        });
        Ok(vec![Some(dy)])
    }
}
