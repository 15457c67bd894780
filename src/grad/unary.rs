//! Reverse steps of element-wise ops (tract's `ElementWiseOp`): each is the input's gradient
//! times the op's derivative at the forward input.

use anyhow::{Result, anyhow};
use ndarray::{ArrayD, Zip};
use tract_onnx::prelude::*;
use tract_onnx::tract_core::ops::element_wise::ElementWiseOp;
use tract_onnx::tract_core::ops::math;
use tract_onnx::tract_core::ops::nn;

use super::{Cx, ReverseStep};

type Deriv = Box<dyn Fn(f32) -> f32 + Send + Sync>;

pub(super) fn build(node: &TypedNode) -> Option<Result<Box<dyn ReverseStep>>> {
    let op = node.op_as::<ElementWiseOp>()?;
    Some(derivative(op).map(|d| Box::new(Unary(d)) as Box<dyn ReverseStep>))
}

fn sigmoid(x: f32) -> f32 {
    1.0 / (1.0 + (-x).exp())
}

/// The derivative of the op as a function of its input.
fn derivative(op: &ElementWiseOp) -> Result<Deriv> {
    let m = &*op.0;
    macro_rules! is {
        ($t:ty) => {
            m.downcast_ref::<$t>().is_some()
        };
    }
    let d: Deriv = if is!(math::Abs) {
        Box::new(|x| if x > 0.0 { 1.0 } else if x < 0.0 { -1.0 } else { 0.0 })
    } else if is!(math::Exp) {
        Box::new(|x| x.exp())
    } else if is!(math::Ln) {
        Box::new(|x| 1.0 / x)
    } else if let Some(p) = m.downcast_ref::<math::PowConst>() {
        let e = p.exponent;
        Box::new(move |x| if e == 0.0 { 0.0 } else { e * x.powf(e - 1.0) })
    } else if is!(math::Square) {
        Box::new(|x| 2.0 * x)
    } else if is!(math::Sqrt) {
        Box::new(|x| 0.5 / x.sqrt())
    } else if is!(math::Recip) {
        Box::new(|x| -1.0 / (x * x))
    } else if is!(math::Rsqrt) {
        Box::new(|x| -0.5 / (x * x.sqrt()))
    } else if is!(math::Tanh) {
        Box::new(|x| {
            let t = x.tanh();
            1.0 - t * t
        })
    } else if is!(math::Erf) {
        Box::new(|x| std::f32::consts::FRAC_2_SQRT_PI * (-x * x).exp())
    } else if is!(math::Neg) {
        Box::new(|_| -1.0)
    } else if is!(math::Sin) {
        Box::new(|x| x.cos())
    } else if is!(math::Cos) {
        Box::new(|x| -x.sin())
    } else if is!(math::Ceil)
        || is!(math::Floor)
        || is!(math::Round)
        || is!(math::RoundHalfToEven)
        || is!(math::Sign)
    {
        // Piecewise constant: zero almost everywhere.
        Box::new(|_| 0.0)
    } else if is!(nn::Sigmoid) {
        Box::new(|x| {
            let s = sigmoid(x);
            s * (1.0 - s)
        })
    } else if is!(nn::HardSwish) {
        // x · clip(x/6 + 1/2, 0, 1)
        Box::new(|x| if x < -3.0 { 0.0 } else if x > 3.0 { 1.0 } else { x / 3.0 + 0.5 })
    } else if let Some(l) = m.downcast_ref::<nn::LeakyRelu>() {
        let a = l.alpha;
        Box::new(move |x| if x > 0.0 { 1.0 } else { a })
    } else if is!(nn::Silu) {
        Box::new(|x| {
            let s = sigmoid(x);
            s * (1.0 + x * (1.0 - s))
        })
    } else if is!(nn::GeluExact) {
        // Φ(x) + x·φ(x)
        Box::new(|x| {
            let cdf = 0.5 * (1.0 + libm::erff(x * std::f32::consts::FRAC_1_SQRT_2));
            let pdf = (-0.5 * x * x).exp() / (2.0 * std::f32::consts::PI).sqrt();
            cdf + x * pdf
        })
    } else if let Some(g) = m.downcast_ref::<nn::GeluApproximate>() {
        // 0.5·x·(1 + tanh(c·(x + 0.044715·x^p))), p = 2 for tract's fast variant, else 3.
        let p = if g.fast_impl { 2 } else { 3 };
        Box::new(move |x| {
            let c = (2.0 / std::f32::consts::PI).sqrt();
            let u = c * (x + 0.044715 * x.powi(p));
            let t = u.tanh();
            let du = c * (1.0 + 0.044715 * p as f32 * x.powi(p - 1));
            0.5 * (1.0 + t) + 0.5 * x * (1.0 - t * t) * du
        })
    } else {
        return Err(anyhow!("element-wise op {} has no reverse step", m.name()));
    };
    Ok(d)
}

struct Unary(Deriv);

impl ReverseStep for Unary {
    fn needs_inputs(&self) -> bool {
        true
    }

    fn back(&self, cx: &Cx, mut dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        let x = cx.input(0)?;
        let d = &self.0;
        Zip::from(&mut dy).and(&x).for_each(|g, &x| *g *= d(x));
        Ok(vec![Some(dy)])
    }
}
