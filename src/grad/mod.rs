//! Exact reverse-mode input gradients (vector–Jacobian products) over tract's decluttered graph.
//!
//! The pass walks the same decluttered `TypedModel` that the forward plan is optimized from, so
//! what it differentiates is exactly what `Model::forward` computes. Forward values that reverse
//! steps read are obtained by making them outputs of a copy of the graph and optimizing that copy
//! (one optimized run per gradient, no interpreter).
//!
//! Each op family keeps its reverse step in one file; [`FAMILIES`] is the registry that says which
//! ops have one. Nodes that do not depend on the input (constants, shape arithmetic) are never
//! visited; nodes whose outputs are not floats (comparisons) carry no gradient.

mod binary;
mod conv;
mod fastmath;
mod einsum;
mod gather;
mod lrn;
mod norm;
mod pool;
mod reduce;
mod shape;
mod split;
mod unary;

use std::collections::HashMap;
use std::sync::Arc;

use anyhow::{Context, Result, anyhow, bail};
use ndarray::{Array1, ArrayD, ArrayViewD, Axis, IxDyn};
use tract_onnx::prelude::*;

use crate::graph::{Plan, plan, winograd};

pub(crate) use split::AffineSplit;

/// `a` in standard (row-major) order, copied only when it is not already.
pub(crate) fn standard(a: ArrayD<f32>) -> ArrayD<f32> {
    if a.is_standard_layout() { a } else { a.as_standard_layout().into_owned() }
}

/// One op family's reverse step for one node.
pub(crate) trait ReverseStep: Send + Sync {
    /// Reads the values of the node's non-constant inputs.
    fn needs_inputs(&self) -> bool {
        false
    }
    /// Reads the value of input `slot` (when not a constant); by default as `needs_inputs`.
    fn needs_input(&self, _slot: usize) -> bool {
        self.needs_inputs()
    }
    /// Reads the value of the node's output.
    fn needs_output(&self) -> bool {
        false
    }
    /// Heavy preparation (sub-plans), done once when a gradient is first asked for.
    fn prepare(&mut self, _cx: &NodeFacts) -> Result<()> {
        Ok(())
    }
    /// Given the gradient of the output, the gradient of each input (`None`: not needed or zero).
    /// Only inputs flagged active in `cx` are used.
    fn back(&self, cx: &Cx, dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>>;
}

/// A family's constructor: `None` when the op is not the family's, `Some(Err)` when it is but
/// this configuration has no reverse step (the message says why).
type Build = fn(&TypedNode) -> Option<Result<Box<dyn ReverseStep>>>;

/// The registry: which op families have a reverse step. Looked up in order.
const FAMILIES: &[(&str, Build)] = &[
    ("conv", conv::build),
    ("einsum", einsum::build),
    ("binary", binary::build),
    ("unary", unary::build),
    ("pool", pool::build),
    ("reduce", reduce::build),
    ("shape", shape::build),
    ("gather", gather::build),
    ("lrn", lrn::build),
    ("norm", norm::build),
];

fn lookup(node: &TypedNode) -> Option<Result<Box<dyn ReverseStep>>> {
    FAMILIES.iter().find_map(|(_, build)| build(node))
}

/// Whether `node`'s op has a reverse step (as configured in this graph).
pub fn has_reverse_step(node: &TypedNode) -> bool {
    if node.op_is::<tract_onnx::tract_core::ops::konst::Const>()
        || node.op_is::<tract_onnx::tract_core::ops::source::TypedSource>()
    {
        return true;
    }
    matches!(lookup(node), Some(Ok(_)))
}

/// Concrete facts of one node, for steps to read shapes from (tract's facts, not the ONNX file:
/// declutter may have dropped the batch axis mid-graph).
pub(crate) struct NodeFacts {
    pub name: String,
    pub in_shapes: Vec<Vec<usize>>,
    pub out_shape: Vec<usize>,
    pub active: Vec<bool>,
    /// Constant inputs, by slot.
    pub konst: Vec<Option<Arc<Tensor>>>,
}

/// What a step sees at run time.
pub(crate) struct Cx<'a> {
    pub facts: &'a NodeFacts,
    inputs: Vec<Option<&'a Tensor>>,
    output: Option<&'a Tensor>,
}

impl<'a> Cx<'a> {
    pub fn active(&self, slot: usize) -> bool {
        self.facts.active[slot]
    }
    pub fn input_tensor(&self, slot: usize) -> Result<&'a Tensor> {
        self.inputs
            .get(slot)
            .copied()
            .flatten()
            .ok_or_else(|| anyhow!("internal: value of input {slot} of node {} was not kept", self.facts.name))
    }
    pub fn input(&self, slot: usize) -> Result<ArrayViewD<'a, f32>> {
        self.input_tensor(slot)?
            .to_plain_array_view::<f32>()
            .map_err(|e| anyhow!("input {slot} of node {}: {e}", self.facts.name))
    }
    pub fn output(&self) -> Result<ArrayViewD<'a, f32>> {
        self.output
            .ok_or_else(|| anyhow!("internal: output of node {} was not kept", self.facts.name))?
            .to_plain_array_view::<f32>()
            .map_err(|e| anyhow!("output of node {}: {e}", self.facts.name))
    }
}

struct Entry {
    facts: NodeFacts,
    inputs: Vec<OutletId>,
    output: OutletId,
    /// Where each input value comes from at run time.
    values: Vec<Value>,
    out_value: Option<usize>,
    step: Box<dyn ReverseStep>,
}

#[derive(Clone)]
enum Value {
    None,
    Const(Arc<Tensor>),
    Tape(usize),
    Input,
}

/// The compiled reverse pass of one graph for one scored outlet.
pub(crate) struct ReversePass {
    input: OutletId,
    input_shape: Vec<usize>,
    target_shape: Vec<usize>,
    entries: Vec<Entry>,
    /// Optimized copy of the graph whose outputs are `[target, taped values...]`.
    tape: Plan,
}

/// Per-worker run state.
pub(crate) struct PassState {
    tape: TypedSimpleState,
}

fn concrete(g: &TypedModel, o: OutletId) -> Result<Vec<usize>> {
    g.outlet_fact(o)?
        .shape
        .as_concrete()
        .map(|s| s.to_vec())
        .ok_or_else(|| anyhow!("node {} has a symbolic shape", g.node(o.node).name))
}

fn is_float(g: &TypedModel, o: OutletId) -> bool {
    g.outlet_fact(o).map(|f| f.datum_type.is_float()).unwrap_or(false)
}

/// Outlets that depend on `input` and that `target` depends on, and carry floats.
fn active_outlets(g: &TypedModel, input: OutletId, target: OutletId) -> Result<(Vec<usize>, Vec<bool>)> {
    let order = g.eval_order()?;
    let mut fwd = vec![false; g.nodes().len()];
    fwd[input.node] = true;
    for &n in &order {
        if g.node(n).inputs.iter().any(|i| fwd[i.node] && is_float(g, *i)) {
            fwd[n] = true;
        }
    }
    let mut back = vec![false; g.nodes().len()];
    back[target.node] = true;
    for &n in order.iter().rev() {
        if back[n] {
            for i in &g.node(n).inputs {
                back[i.node] = true;
            }
        }
    }
    let active: Vec<bool> = (0..g.nodes().len())
        .map(|n| fwd[n] && back[n] && g.node(n).outputs.iter().any(|o| o.fact.datum_type.is_float()))
        .collect();
    let nodes = order.into_iter().filter(|&n| active[n] && n != input.node).collect();
    Ok((nodes, active))
}

/// (op, node) of every node between input and target that has no reverse step.
pub fn unsupported_nodes(g: &TypedModel, input: OutletId, target: OutletId) -> Vec<(String, String)> {
    let Ok((nodes, _)) = active_outlets(g, input, target) else { return vec![] };
    let mut out = vec![];
    for n in nodes {
        let node = g.node(n);
        let why = match lookup(node) {
            None => None,
            Some(Err(e)) => Some(format!("{e}")),
            Some(Ok(_)) if node.outputs.len() != 1 => Some("several outputs".to_string()),
            Some(Ok(_)) => continue,
        };
        let op = match why {
            Some(w) => format!("{} ({w})", node.op.name()),
            None => node.op.name().to_string(),
        };
        out.push((op, node.name.clone()));
    }
    out
}

impl ReversePass {
    pub fn build(g: &TypedModel, input: OutletId, target: OutletId) -> Result<ReversePass> {
        let missing = unsupported_nodes(g, input, target);
        if !missing.is_empty() {
            let list: Vec<String> =
                missing.iter().map(|(op, node)| format!("op {op} at node '{node}'")).collect();
            bail!(
                "no reverse step for {}. Gradient-free methods (occlusion) still work; \
                 re-exporting the model with standard layers may avoid these ops",
                list.join(", ")
            );
        }
        let (nodes, active) = active_outlets(g, input, target)?;
        let mut taped: Vec<OutletId> = vec![target];
        let tape_ix = |o: OutletId, taped: &mut Vec<OutletId>| -> Value {
            if o == input {
                return Value::Input;
            }
            if let Some(i) = taped.iter().position(|t| *t == o) {
                return Value::Tape(i);
            }
            taped.push(o);
            Value::Tape(taped.len() - 1)
        };
        let mut entries = Vec::with_capacity(nodes.len());
        for n in nodes {
            let node = g.node(n);
            let mut step = lookup(node).context("registry changed")??;
            let inputs: Vec<OutletId> = node.inputs.to_vec();
            let konst: Vec<Option<Arc<Tensor>>> = inputs
                .iter()
                .map(|i| g.outlet_fact(*i).ok().and_then(|f| f.konst.clone()))
                .collect();
            let facts = NodeFacts {
                name: node.name.clone(),
                in_shapes: inputs.iter().map(|i| concrete(g, *i)).collect::<Result<_>>()?,
                out_shape: concrete(g, OutletId::new(n, 0))?,
                active: inputs.iter().map(|i| active[i.node] && is_float(g, *i)).collect(),
                konst: konst.clone(),
            };
            step.prepare(&facts).with_context(|| {
                format!("preparing the reverse step of {} at node '{}'", node.op.name(), node.name)
            })?;
            let values = inputs
                .iter()
                .zip(&konst)
                .enumerate()
                .map(|(slot, (i, k))| match k {
                    Some(k) => Value::Const(k.clone()),
                    None if step.needs_input(slot) => tape_ix(*i, &mut taped),
                    None => Value::None,
                })
                .collect();
            let out_value = match step.needs_output() {
                true => match tape_ix(OutletId::new(n, 0), &mut taped) {
                    Value::Tape(i) => Some(i),
                    _ => None,
                },
                false => None,
            };
            entries.push(Entry { facts, inputs, output: OutletId::new(n, 0), values, out_value, step });
        }
        // The taped forward runs large 3×3 convolutions by Winograd where that changes nothing
        // but rounding (see `winograd::substitute`).
        let mut fast = g.clone();
        winograd::substitute(&mut fast)?;
        fast.select_output_outlets(&taped).map_err(|e| anyhow!("{e}"))?;
        let tape = plan(fast).context("preparing the forward pass that keeps values")?;
        Ok(ReversePass {
            input,
            input_shape: concrete(g, input)?,
            target_shape: concrete(g, target)?,
            entries,
            tape,
        })
    }

    pub fn spawn(&self) -> Result<PassState> {
        Ok(PassState { tape: self.tape.spawn().map_err(|e| anyhow!("{e}"))? })
    }

    /// Forward with kept values, then the reverse sweep. `seed` maps the score vector to the
    /// cotangent of the score.
    pub fn run(
        &self,
        state: &mut PassState,
        x: &ArrayD<f32>,
        seed: &dyn Fn(&Array1<f32>) -> Result<Array1<f32>>,
    ) -> Result<(Array1<f32>, ArrayD<f32>)> {
        let x_t = Tensor::from(x.clone());
        let kept = state
            .tape
            .run(tvec!(x_t.clone().into_tvalue()))
            .map_err(|e| anyhow!("forward pass failed: {e:#}"))?;
        let scores: Vec<f32> = kept[0].to_plain_array_view::<f32>().map_err(|e| anyhow!("{e}"))?.iter().copied().collect();
        let scores = Array1::from(scores);
        let s = seed(&scores)?;
        let mut grads: HashMap<OutletId, ArrayD<f32>> = HashMap::new();
        let target_outlet = self.entries.last().map(|e| e.output);
        let seed_arr = s.into_shape_with_order(IxDyn(&self.target_shape))?;
        match target_outlet {
            Some(t) => {
                grads.insert(t, seed_arr);
            }
            // The score is the input itself.
            None => return Ok((scores, seed_arr.into_shape_with_order(IxDyn(&self.input_shape))?)),
        }
        for e in self.entries.iter().rev() {
            let Some(dy) = grads.remove(&e.output) else { continue };
            let inputs: Vec<Option<&Tensor>> = e
                .values
                .iter()
                .map(|v| match v {
                    Value::None => None,
                    Value::Const(k) => Some(&**k),
                    Value::Tape(i) => Some(&*kept[*i]),
                    Value::Input => Some(&x_t),
                })
                .collect();
            let cx = Cx { facts: &e.facts, inputs, output: e.out_value.map(|i| &*kept[i]) };
            let dxs = e.step.back(&cx, dy).with_context(|| {
                format!("reverse step at node '{}'", e.facts.name)
            })?;
            for (slot, dx) in dxs.into_iter().enumerate() {
                let Some(dx) = dx else { continue };
                if !e.facts.active.get(slot).copied().unwrap_or(false) {
                    continue;
                }
                if dx.shape() != e.facts.in_shapes[slot].as_slice() {
                    bail!(
                        "internal: reverse step at node '{}' gave shape {:?} for input {slot}, \
                         expected {:?}",
                        e.facts.name,
                        dx.shape(),
                        e.facts.in_shapes[slot]
                    );
                }
                match grads.entry(e.inputs[slot]) {
                    std::collections::hash_map::Entry::Occupied(mut o) => *o.get_mut() += &dx,
                    std::collections::hash_map::Entry::Vacant(v) => {
                        v.insert(dx);
                    }
                }
            }
        }
        let g = grads
            .remove(&self.input)
            .unwrap_or_else(|| ArrayD::zeros(IxDyn(&self.input_shape)));
        Ok((scores, g))
    }
}

/// Sums a broadcast gradient back to `shape` (numpy broadcasting: leading axes and size-1 axes).
pub(crate) fn unbroadcast(mut g: ArrayD<f32>, shape: &[usize]) -> Result<ArrayD<f32>> {
    while g.ndim() > shape.len() {
        g = g.sum_axis(Axis(0));
    }
    for ax in 0..shape.len() {
        if shape[ax] == 1 && g.shape()[ax] != 1 {
            g = g.sum_axis(Axis(ax)).insert_axis(Axis(ax));
        }
    }
    if g.shape() != shape {
        bail!("cannot reduce gradient of shape {:?} to {:?}", g.shape(), shape);
    }
    Ok(g)
}
