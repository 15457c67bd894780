//! Reverse step of `EinSum` (gemm, matmul and 1×1 convolutions after declutter).
//!
//! For operand j of `A,B->C`, the gradient is again an einsum: `C,B->A` with dC in C's place.
//! Each active operand gets that einsum as a small optimized tract graph, so it runs on tract's
//! matrix kernels.

use anyhow::{Context, Result, anyhow, bail};
use ndarray::{ArrayD, Axis, IxDyn};
use tract_onnx::prelude::*;
use tract_onnx::tract_core::axes::AxesMapping;
use tract_onnx::tract_core::ops::einsum::EinSum;

use super::{Cx, NodeFacts, ReverseStep, unbroadcast};
use crate::graph::{Plan, plan, run_sub};

pub(super) fn build(node: &TypedNode) -> Option<Result<Box<dyn ReverseStep>>> {
    let op = node.op_as::<EinSum>()?;
    if op.q_params.is_some() || op.operating_dt != f32::datum_type() {
        return Some(Err(anyhow!("quantized or non-f32 einsum")));
    }
    if node.inputs.len() > 3 {
        return Some(Err(anyhow!("einsum of more than three operands")));
    }
    Some(Ok(Box::new(EinSumStep { op: op.clone(), plans: vec![], needs: false })))
}

struct OperandPlan {
    slot: usize,
    plan: Plan,
    /// Non-constant other operands fed to the plan after dC, by slot.
    fed: Vec<usize>,
    /// Axes of the operand that appear nowhere else: summed in the forward, so the gradient is
    /// broadcast along them (positions in the operand).
    lonely: Vec<usize>,
}

struct EinSumStep {
    op: EinSum,
    plans: Vec<OperandPlan>,
    needs: bool,
}

impl ReverseStep for EinSumStep {
    fn needs_inputs(&self) -> bool {
        self.needs
    }

    fn prepare(&mut self, f: &NodeFacts) -> Result<()> {
        let (ins, outs) = self.op.axes.to_strs();
        let out = outs[0].clone();
        for j in 0..ins.len() {
            if !f.active[j] {
                continue;
            }
            let target: Vec<char> = ins[j].chars().collect();
            if (1..target.len()).any(|i| target[..i].contains(&target[i])) {
                bail!("einsum with a repeated axis in one operand ({})", self.op.axes);
            }
            let elsewhere = |c: char| out.contains(c) || (0..ins.len()).any(|k| k != j && ins[k].contains(c));
            let lonely: Vec<usize> = (0..target.len()).filter(|&p| !elsewhere(target[p])).collect();
            let kept: String = target.iter().filter(|c| elsewhere(**c)).collect();
            let mut m = TypedModel::default();
            let mut wires = vec![m.add_source("dy", f32::fact(f.out_shape.clone()))?];
            let mut exprs = vec![out.to_string()];
            let mut fed = vec![];
            for k in 0..ins.len() {
                if k == j {
                    continue;
                }
                let w = match &f.konst[k] {
                    Some(t) => m.add_const(format!("op{k}"), t.clone())?,
                    None => {
                        fed.push(k);
                        m.add_source(format!("op{k}"), f32::fact(f.in_shapes[k].clone()))?
                    }
                };
                wires.push(w);
                exprs.push(ins[k].to_string());
            }
            let axes = AxesMapping::from_strs(&exprs, &[kept])?;
            let g = m.wire_node(
                "grad",
                EinSum { axes, operating_dt: f32::datum_type(), q_params: None },
                &wires,
            )?;
            m.select_output_outlets(&g)?;
            self.needs |= !fed.is_empty();
            self.plans.push(OperandPlan { slot: j, plan: plan(m)?, fed, lonely });
        }
        Ok(())
    }

    fn back(&self, cx: &Cx, dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        let mut res: Vec<Option<ArrayD<f32>>> = vec![None; cx.facts.in_shapes.len()];
        let dy_t = Tensor::from(dy);
        for p in &self.plans {
            let mut inputs = vec![dy_t.clone()];
            for &k in &p.fed {
                inputs.push(cx.input_tensor(k)?.clone());
            }
            let mut g = run_sub(&p.plan, inputs)?;
            let shape = &cx.facts.in_shapes[p.slot];
            for &pos in &p.lonely {
                g = g.insert_axis(Axis(pos));
            }
            // Lonely axes: broadcast; size-1 operand axes against a larger output: sum.
            let target: Vec<usize> = shape.clone();
            let g = if g.shape().iter().zip(&target).any(|(a, b)| a < b) {
                g.broadcast(IxDyn(&target)).context("einsum reverse: broadcast")?.to_owned()
            } else {
                g
            };
            res[p.slot] = Some(unbroadcast(g, shape)?);
        }
        Ok(res)
    }
}
