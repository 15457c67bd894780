//! Reverse steps of reductions over axes (sum, max, min, mean of squares) and of softmax and
//! log-softmax.

use anyhow::{Result, anyhow};
use ndarray::{ArrayD, Axis, IxDyn, Zip};
use tract_onnx::prelude::*;
use tract_onnx::tract_core::ops::nn::{Reduce, Reducer, Softmax, SoftmaxKind};

use super::{Cx, ReverseStep};

pub(super) fn build(node: &TypedNode) -> Option<Result<Box<dyn ReverseStep>>> {
    if let Some(op) = node.op_as::<Softmax>() {
        if op.quant_output_dt.is_some() {
            return Some(Err(anyhow!("quantized softmax")));
        }
        return Some(Ok(Box::new(SoftmaxStep { axes: op.axes.to_vec(), log: op.kind == SoftmaxKind::LogSoftmax })));
    }
    let op = node.op_as::<Reduce>()?;
    match op.reducer {
        Reducer::Sum | Reducer::Max | Reducer::Min | Reducer::MeanOfSquares => {
            Some(Ok(Box::new(ReduceStep { axes: op.axes.to_vec(), reducer: op.reducer })))
        }
        r => Some(Err(anyhow!("reduction {r:?} has no reverse step"))),
    }
}

struct ReduceStep {
    axes: Vec<usize>,
    reducer: Reducer,
}

impl ReverseStep for ReduceStep {
    fn needs_inputs(&self) -> bool {
        !matches!(self.reducer, Reducer::Sum)
    }
    fn needs_output(&self) -> bool {
        matches!(self.reducer, Reducer::Max | Reducer::Min)
    }

    fn back(&self, cx: &Cx, dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        let in_shape = IxDyn(&cx.facts.in_shapes[0]);
        // tract keeps reduced axes with size 1, so dy broadcasts over the input.
        let dyb = dy.broadcast(in_shape.clone()).ok_or_else(|| anyhow!("reduce: bad gradient shape"))?;
        let dx = match self.reducer {
            Reducer::Sum => dyb.to_owned(),
            Reducer::MeanOfSquares => {
                let n: usize = self.axes.iter().map(|&a| cx.facts.in_shapes[0][a]).product();
                let x = cx.input(0)?;
                let mut g = ArrayD::<f32>::zeros(in_shape);
                Zip::from(&mut g).and(&dyb).and(&x).for_each(|g, &d, &x| *g = d * 2.0 * x / n as f32);
                g
            }
            _ => {
                // Ties share the gradient evenly.
                let x = cx.input(0)?;
                let y = cx.output()?;
                let yb = y.broadcast(in_shape.clone()).ok_or_else(|| anyhow!("reduce: bad output shape"))?;
                let mut hit = ArrayD::<f32>::zeros(in_shape.clone());
                Zip::from(&mut hit).and(&x).and(&yb).for_each(|h, &x, &y| *h = (x == y) as u8 as f32);
                let mut count = hit.clone();
                for &a in &self.axes {
                    count = count.sum_axis(Axis(a)).insert_axis(Axis(a));
                }
                let countb = count.broadcast(in_shape.clone()).unwrap().to_owned();
                let mut g = ArrayD::<f32>::zeros(in_shape);
                Zip::from(&mut g).and(&dyb).and(&hit).and(&countb).for_each(|g, &d, &h, &c| *g = d * h / c.max(1.0));
                g
            }
        };
        Ok(vec![Some(dx)])
    }
}

struct SoftmaxStep {
    axes: Vec<usize>,
    log: bool,
}

impl ReverseStep for SoftmaxStep {
    fn needs_output(&self) -> bool {
        true
    }

    fn back(&self, cx: &Cx, mut dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        let y = cx.output()?;
        let shape = IxDyn(&cx.facts.out_shape);
        // Over the last axis with both in order (attention's softmax): row by row, in place.
        let last = cx.facts.out_shape.len().checked_sub(1);
        if let (Some(n), true) = (last.map(|l| cx.facts.out_shape[l]), self.axes.len() == 1 && Some(self.axes[0]) == last) {
            if let (Some(ys), Some(gs)) = (y.as_slice(), dy.as_slice_mut()) {
                for (yr, gr) in ys.chunks_exact(n.max(1)).zip(gs.chunks_exact_mut(n.max(1))) {
                    if self.log {
                        let s: f32 = gr.iter().sum();
                        for (g, &y) in gr.iter_mut().zip(yr) {
                            *g -= y.exp() * s;
                        }
                    } else {
                        let s: f32 = gr.iter().zip(yr).map(|(g, y)| g * y).sum();
                        for (g, &y) in gr.iter_mut().zip(yr) {
                            *g = y * (*g - s);
                        }
                    }
                }
                return Ok(vec![Some(dy)]);
            }
        }
        let sum_axes = |mut a: ArrayD<f32>| {
            for &ax in &self.axes {
                a = a.sum_axis(Axis(ax)).insert_axis(Axis(ax));
            }
            a
        };
        let mut dx = ArrayD::<f32>::zeros(shape.clone());
        if self.log {
            // y = x - logsumexp(x): dx = dy - softmax(x)·Σdy
            let s = sum_axes(dy.clone());
            let s = s.broadcast(shape).unwrap();
            Zip::from(&mut dx).and(&dy).and(&y).and(&s).for_each(|g, &d, &y, &s| *g = d - y.exp() * s);
        } else {
            // dx = y ⊙ (dy − Σ dy⊙y)
            let s = sum_axes(&dy * &y);
            let s = s.broadcast(shape).unwrap();
            Zip::from(&mut dx).and(&dy).and(&y).and(&s).for_each(|g, &d, &y, &s| *g = y * (d - s));
        }
        Ok(vec![Some(dx)])
    }
}
