//! Reverse steps of element-wise ops (tract's `ElementWiseOp`): each is the input's gradient
//! times the op's derivative at the forward input.
//!
//! The derivative is picked once per node ([`D`]) and each has its own loop, so the compiler
//! inlines it and vectorises where it can (a GELU's derivative runs on every activation of a
//! transformer's MLPs: 7 M values per ViT-B/16 gradient).

use anyhow::{Result, anyhow};
use ndarray::{ArrayD, Zip};
use tract_onnx::prelude::*;
use tract_onnx::tract_core::ops::element_wise::ElementWiseOp;
use tract_onnx::tract_core::ops::math;
use tract_onnx::tract_core::ops::nn;

use super::{Cx, ReverseStep, fastmath};

pub(super) fn build(node: &TypedNode) -> Option<Result<Box<dyn ReverseStep>>> {
    let op = node.op_as::<ElementWiseOp>()?;
    Some(derivative(op).map(|d| Box::new(Unary(d)) as Box<dyn ReverseStep>))
}

fn sigmoid(x: f32) -> f32 {
    1.0 / (1.0 + (-x).exp())
}

/// Which derivative, with its parameters.
#[derive(Clone, Copy, Debug)]
enum D {
    Abs,
    Exp,
    Ln,
    PowConst(f32),
    Square,
    Sqrt,
    Recip,
    Rsqrt,
    Tanh,
    Erf,
    Neg,
    Sin,
    Cos,
    /// Piecewise constant: zero almost everywhere.
    Zero,
    Sigmoid,
    HardSwish,
    LeakyRelu(f32),
    Silu,
    GeluExact,
    /// tract's GELU with tanh, exponent 2 (its fast variant) or 3.
    GeluTanh(i32),
}

/// The derivative of the op as a function of its input.
fn derivative(op: &ElementWiseOp) -> Result<D> {
    let m = &*op.0;
    macro_rules! is {
        ($t:ty) => {
            m.downcast_ref::<$t>().is_some()
        };
    }
    Ok(if is!(math::Abs) {
        D::Abs
    } else if is!(math::Exp) {
        D::Exp
    } else if is!(math::Ln) {
        D::Ln
    } else if let Some(p) = m.downcast_ref::<math::PowConst>() {
        D::PowConst(p.exponent)
    } else if is!(math::Square) {
        D::Square
    } else if is!(math::Sqrt) {
        D::Sqrt
    } else if is!(math::Recip) {
        D::Recip
    } else if is!(math::Rsqrt) {
        D::Rsqrt
    } else if is!(math::Tanh) {
        D::Tanh
    } else if is!(math::Erf) {
        D::Erf
    } else if is!(math::Neg) {
        D::Neg
    } else if is!(math::Sin) {
        D::Sin
    } else if is!(math::Cos) {
        D::Cos
    } else if is!(math::Ceil) || is!(math::Floor) || is!(math::Round) || is!(math::RoundHalfToEven) || is!(math::Sign) {
        D::Zero
    } else if is!(nn::Sigmoid) {
        D::Sigmoid
    } else if is!(nn::HardSwish) {
        D::HardSwish
    } else if let Some(l) = m.downcast_ref::<nn::LeakyRelu>() {
        D::LeakyRelu(l.alpha)
    } else if is!(nn::Silu) {
        D::Silu
    } else if is!(nn::GeluExact) {
        D::GeluExact
    } else if let Some(g) = m.downcast_ref::<nn::GeluApproximate>() {
        D::GeluTanh(if g.fast_impl { 2 } else { 3 })
    } else {
        return Err(anyhow!("element-wise op {} has no reverse step", m.name()));
    })
}

/// `g ← g · f(x)` element-wise, on slices when both are in order.
fn scale_by(g: &mut ArrayD<f32>, x: &ndarray::ArrayViewD<f32>, f: impl Fn(f32) -> f32) {
    if let (Some(gs), Some(xs)) = (g.as_slice_mut(), x.as_slice()) {
        for (g, &x) in gs.iter_mut().zip(xs) {
            *g *= f(x);
        }
    } else {
        Zip::from(g).and(x).for_each(|g, &x| *g *= f(x));
    }
}

struct Unary(D);

impl ReverseStep for Unary {
    fn needs_inputs(&self) -> bool {
        true
    }

    fn back(&self, cx: &Cx, mut dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        let x = cx.input(0)?;
        let g = &mut dy;
        match self.0 {
            D::Abs => scale_by(g, &x, |x| if x > 0.0 { 1.0 } else if x < 0.0 { -1.0 } else { 0.0 }),
            D::Exp => scale_by(g, &x, |x| x.exp()),
            D::Ln => scale_by(g, &x, |x| 1.0 / x),
            D::PowConst(e) => scale_by(g, &x, |x| if e == 0.0 { 0.0 } else { e * x.powf(e - 1.0) }),
            D::Square => scale_by(g, &x, |x| 2.0 * x),
            D::Sqrt => scale_by(g, &x, |x| 0.5 / x.sqrt()),
            D::Recip => scale_by(g, &x, |x| -1.0 / (x * x)),
            D::Rsqrt => scale_by(g, &x, |x| -0.5 / (x * x.sqrt())),
            D::Tanh => scale_by(g, &x, |x| {
                let t = x.tanh();
                1.0 - t * t
            }),
            D::Erf => scale_by(g, &x, |x| std::f32::consts::FRAC_2_SQRT_PI * (-x * x).exp()),
            D::Neg => scale_by(g, &x, |_| -1.0),
            D::Sin => scale_by(g, &x, |x| x.cos()),
            D::Cos => scale_by(g, &x, |x| -x.sin()),
            D::Zero => g.fill(0.0),
            D::Sigmoid => scale_by(g, &x, |x| {
                let s = sigmoid(x);
                s * (1.0 - s)
            }),
            // x · clip(x/6 + 1/2, 0, 1)
            D::HardSwish => scale_by(g, &x, |x| if x < -3.0 { 0.0 } else if x > 3.0 { 1.0 } else { x / 3.0 + 0.5 }),
            D::LeakyRelu(a) => scale_by(g, &x, |x| if x > 0.0 { 1.0 } else { a }),
            D::Silu => scale_by(g, &x, |x| {
                let s = sigmoid(x);
                s * (1.0 + x * (1.0 - s))
            }),
            // Φ(x) + x·φ(x)
            D::GeluExact => match (g.as_slice_mut(), x.as_slice()) {
                // Vectorised: see `fastmath` (libm's per-element calls took half of a ViT reading).
                (Some(gs), Some(xs)) => fastmath::scale_by_gelu_grad(gs, xs),
                _ => Zip::from(g).and(&x).for_each(|g, &x| *g *= fastmath::gelu_grad(x)),
            },
            // 0.5·x·(1 + tanh(c·(x + 0.044715·x^p)))
            D::GeluTanh(p) => scale_by(g, &x, |x| {
                let c = (2.0 / std::f32::consts::PI).sqrt();
                let u = c * (x + 0.044715 * x.powi(p));
                let t = u.tanh();
                let du = c * (1.0 + 0.044715 * p as f32 * x.powi(p - 1));
                0.5 * (1.0 + t) + 0.5 * x * (1.0 - t * t) * du
            }),
        }
        Ok(vec![Some(dy)])
    }
}
