//! The affine head of a graph, and gradients summed along a straight path through it.
//!
//! Most image classifiers begin with ops that are affine in the input: an optional
//! normalisation by constants, then a convolution. Call that chain P, from the input up to the
//! first op that is not affine (a ReLU, a pool), and the rest T, so that F = T ∘ P. Two exact
//! identities follow (exact in real arithmetic; in float32 they differ from the plain pass by
//! rounding only):
//!
//! - along a straight path, P(x₀ + α·d) = P(x₀) + α·(P(x₀ + d) − P(x₀)), so the head's forward
//!   is computed twice instead of once per point;
//! - P's Jacobian is one constant matrix J, so Σₖ wₖ·Jᵀ gₖ = Jᵀ(Σₖ wₖ·gₖ): the head's reverse
//!   step runs once for a whole sum of gradients instead of once per point.
//!
//! Integrated gradients needs exactly such a sum, so it skips the first convolution's forward
//! and reverse work at every interpolant (on a ResNet-18 at 224², 118 MFLOP each way out of
//! about 1.8 GFLOP). The split is only made when the head holds a matrix op (a convolution or
//! an einsum); a head of element-wise constants alone would save nothing.

use std::collections::HashMap;

use anyhow::{Context, Result, anyhow};
use ndarray::{Array1, ArrayD};
use tract_onnx::prelude::*;
use tract_onnx::tract_core::ops::array::{Pad, PadMode, Slice};
use tract_onnx::tract_core::ops::binary::TypedBinOp;
use tract_onnx::tract_core::ops::cnn::Conv;
use tract_onnx::tract_core::ops::einsum::EinSum;
use tract_onnx::tract_core::ops::konst::Const;

use super::ReversePass;
use crate::graph::{Plan, optimized_plan, to_array};

/// Whether `node`, fed by `slot` from the head and by constants elsewhere, is affine in that
/// input.
fn affine_in(node: &TypedNode, slot: usize) -> bool {
    if let Some(op) = node.op_as::<Conv>() {
        return slot == 0 && op.q_params.is_none();
    }
    if let Some(op) = node.op_as::<EinSum>() {
        return op.q_params.is_none() && op.operating_dt == f32::datum_type();
    }
    if let Some(op) = node.op_as::<TypedBinOp>() {
        return match op.0.name() {
            "Add" | "Sub" | "SubF" | "Mul" => true,
            // x / c is affine, c / x is not.
            "Div" => slot == 0,
            _ => false,
        };
    }
    if let Some(op) = node.op_as::<Pad>() {
        return matches!(op.mode, PadMode::Constant(_));
    }
    node.op_is::<tract_onnx::tract_core::ops::change_axes::AxisOp>() || node.op_is::<Slice>()
}

fn is_matrix_op(node: &TypedNode) -> bool {
    node.op_is::<Conv>() || node.op_is::<EinSum>()
}

/// The furthest outlet of the affine chain that starts at `input`, when the chain holds a
/// matrix op and does not reach `target`. Every value in the chain has one consumer, so the
/// rest of the graph reads the head only through the cut.
fn find_cut(g: &TypedModel, input: OutletId, target: OutletId) -> Result<Option<(OutletId, usize)>> {
    let mut at = input;
    let mut cut = None;
    let mut matrix = false;
    let mut len = 0;
    while at != target {
        let succ = g.outlet_successors(at);
        if succ.len() != 1 || g.output_outlets()?.contains(&at) {
            break;
        }
        let node = g.node(succ[0].node);
        let others_constant = node
            .inputs
            .iter()
            .enumerate()
            .all(|(s, i)| s == succ[0].slot || g.outlet_fact(*i).is_ok_and(|f| f.konst.is_some()));
        let float_out = node.outputs.len() == 1 && node.outputs[0].fact.datum_type == f32::datum_type();
        if !others_constant || !float_out || !affine_in(node, succ[0].slot) {
            break;
        }
        at = OutletId::new(node.id, 0);
        len += 1;
        matrix |= is_matrix_op(node);
        if matrix && at != target {
            cut = Some((at, len));
        }
    }
    Ok(cut)
}

/// The rest of the graph after `cut`: a new graph whose source is the cut and which holds every
/// node `target` needs beyond it, in the original's evaluation order. (Re-pointing the
/// original's input at the cut and compacting it fails on graphs whose constants sit before
/// the cut in node order, like a vision transformer's class token.) The head is read only
/// through the cut (see [`find_cut`]).
fn rest_graph(g: &TypedModel, cut: OutletId, target: OutletId) -> Result<(TypedModel, OutletId, OutletId)> {
    let order = g.eval_order()?;
    let mut needed = vec![false; g.nodes().len()];
    needed[target.node] = true;
    for &n in order.iter().rev() {
        if needed[n] && n != cut.node {
            for i in &g.node(n).inputs {
                needed[i.node] = true;
            }
        }
    }
    let mut rest = TypedModel::default();
    let mut map: HashMap<OutletId, OutletId> = HashMap::new();
    for &n in order.iter().filter(|&&n| needed[n]) {
        let node = g.node(n);
        if n == cut.node {
            let w = rest.add_source("cut", g.outlet_fact(cut)?.without_value())?;
            map.insert(cut, w);
            continue;
        }
        if let Some(k) = node.op_as::<Const>() {
            map.insert(OutletId::new(n, 0), rest.add_const(&node.name, k.val().clone())?);
            continue;
        }
        let wires: Vec<OutletId> = node
            .inputs
            .iter()
            .map(|i| map.get(i).copied().ok_or_else(|| anyhow!("input of {} is not wired", node.name)))
            .collect::<Result<_>>()?;
        for (k, w) in rest.wire_node(&node.name, node.op.clone(), &wires)?.into_iter().enumerate() {
            map.insert(OutletId::new(n, k), w);
        }
    }
    let (input, output) = (map[&cut], map[&target]);
    rest.select_output_outlets(&[output])?;
    Ok((rest, input, output))
}

/// A graph cut after its affine head: the head's forward, the head's reverse (a cotangent at
/// the cut to the input), and the rest's reverse pass from the cut to the target.
pub(crate) struct AffineSplit {
    head: Plan,
    head_reverse: ReversePass,
    /// The reverse pass of the rest of the graph, whose input is the cut.
    pub tail: ReversePass,
    /// How many nodes the head holds.
    pub head_len: usize,
}

impl AffineSplit {
    /// `None` when the graph has no affine head worth cutting off.
    pub fn build(g: &TypedModel, input: OutletId, target: OutletId) -> Result<Option<AffineSplit>> {
        let Some((cut, head_len)) = find_cut(g, input, target)? else { return Ok(None) };
        let head = optimized_plan(g, &[cut]).context("preparing the affine head")?;
        let head_reverse = ReversePass::build(g, input, cut).context("the affine head's reverse pass")?;
        let (rest, rest_input, rest_target) = rest_graph(g, cut, target).context("cutting off the affine head")?;
        let tail = ReversePass::build(&rest, rest_input, rest_target).context("the reverse pass after the affine head")?;
        Ok(Some(AffineSplit { head, head_reverse, tail, head_len }))
    }

    /// The head's value at `x`.
    pub fn head(&self, x: &ArrayD<f32>) -> Result<ArrayD<f32>> {
        let out = self
            .head
            .run(tvec!(Tensor::from(x.clone()).into_tvalue()))
            .map_err(|e| anyhow!("forward pass of the affine head failed: {e:#}"))?;
        to_array(&out[0])
    }

    /// Jᵀ·g: a cotangent at the cut taken back to the input (the head is affine, so any `x`
    /// of the input's shape gives the same).
    pub fn head_transpose(&self, x: &ArrayD<f32>, g: &ArrayD<f32>) -> Result<ArrayD<f32>> {
        let flat: Array1<f32> = g.iter().copied().collect();
        let mut state = self.head_reverse.spawn()?;
        let (_, dx) = self.head_reverse.run(&mut state, x, &|_| Ok(flat.clone()))?;
        Ok(dx)
    }
}
