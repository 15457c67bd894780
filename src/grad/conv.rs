//! Reverse step of convolution (any groups, strides, pads, dilations; depthwise included).
//!
//! The input gradient of a convolution is the transposed convolution of the output gradient with
//! the same kernel. Rather than re-deriving im2col/col2im, each Conv node gets a small tract graph
//! holding a `Deconv` with the conv's own `PoolSpec` (padding made explicit, plus the output
//! adjustment that restores the input size), optimized once; tract then runs it with its packed
//! matrix kernels. A 3×3 stride-1 convolution on a large plane runs its adjoint by Winograd's
//! F(2×2, 3×3) instead (`graph::winograd`).

use anyhow::{Context, Result, anyhow, bail};
use ndarray::ArrayD;
use tract_onnx::prelude::*;
use tract_onnx::tract_core::ops::cnn::{Conv, Deconv, PaddingSpec, PoolSpec};

use super::{Cx, NodeFacts, ReverseStep};
use crate::graph::winograd::{self, Winograd};
use crate::graph::{Plan, geometry, plan, run_sub};

pub(super) fn build(node: &TypedNode) -> Option<Result<Box<dyn ReverseStep>>> {
    let op = node.op_as::<Conv>()?;
    if op.q_params.is_some() {
        return Some(Err(anyhow!("quantized convolution")));
    }
    Some(Ok(Box::new(ConvStep { op: op.clone(), plan: None, winograd: None })))
}

struct ConvStep {
    op: Conv,
    plan: Option<Plan>,
    /// When the convolution has a Winograd form ([`winograd::for_conv`]): its adjoint, run
    /// instead of `plan`.
    winograd: Option<Winograd>,
}

/// The `Deconv` whose output is the conv's input gradient, for an input of spatial size
/// `x_hw` and output `y_hw`.
fn transposed(op: &Conv, x_shape: &[usize], y_shape: &[usize]) -> Result<Deconv> {
    let spec = &op.pool_spec;
    let y = spec.data_format.shape(y_shape.to_vec())?;
    let axes = geometry::axes(spec, x_shape)?;
    let mut adjustments = tvec![];
    for (ax, g) in axes.iter().enumerate() {
        let reach = (y.hw_dims()[ax] - 1) * g.stride + g.reach();
        let covered = reach as isize - g.pad_before as isize - g.pad_after as isize;
        let adj = g.len as isize - covered;
        if adj < 0 {
            bail!("conv geometry: negative output adjustment on axis {ax}");
        }
        adjustments.push(adj as usize);
    }
    let pool_spec = PoolSpec {
        padding: PaddingSpec::Explicit(
            axes.iter().map(|g| g.pad_before).collect(),
            axes.iter().map(|g| g.pad_after).collect(),
        ),
        // The transposed convolution reads dy (the conv's output channels) and writes dx.
        input_channels: spec.output_channels,
        output_channels: spec.input_channels,
        ..spec.clone()
    };
    Ok(Deconv::new(pool_spec, op.kernel_fmt, adjustments, op.group))
}

/// The conv kernel [Cout, Cin/g, k..] (OIHW) as tract's Deconv wants it for the adjoint, whose
/// input is dy (Cout channels): per group, the two channel axes swapped, [Cin, Cout/g, k..].
fn deconv_kernel(kernel: &Tensor, op: &Conv) -> Result<Tensor> {
    use tract_onnx::tract_core::ops::cnn::KernelFormat;
    if op.kernel_fmt != KernelFormat::OIHW {
        bail!("convolution kernel layout {:?} (only OIHW, the ONNX layout, is handled)", op.kernel_fmt);
    }
    let k = kernel.cast_to::<f32>().map_err(|e| anyhow!("{e}"))?;
    let k = k.to_plain_array_view::<f32>().map_err(|e| anyhow!("{e}"))?;
    let g = op.group;
    let sh = k.shape().to_vec();
    let (cout, cin_g) = (sh[0], sh[1]);
    let mut grouped = vec![g, cout / g, cin_g];
    grouped.extend_from_slice(&sh[2..]);
    let k = k.to_shape(ndarray::IxDyn(&grouped)).map_err(|e| anyhow!("{e}"))?;
    let mut axes: Vec<usize> = (0..grouped.len()).collect();
    axes.swap(1, 2);
    let t = k.view().permuted_axes(ndarray::IxDyn(&axes)).as_standard_layout().into_owned();
    let mut out = vec![g * cin_g, cout / g];
    out.extend_from_slice(&sh[2..]);
    let t = t.into_shape_with_order(ndarray::IxDyn(&out)).map_err(|e| anyhow!("{e}"))?;
    Ok(t.into_tensor())
}

impl ReverseStep for ConvStep {
    fn prepare(&mut self, f: &NodeFacts) -> Result<()> {
        if f.active.get(1).copied().unwrap_or(false) || f.active.get(2).copied().unwrap_or(false) {
            bail!("convolution whose kernel or bias depends on the input");
        }
        let kernel = f.konst.get(1).cloned().flatten().context(
            "convolution with a kernel that is not a constant after simplification",
        )?;
        let forward = winograd::for_conv(&self.op, &kernel, None, &f.in_shapes[0], &f.out_shape)?;
        self.winograd = forward.map(|w| w.adjoint(winograd::tiles(&f.in_shapes[0]))).transpose()?;
        if self.winograd.is_some() {
            return Ok(());
        }
        let deconv = transposed(&self.op, &f.in_shapes[0], &f.out_shape)?;
        let kernel = deconv_kernel(&kernel, &self.op)?;
        let mut m = TypedModel::default();
        let dy = m.add_source("dy", f32::fact(f.out_shape.clone()))?;
        let k = m.add_const("kernel", kernel)?;
        let b = m.add_const("bias", Tensor::zero_scalar::<f32>()?)?;
        let dx = m.wire_node("dx", deconv, &[dy, k, b])?;
        m.select_output_outlets(&dx)?;
        let fact = m.outlet_fact(dx[0])?.clone();
        if fact.shape.as_concrete() != Some(&f.in_shapes[0][..]) {
            bail!("transposed convolution gives {:?}, input is {:?}", fact.shape, f.in_shapes[0]);
        }
        self.plan = Some(plan(m)?);
        Ok(())
    }

    fn back(&self, _cx: &Cx, dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        if let Some(adjoint) = &self.winograd {
            let dy = dy.as_standard_layout();
            let flat = dy.as_slice().context("conv reverse step: dy not contiguous")?;
            let &[n, _, h, w] = dy.shape() else { bail!("conv reverse step: dy of rank {}", dy.ndim()) };
            let (xh, xw) = adjoint.output_hw(h, w)?;
            let dx = adjoint.run(flat, n, h, w)?;
            let shape = ndarray::IxDyn(&[n, adjoint.out_channels(), xh, xw]);
            let dx = ArrayD::from_shape_vec(shape, dx).map_err(|e| anyhow!("{e}"))?;
            return Ok(vec![Some(dx), None, None]);
        }
        let plan = self.plan.as_ref().context("conv reverse step not prepared")?;
        Ok(vec![Some(run_sub(plan, vec![Tensor::from(dy)])?), None, None])
    }
}
