//! Reverse steps of ops that only move values: axis changes, pad, concat, slice, broadcast,
//! tile, downsample, cast, and resize (nearest/linear, whose reverse is a weighted scatter).

use anyhow::{Result, bail};
use ndarray::{ArrayD, Axis, IxDyn, Slice as NdSlice};
use tract_onnx::prelude::*;
use tract_onnx::tract_core::ops::array::{MultiBroadcastTo, Pad, PadMode, Slice, Tile, TypedConcat};
use tract_onnx::tract_core::ops::cast::Cast;
use tract_onnx::tract_core::ops::change_axes::AxisOp;
use tract_onnx::tract_core::ops::downsample::Downsample;
use tract_onnx::tract_core::ops::nn::{NearestUpsample, Resize};

use super::{Cx, ReverseStep, unbroadcast};
use tract_onnx::tract_core::internal::DimLike;

pub(super) fn build(node: &TypedNode) -> Option<Result<Box<dyn ReverseStep>>> {
    if let Some(op) = node.op_as::<AxisOp>() {
        return Some(Ok(Box::new(AxisStep(op.clone()))));
    }
    if let Some(op) = node.op_as::<Pad>() {
        return Some(Ok(Box::new(PadStep(op.clone()))));
    }
    if let Some(op) = node.op_as::<TypedConcat>() {
        return Some(Ok(Box::new(ConcatStep(op.axis))));
    }
    if let Some(op) = node.op_as::<Slice>() {
        let (Ok(start), Ok(end)) = (op.start.to_usize(), op.end.to_usize()) else {
            return Some(Err(anyhow::anyhow!("symbolic slice bounds")));
        };
        return Some(Ok(Box::new(SliceStep { axis: op.axis, start, end })));
    }
    if node.op_is::<MultiBroadcastTo>() {
        return Some(Ok(Box::new(BroadcastStep)));
    }
    if let Some(op) = node.op_as::<Cast>() {
        if !op.to.is_float() {
            // Casting to an integer or bool type carries no gradient; such outlets are never
            // active, so this only answers the registry.
            return Some(Ok(Box::new(PassStep)));
        }
        return Some(Ok(Box::new(PassStep)));
    }
    if let Some(op) = node.op_as::<Downsample>() {
        if op.stride <= 0 {
            return Some(Err(anyhow::anyhow!("negative stride")));
        }
        return Some(Ok(Box::new(DownsampleStep(op.clone()))));
    }
    if let Some(op) = node.op_as::<Resize>() {
        return Some(Ok(Box::new(ResizeStep(op.clone()))));
    }
    if let Some(op) = node.op_as::<NearestUpsample>() {
        return Some(Ok(Box::new(UpsampleStep(op.scales.to_vec()))));
    }
    if node.op_is::<Tile>() {
        return Some(Ok(Box::new(TileStep)));
    }
    if node.op_is::<tract_onnx::tract_core::ops::identity::Identity>() {
        return Some(Ok(Box::new(PassStep)));
    }
    None
}

struct PassStep;
impl ReverseStep for PassStep {
    fn back(&self, _cx: &Cx, dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        Ok(vec![Some(dy)])
    }
}

struct AxisStep(AxisOp);
impl ReverseStep for AxisStep {
    fn back(&self, cx: &Cx, dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        let in_shape = &cx.facts.in_shapes[0];
        let dx = match &self.0 {
            AxisOp::Move(from, to) => {
                // Output axis j holds input axis perm[j].
                let mut perm: Vec<usize> = (0..in_shape.len()).collect();
                let moved = perm.remove(*from);
                perm.insert(*to, moved);
                let mut inv = vec![0; perm.len()];
                for (j, &k) in perm.iter().enumerate() {
                    inv[k] = j;
                }
                dy.permuted_axes(IxDyn(&inv)).as_standard_layout().into_owned()
            }
            _ => super::standard(dy).into_shape_with_order(IxDyn(in_shape))?,
        };
        Ok(vec![Some(dx)])
    }
}

struct PadStep(Pad);
impl ReverseStep for PadStep {
    fn back(&self, cx: &Cx, dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        let in_shape = &cx.facts.in_shapes[0];
        let mut g = dy;
        // Pads of all axes at once equal pads applied axis by axis, so undo them axis by axis.
        for (ax, &(before, after)) in self.0.pads.iter().enumerate().rev() {
            if before == 0 && after == 0 {
                continue;
            }
            let n = in_shape[ax];
            let mut dx = g.slice_axis(Axis(ax), NdSlice::from(before..before + n)).to_owned();
            match &self.0.mode {
                PadMode::Constant(_) => {}
                PadMode::Edge => {
                    let lo = g.slice_axis(Axis(ax), NdSlice::from(0..before)).sum_axis(Axis(ax));
                    let hi = g
                        .slice_axis(Axis(ax), NdSlice::from(before + n..before + n + after))
                        .sum_axis(Axis(ax));
                    *&mut dx.index_axis_mut(Axis(ax), 0) += &lo;
                    *&mut dx.index_axis_mut(Axis(ax), n - 1) += &hi;
                }
                PadMode::Reflect => {
                    if before >= n || after >= n {
                        bail!("reflect pad wider than the axis");
                    }
                    for p in 0..before {
                        let src = g.index_axis(Axis(ax), p).to_owned();
                        *&mut dx.index_axis_mut(Axis(ax), before - p) += &src;
                    }
                    for q in 0..after {
                        let src = g.index_axis(Axis(ax), before + n + q).to_owned();
                        *&mut dx.index_axis_mut(Axis(ax), n - 2 - q) += &src;
                    }
                }
            }
            g = dx;
        }
        Ok(vec![Some(g)])
    }
}

struct ConcatStep(usize);
impl ReverseStep for ConcatStep {
    fn back(&self, cx: &Cx, dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        let mut at = 0;
        let mut out = vec![];
        for (slot, shape) in cx.facts.in_shapes.iter().enumerate() {
            let n = shape[self.0];
            out.push(
                cx.active(slot)
                    .then(|| dy.slice_axis(Axis(self.0), NdSlice::from(at..at + n)).to_owned()),
            );
            at += n;
        }
        Ok(out)
    }
}

struct SliceStep {
    axis: usize,
    start: usize,
    end: usize,
}
impl ReverseStep for SliceStep {
    fn back(&self, cx: &Cx, dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        let mut dx = ArrayD::zeros(IxDyn(&cx.facts.in_shapes[0]));
        dx.slice_axis_mut(Axis(self.axis), NdSlice::from(self.start..self.end)).assign(&dy);
        Ok(vec![Some(dx)])
    }
}

struct BroadcastStep;
impl ReverseStep for BroadcastStep {
    fn back(&self, cx: &Cx, dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        Ok(vec![Some(unbroadcast(dy, &cx.facts.in_shapes[0])?)])
    }
}

struct DownsampleStep(Downsample);
impl ReverseStep for DownsampleStep {
    fn back(&self, cx: &Cx, dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        let mut dx = ArrayD::zeros(IxDyn(&cx.facts.in_shapes[0]));
        let s = self.0.stride as isize;
        let ax = Axis(self.0.axis);
        let n = dy.shape()[self.0.axis];
        let start = self.0.modulo as isize;
        if n > 0 {
            // Last element taken is start + s·(n−1); the slice end is exclusive.
            dx.slice_axis_mut(ax, NdSlice::new(start, Some(start + s * (n as isize - 1) + 1), s)).assign(&dy);
        }
        Ok(vec![Some(dx)])
    }
}

/// Resize is separable: each resampled axis is a sparse linear map given by tract's own
/// per-axis plan (taps and weights), so its reverse scatters the gradient back through the same
/// taps, axis by axis in reverse order.
struct ResizeStep(Resize);
impl ReverseStep for ResizeStep {
    fn back(&self, cx: &Cx, dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        let in_shape = &cx.facts.in_shapes[0];
        let out_shape = &cx.facts.out_shape;
        let scales_t = self.0.optional_scales_input.and_then(|ix| cx.facts.konst.get(ix).cloned().flatten());
        // Same scale choice as tract's eval.
        let scales: Vec<f32> = match scales_t.filter(|s| s.len() == in_shape.len()) {
            Some(s) => s.cast_to::<f32>()?.to_plain_array_view::<f32>()?.iter().copied().collect(),
            None => out_shape.iter().zip(in_shape).map(|(o, i)| *o as f32 / *i as f32).collect(),
        };
        let mut shape: Vec<usize> = out_shape.clone();
        let mut g = super::standard(dy);
        for axis in (0..in_shape.len()).rev() {
            let (len_in, len_out) = (in_shape[axis], out_shape[axis]);
            if len_in == len_out && scales[axis] == 1.0 {
                continue;
            }
            let plan = self.0.plan_axis(scales[axis], len_in, len_out);
            let inner: usize = shape[axis + 1..].iter().product();
            let outer: usize = shape[..axis].iter().product();
            let src = g.as_slice().expect("standard layout");
            let mut dst = vec![0f32; outer * len_in * inner];
            let w = plan.window;
            for o in 0..outer {
                let s_block = &src[o * len_out * inner..][..len_out * inner];
                let d_block = &mut dst[o * len_in * inner..][..len_in * inner];
                for x in 0..len_out {
                    if plan.extrapolated[x] {
                        continue;
                    }
                    let dyx = &s_block[x * inner..][..inner];
                    for k in 0..w {
                        let (i, wt) = (plan.indices[x * w + k], plan.weights[x * w + k]);
                        if wt == 0.0 {
                            continue;
                        }
                        for (d, s) in d_block[i * inner..][..inner].iter_mut().zip(dyx) {
                            *d += wt * s;
                        }
                    }
                }
            }
            shape[axis] = len_in;
            g = ArrayD::from_shape_vec(IxDyn(&shape), dst)?;
        }
        Ok(vec![Some(g)])
    }
}

/// Integer nearest upsample: each input cell was copied into a block, so its gradient is the
/// block's sum.
struct UpsampleStep(Vec<usize>);
impl ReverseStep for UpsampleStep {
    fn back(&self, cx: &Cx, dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        let in_shape = &cx.facts.in_shapes[0];
        // Split every axis a into (in[a], scale[a]) and sum the scale axes.
        let mut split = vec![];
        for (a, &n) in in_shape.iter().enumerate() {
            split.push(n);
            split.push(self.0[a]);
        }
        let mut g = super::standard(dy).into_shape_with_order(IxDyn(&split))?;
        for a in (0..in_shape.len()).rev() {
            g = g.sum_axis(Axis(2 * a + 1));
        }
        Ok(vec![Some(g)])
    }
}

/// Tile repeats the whole input along each axis: output position k·n + i of an axis of input
/// size n is input position i, so each input cell's gradient is the sum over its copies.
struct TileStep;
impl ReverseStep for TileStep {
    fn back(&self, cx: &Cx, dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        let in_shape = &cx.facts.in_shapes[0];
        // Split every axis a into (copies, in[a]) and sum the copies axes.
        let mut split = vec![];
        for (a, &n) in in_shape.iter().enumerate() {
            split.push(cx.facts.out_shape[a] / n.max(1));
            split.push(n);
        }
        let mut g = super::standard(dy).into_shape_with_order(IxDyn(&split))?;
        for a in (0..in_shape.len()).rev() {
            g = g.sum_axis(Axis(2 * a));
        }
        Ok(vec![Some(g)])
    }
}
