//! Reverse steps of the gathers: `Gather` (indices along one axis) and `GatherNd` (index tuples
//! into the leading axes). Both only copy values, so the reverse is a scatter-add of the output
//! gradient back to where each value came from; repeated indices add up.

use anyhow::{Result, anyhow, bail};
use ndarray::{ArrayD, Axis, IxDyn};
use tract_onnx::prelude::*;
use tract_onnx::tract_core::ops::array::{Gather, GatherNd};

use super::{Cx, ReverseStep};

pub(super) fn build(node: &TypedNode) -> Option<Result<Box<dyn ReverseStep>>> {
    if let Some(op) = node.op_as::<Gather>() {
        return Some(Ok(Box::new(GatherStep { axis: op.axis })));
    }
    if let Some(op) = node.op_as::<GatherNd>() {
        return Some(Ok(Box::new(GatherNdStep { batch_dims: op.batch_dims })));
    }
    None
}

/// The index tensor (input 1) as plain i64 values, negative ones counted from the end of `dim`
/// (ONNX allows them), each checked against `dim`.
fn indices(cx: &Cx, dims: &[usize]) -> Result<ArrayD<i64>> {
    let t = cx.input_tensor(1)?.cast_to::<i64>().map_err(|e| anyhow!("{e}"))?;
    let a = t.to_plain_array_view::<i64>().map_err(|e| anyhow!("{e}"))?.to_owned();
    let n = dims.len();
    let mut out = a;
    for (k, v) in out.iter_mut().enumerate() {
        let dim = dims[k % n] as i64;
        if *v < 0 {
            *v += dim;
        }
        if *v < 0 || *v >= dim {
            bail!("index {v} out of range for an axis of size {dim}");
        }
    }
    Ok(out)
}

struct GatherStep {
    axis: usize,
}

impl ReverseStep for GatherStep {
    // Only the indices: the data's values do not enter its gradient.
    fn needs_input(&self, slot: usize) -> bool {
        slot == 1
    }

    fn back(&self, cx: &Cx, dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        let data = &cx.facts.in_shapes[0];
        let ax = self.axis;
        let idx = indices(cx, &[data[ax]])?;
        let pre: usize = data[..ax].iter().product();
        let post: usize = data[ax + 1..].iter().product();
        let dy = super::standard(dy);
        let dy3 = dy.into_shape_with_order((pre, idx.len(), post))?;
        let mut dx = ndarray::Array3::<f32>::zeros((pre, data[ax], post));
        for (k, &i) in idx.iter().enumerate() {
            let mut to = dx.index_axis_mut(Axis(1), i as usize);
            to += &dy3.index_axis(Axis(1), k);
        }
        Ok(vec![Some(dx.into_shape_with_order(IxDyn(data))?), None])
    }
}

struct GatherNdStep {
    batch_dims: usize,
}

impl ReverseStep for GatherNdStep {
    // Only the indices: the data's values do not enter its gradient.
    fn needs_input(&self, slot: usize) -> bool {
        slot == 1
    }

    fn back(&self, cx: &Cx, dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        let data = &cx.facts.in_shapes[0];
        let ix_shape = &cx.facts.in_shapes[1];
        let bd = self.batch_dims;
        let n = *ix_shape.last().ok_or_else(|| anyhow!("GatherNd indices without axes"))?;
        if bd + n > data.len() {
            bail!("GatherNd picks {n} axes after {bd} batch axes of a {}-axis tensor", data.len());
        }
        let idx = indices(cx, &data[bd..bd + n])?;
        let batch: usize = data[..bd].iter().product();
        let picked: usize = data[bd..bd + n].iter().product();
        let rest: usize = data[bd + n..].iter().product();
        let per_batch: usize = ix_shape[bd..ix_shape.len() - 1].iter().product();
        let idx = idx.as_standard_layout().into_owned().into_shape_with_order((batch, per_batch, n))?;
        let dy = super::standard(dy).into_shape_with_order((batch, per_batch, rest))?;
        let mut dx = ndarray::Array3::<f32>::zeros((batch, picked, rest));
        for b in 0..batch {
            for r in 0..per_batch {
                // Row-major position of the index tuple among the picked axes.
                let mut flat = 0usize;
                for (j, &d) in data[bd..bd + n].iter().enumerate() {
                    flat = flat * d + idx[[b, r, j]] as usize;
                }
                let mut to = dx.slice_mut(ndarray::s![b, flat, ..]);
                to += &dy.slice(ndarray::s![b, r, ..]);
            }
        }
        Ok(vec![Some(dx.into_shape_with_order(IxDyn(data))?), None])
    }
}
