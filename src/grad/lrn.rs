//! Reverse step of local response normalisation across channels (ONNX `LRN`, kept by tract as
//! its own op; AlexNet, ZFNet and GoogLeNet exports use it):
//!   y_c = x_c · s_c^(−β),  s_c = bias + α/size · Σ_{k ∈ W(c)} x_k²,
//!   W(c) = [c − ⌊(size−1)/2⌋, c + ⌈(size−1)/2⌉] clipped to the channels (ONNX operator spec).
//! So ∂L/∂x_k = dy_k s_k^(−β) − (2αβ/size) · x_k · Σ_{c : k ∈ W(c)} dy_c x_c s_c^(−β−1).

use anyhow::Result;
use ndarray::{ArrayD, Axis};
use tract_onnx::prelude::*;
use tract_onnx_opl::lrn::Lrn;

use super::{Cx, ReverseStep};

pub(super) fn build(node: &TypedNode) -> Option<Result<Box<dyn ReverseStep>>> {
    let op = node.op_as::<Lrn>()?;
    Some(Ok(Box::new(LrnStep(op.clone()))))
}

struct LrnStep(Lrn);

impl ReverseStep for LrnStep {
    fn needs_inputs(&self) -> bool {
        true
    }

    fn back(&self, cx: &Cx, dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        let x = cx.input(0)?;
        let Lrn { alpha, beta, bias, size } = self.0;
        let channels = x.shape()[1];
        let lo = (size - 1) / 2;
        let hi = (size - 1).div_ceil(2);
        let window = |c: usize| c.saturating_sub(lo)..=(c + hi).min(channels - 1);
        // s_c for every position.
        let mut s = ArrayD::<f32>::from_elem(x.raw_dim(), bias);
        for c in 0..channels {
            let mut sc = s.index_axis_mut(Axis(1), c);
            for k in window(c) {
                let xk = x.index_axis(Axis(1), k);
                sc.zip_mut_with(&xk, |a, v| *a += alpha / size as f32 * v * v);
            }
        }
        // t_c = dy_c · x_c · s_c^(−β−1), and the direct term dy_c · s_c^(−β).
        let mut t = dy.clone();
        ndarray::Zip::from(&mut t).and(&x).and(&s).for_each(|t, &x, &s| *t *= x * s.powf(-beta - 1.0));
        let mut dx = dy;
        ndarray::Zip::from(&mut dx).and(&s).for_each(|d, &s| *d *= s.powf(-beta));
        let k_coef = 2.0 * alpha * beta / size as f32;
        for k in 0..channels {
            // Channels c whose window holds k: k − hi ≤ c ≤ k + lo.
            let mut acc = ndarray::Array::<f32, _>::zeros(x.index_axis(Axis(1), k).raw_dim());
            for c in k.saturating_sub(hi)..=(k + lo).min(channels - 1) {
                acc += &t.index_axis(Axis(1), c);
            }
            let xk = x.index_axis(Axis(1), k);
            let mut dk = dx.index_axis_mut(Axis(1), k);
            ndarray::Zip::from(&mut dk).and(&xk).and(&acc).for_each(|d, &x, &a| *d -= k_coef * x * a);
        }
        Ok(vec![Some(dx)])
    }
}
