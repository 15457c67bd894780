//! Reverse steps of max pooling and sum/average pooling. Window geometry (padding, strides,
//! dilations, ceil mode) comes from tract's own `PoolSpec`.

use anyhow::{Result, bail};
use ndarray::{Array4, ArrayD, ArrayView4, ArrayViewD, Axis, IxDyn};
use tract_onnx::prelude::*;
use tract_onnx::tract_core::ops::cnn::{MaxPool, PaddingSpec, PoolSpec, SumPool};
use tract_onnx::tract_core::ops::nn::DataFormat;

use super::{Cx, ReverseStep};
use crate::graph::geometry;

pub(super) fn build(node: &TypedNode) -> Option<Result<Box<dyn ReverseStep>>> {
    if let Some(op) = node.op_as::<MaxPool>() {
        if op.with_index_outputs.is_some() {
            return Some(Err(anyhow::anyhow!("max pool with index output")));
        }
        if op.pool_spec.rank() > 2 {
            return Some(Err(anyhow::anyhow!("3-d max pool")));
        }
        return Some(Ok(Box::new(PoolStep { spec: op.pool_spec.clone(), kind: Kind::Max })));
    }
    if let Some(op) = node.op_as::<SumPool>() {
        if op.pool_spec.rank() > 2 {
            return Some(Err(anyhow::anyhow!("3-d pool")));
        }
        return Some(Ok(Box::new(PoolStep {
            spec: op.pool_spec.clone(),
            kind: Kind::Sum { normalize: op.normalize, include_pad: op.count_include_pad },
        })));
    }
    None
}

#[derive(Clone, Copy)]
enum Kind {
    Max,
    Sum { normalize: bool, include_pad: bool },
}

struct PoolStep {
    spec: PoolSpec,
    kind: Kind,
}

/// Per spatial axis (2 of them; a 1-d pool gets a unit H axis).
#[derive(Clone, Copy, Default)]
struct AxisGeo {
    len: usize,
    out: usize,
    kernel: usize,
    stride: usize,
    dilation: usize,
    pad_before: usize,
    /// Padded extent counted by `count_include_pad` (ONNX ceil mode does not count the overhang).
    padded_len: usize,
}

/// A view of a tensor in `fmt` layout as N×C×H×W.
fn as_nchw<'a>(a: ArrayViewD<'a, f32>, fmt: DataFormat, rank: usize) -> Result<ArrayView4<'a, f32>> {
    let mut a = a;
    if !fmt.has_n() {
        a = a.insert_axis(Axis(0));
    }
    if fmt.c_is_last() {
        let r = a.ndim();
        let mut perm: Vec<usize> = vec![0, r - 1];
        perm.extend(1..r - 1);
        a = a.permuted_axes(IxDyn(&perm));
    }
    if rank == 1 {
        a = a.insert_axis(Axis(2));
    }
    Ok(a.into_dimensionality()?)
}

/// Back from N×C×H×W to `fmt` layout with `shape`.
fn from_nchw(a: Array4<f32>, fmt: DataFormat, rank: usize, shape: &[usize]) -> Result<ArrayD<f32>> {
    let mut a = a.into_dyn();
    if rank == 1 {
        a = a.index_axis_move(Axis(2), 0);
    }
    if fmt.c_is_last() {
        let r = a.ndim();
        let mut perm: Vec<usize> = vec![0];
        perm.extend(2..r);
        perm.push(1);
        a = a.permuted_axes(IxDyn(&perm));
    }
    if !fmt.has_n() {
        a = a.index_axis_move(Axis(0), 0);
    }
    // Already in order for NCHW: no copy.
    let a = super::standard(a);
    if a.shape() != shape {
        bail!("pool reverse: layout round trip gave {:?}, expected {:?}", a.shape(), shape);
    }
    Ok(a)
}

impl PoolStep {
    fn geometry(&self, in_shape: &[usize]) -> Result<[AxisGeo; 2]> {
        let axes = geometry::axes(&self.spec, in_shape)?;
        let mut geo = [AxisGeo { len: 1, out: 1, kernel: 1, stride: 1, dilation: 1, pad_before: 0, padded_len: 1 }; 2];
        let off = 2 - axes.len();
        for (ax, g) in axes.iter().enumerate() {
            let padded_len = match &self.spec.padding {
                PaddingSpec::ExplicitOnnxPool(b, a, true) => b[ax] + g.len + a[ax],
                _ => usize::MAX,
            };
            geo[ax + off] = AxisGeo {
                len: g.len,
                out: g.out,
                kernel: g.kernel,
                stride: g.stride,
                dilation: g.dilation,
                pad_before: g.pad_before,
                padded_len,
            };
        }
        Ok(geo)
    }
}

/// Input coordinates (in range or not) of the window taps of output `o` along one axis.
fn taps(g: &AxisGeo, o: usize) -> impl Iterator<Item = (isize, bool)> + '_ {
    (0..g.kernel).map(move |k| {
        let padded = o * g.stride + k * g.dilation;
        (padded as isize - g.pad_before as isize, padded < g.padded_len)
    })
}

impl ReverseStep for PoolStep {
    fn needs_inputs(&self) -> bool {
        matches!(self.kind, Kind::Max)
    }

    fn back(&self, cx: &Cx, dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        let in_shape = &cx.facts.in_shapes[0];
        let fmt = self.spec.data_format;
        let rank = self.spec.rank();
        let [gh, gw] = self.geometry(in_shape)?;
        let dy4 = as_nchw(dy.view(), fmt, rank)?;
        let (n, c) = (dy4.shape()[0], dy4.shape()[1]);
        let mut dx = Array4::<f32>::zeros((n, c, gh.len, gw.len));
        let inside = |i: isize, len: usize| i >= 0 && (i as usize) < len;
        match self.kind {
            Kind::Max => {
                let x = cx.input(0)?;
                let x4 = as_nchw(x, fmt, rank)?;
                // The in-range input rows (columns) of each output row (column), in scan order.
                let valid = |g: &AxisGeo| -> Vec<Vec<usize>> {
                    (0..g.out)
                        .map(|o| taps(g, o).filter(|(i, _)| inside(*i, g.len)).map(|(i, _)| i as usize).collect())
                        .collect()
                };
                let (rows, cols) = (valid(&gh), valid(&gw));
                for b in 0..n {
                    for ch in 0..c {
                        let xs = x4.slice(ndarray::s![b, ch, .., ..]);
                        let xs = xs.as_standard_layout();
                        let xs = xs.as_slice().expect("standard layout");
                        let ds = dy4.slice(ndarray::s![b, ch, .., ..]);
                        let ds = ds.as_standard_layout();
                        let ds = ds.as_slice().expect("standard layout");
                        let mut d = dx.slice_mut(ndarray::s![b, ch, .., ..]);
                        let d = d.as_slice_mut().expect("a fresh array is contiguous");
                        for (oh, rs) in rows.iter().enumerate() {
                            for (ow, cs) in cols.iter().enumerate() {
                                // First maximum in scan order takes the gradient (as PyTorch does).
                                let (Some(&h0), Some(&w0)) = (rs.first(), cs.first()) else { continue };
                                let (mut at, mut m) = (h0 * gw.len + w0, xs[h0 * gw.len + w0]);
                                for &ih in rs {
                                    let row = &xs[ih * gw.len..(ih + 1) * gw.len];
                                    for &iw in cs {
                                        let v = row[iw];
                                        if v > m {
                                            (at, m) = (ih * gw.len + iw, v);
                                        }
                                    }
                                }
                                d[at] += ds[oh * gw.out + ow];
                            }
                        }
                    }
                }
            }
            Kind::Sum { normalize, include_pad } => {
                for oh in 0..gh.out {
                    for ow in 0..gw.out {
                        let hs: Vec<(isize, bool)> = taps(&gh, oh).collect();
                        let ws: Vec<(isize, bool)> = taps(&gw, ow).collect();
                        let scale = if !normalize {
                            1.0
                        } else {
                            let count = if include_pad {
                                hs.iter().filter(|t| t.1).count() * ws.iter().filter(|t| t.1).count()
                            } else {
                                hs.iter().filter(|t| inside(t.0, gh.len)).count()
                                    * ws.iter().filter(|t| inside(t.0, gw.len)).count()
                            };
                            1.0 / count.max(1) as f32
                        };
                        for &(ih, _) in &hs {
                            if !inside(ih, gh.len) {
                                continue;
                            }
                            for &(iw, _) in &ws {
                                if !inside(iw, gw.len) {
                                    continue;
                                }
                                for b in 0..n {
                                    for ch in 0..c {
                                        dx[[b, ch, ih as usize, iw as usize]] += scale * dy4[[b, ch, oh, ow]];
                                    }
                                }
                            }
                        }
                    }
                }
            }
        }
        Ok(vec![Some(from_nchw(dx, fmt, rank, in_shape)?)])
    }
}
