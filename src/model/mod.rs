//! The user's ONNX classifier on CPU: loading, forward passes, and the entry points of the exact
//! reverse pass ([`crate::grad`]).
//!
//! One [`Model`] is loaded once and shared (`Arc<Model>`) across worker threads. It keeps two
//! views of the same graph: tract's *decluttered* typed graph, which the reverse pass walks op by
//! op, and an *optimized* plan of it for plain forwards. Both come from the same decluttered
//! graph, so the forward semantics the gradients differentiate are exactly the ones `forward`
//! runs.

mod load;
mod normalises;
mod occlude;
mod path;

pub use load::input_dims;
pub use path::{PathPoint, StraightPath};

/// The ONNX protobuf types a model is read from (re-exported for [`Model::load_proto`]).
pub use tract_onnx::pb;

use std::borrow::Cow;
use std::path::{Path, PathBuf};
use std::sync::{Arc, OnceLock};

use anyhow::{Context, Result, anyhow, bail};
use ndarray::{Array1, ArrayD};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use tract_onnx::prelude::*;
use tract_onnx::tract_core::ops::change_axes::AxisOp;
use tract_onnx::tract_core::ops::nn::{Softmax, SoftmaxKind};

use crate::control::{Cancelled, Control};
use crate::grad::{self, ReversePass};
use crate::graph::{Plan, geometry, optimized_plan};

/// How to load a model.
#[derive(Clone, Debug, Default)]
pub struct LoadOptions {
    /// Full input shape including the batch axis (which must be 1). Overrides dynamic dims.
    pub input_shape: Option<Vec<usize>>,
    /// The graph output to score, by its ONNX name (`--output`, or `name` under `[output]` in
    /// the feed card). `None`: the only output, else the one shaped like class scores.
    pub output: Option<String>,
    /// How many classes the scored output must have (the feed card's label count), used to pick
    /// among several outputs shaped like class scores.
    pub classes: Option<usize>,
}

/// Which vector a method scores.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
pub enum Tap {
    /// The graph's scored output (see [`LoadOptions::output`]), flattened.
    Output,
    /// The input of the graph's final softmax (its logits), flattened. An error if the graph
    /// does not end in a softmax.
    BeforeSoftmax,
}

/// An exact input gradient: `grad = Jᵀ · seed(outputs)`, shaped like the model input.
#[derive(Clone, Debug)]
pub struct Gradient {
    pub outputs: Array1<f32>,
    pub grad: ArrayD<f32>,
}

/// What `spurion info` shows about a model.
#[derive(Clone, Debug, Serialize)]
pub struct ModelInfo {
    pub path: PathBuf,
    pub sha256: String,
    pub inputs: Vec<TensorInfo>,
    pub outputs: Vec<TensorInfo>,
    /// The output methods score (its name).
    pub scored_output: String,
    /// Operator types of the ONNX file, with counts.
    pub onnx_ops: Vec<OpCount>,
    /// Operators of the decluttered graph the reverse pass walks, with counts and whether each
    /// has a reverse step.
    pub ops: Vec<OpCount>,
    /// Nodes between input and score that have no reverse step (gradient methods refuse).
    pub unsupported: Vec<UnsupportedNode>,
    pub ends_in_softmax: bool,
    pub gradient_ready: bool,
}

#[derive(Clone, Debug, Serialize)]
pub struct TensorInfo {
    pub name: String,
    pub shape: Vec<usize>,
}

#[derive(Clone, Debug, Serialize)]
pub struct OpCount {
    pub op: String,
    pub count: usize,
    /// None for ONNX operator types (they are rewritten before the reverse pass sees them).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub reverse_step: Option<bool>,
}

#[derive(Clone, Debug, Serialize)]
pub struct UnsupportedNode {
    pub op: String,
    pub node: String,
}

/// A loaded classifier. `Send + Sync`; share it with `Arc`.
pub struct Model {
    path: PathBuf,
    sha256: String,
    input_shape: Vec<usize>,
    input_name: String,
    onnx_ops: Vec<(String, usize)>,
    /// Every output of the ONNX graph, in its order (the graph below keeps only the scored one).
    outputs: Vec<TensorInfo>,
    /// The decluttered typed graph: what the reverse pass walks.
    graph: Arc<TypedModel>,
    /// Outlet of the scored output and, when it comes from a softmax, the softmax's input.
    output: OutletId,
    output_name: String,
    before_softmax: Option<OutletId>,
    output_len: usize,
    /// Optimized plan whose outputs are `[output]` or `[output, before_softmax]`.
    plan: Plan,
    reverse: [OnceLock<std::result::Result<Arc<ReversePass>, String>>; 2],
    /// The affine head cut off for path sums (`None`: the graph has none worth cutting).
    split: [OnceLock<std::result::Result<Option<Arc<grad::AffineSplit>>, String>>; 2],
}

/// The inference graph typed at a concrete input shape.
fn typed_at(mut inference: InferenceModel, input_shape: &[usize]) -> Result<TypedModel> {
    inference.set_input_fact(0, f32::fact(input_shape).into()).map_err(|e| anyhow!("{e}"))?;
    inference.into_typed().map_err(|e| anyhow!("{e:#}"))
}

impl Model {
    pub fn load(path: &Path, opts: &LoadOptions) -> Result<Model> {
        let (proto, sha256) = load::read(path)?;
        Self::from_proto(path, &proto, sha256, opts)
    }

    /// A model from an ONNX protobuf held in memory (one with re-drawn weights, say). `origin`
    /// is the file it came from: external data is looked for beside it and errors name it. The
    /// sha256 is of the protobuf's encoding.
    pub fn load_proto(origin: &Path, proto: &pb::ModelProto, opts: &LoadOptions) -> Result<Model> {
        Self::from_proto(origin, proto, load::proto_sha256(proto), opts)
    }

    fn from_proto(path: &Path, proto: &pb::ModelProto, sha256: String, opts: &LoadOptions) -> Result<Model> {
        let inference = load::parse_proto(path, proto)?;
        let onnx_ops = onnx_op_counts(proto);
        let input_shape = load::concrete_input_shape(path, &inference, opts.input_shape.as_deref())?;
        let typed = match typed_at(inference, &input_shape) {
            Ok(t) => t,
            // Shapes the file declares for inner values can disagree with the batch of 1 fed
            // here (a named batch symbol); tract infers them from the input without them.
            Err(first) => load::parse_proto_with(path, proto, true)
                .and_then(|lenient| typed_at(lenient, &input_shape))
                .map_err(|_| {
                    anyhow!(
                        "tract could not work out the types and shapes of {} with input shape {:?}: \
                         {first:#}. Check the input shape (it must be the one the model was exported for)",
                        path.display(),
                        input_shape
                    )
                })?,
        };
        let graph = crate::graph::declutter(typed).map_err(|e| {
            anyhow!(
                "tract could not simplify the graph of {}: {e:#}. Re-exporting the model (a recent \
                 opset, constant folding on) may avoid the construct tract trips on",
                path.display()
            )
        })?;
        let mut graph = graph;
        let input_name = graph.node(graph.input_outlets()?[0].node).name.clone();
        let all_outputs = load::graph_outputs(&graph)?;
        let (output, output_name) = load::scored_output(path, &graph, &all_outputs, opts)?;
        // The graph keeps only the scored output: the other outputs are never computed, and no
        // later step (the affine head cut, the taped forward) mistakes one for the score.
        graph.select_output_outlets(&[output]).map_err(|e| anyhow!("{e}"))?;
        let out_fact = graph.outlet_fact(output)?;
        let output_len = out_fact
            .shape
            .as_concrete()
            .map(|s| s.iter().product::<usize>())
            .ok_or_else(|| anyhow!("output '{output_name}' of {} has no concrete shape", path.display()))?;
        let before_softmax = final_softmax_input(&graph, output);
        let mut outputs = vec![output];
        outputs.extend(before_softmax);
        let plan = optimized_plan(&graph, &outputs)
            .with_context(|| format!("preparing the forward plan of {}", path.display()))?;
        Ok(Model {
            path: path.to_path_buf(),
            sha256,
            input_shape,
            input_name,
            onnx_ops,
            outputs: all_outputs.into_iter().map(|o| o.info).collect(),
            graph: Arc::new(graph),
            output,
            output_name,
            before_softmax,
            output_len,
            plan,
            reverse: [OnceLock::new(), OnceLock::new()],
            split: [OnceLock::new(), OnceLock::new()],
        })
    }

    pub fn path(&self) -> &Path {
        &self.path
    }

    pub fn sha256(&self) -> &str {
        &self.sha256
    }

    pub fn input_shape(&self) -> &[usize] {
        &self.input_shape
    }

    pub fn output_len(&self) -> usize {
        self.output_len
    }

    /// The ONNX name of the output methods score.
    pub fn output_name(&self) -> &str {
        &self.output_name
    }

    pub fn ends_in_softmax(&self) -> bool {
        self.before_softmax.is_some()
    }

    /// The shift and scale by constants the graph applies to its input itself, in words, or
    /// `None` (see `normalises`).
    pub fn input_normalisation(&self) -> Option<String> {
        normalises::input_normalisation(&self.graph)
    }

    pub fn info(&self) -> ModelInfo {
        let g = &*self.graph;
        let mut ops: Vec<OpCount> = Vec::new();
        for node in g.nodes() {
            let name = node.op.name().to_string();
            match ops.iter_mut().find(|o| o.op == name) {
                Some(o) => o.count += 1,
                None => ops.push(OpCount {
                    op: name,
                    count: 1,
                    reverse_step: Some(grad::has_reverse_step(node)),
                }),
            }
        }
        ops.sort_by(|a, b| b.count.cmp(&a.count).then(a.op.cmp(&b.op)));
        let unsupported = self.unsupported(Tap::Output);
        ModelInfo {
            path: self.path.clone(),
            sha256: self.sha256.clone(),
            inputs: vec![TensorInfo { name: self.input_name.clone(), shape: self.input_shape.clone() }],
            outputs: self.outputs.clone(),
            scored_output: self.output_name.clone(),
            onnx_ops: self
                .onnx_ops
                .iter()
                .map(|(op, count)| OpCount { op: op.clone(), count: *count, reverse_step: None })
                .collect(),
            ops,
            gradient_ready: unsupported.is_empty(),
            unsupported,
            ends_in_softmax: self.ends_in_softmax(),
        }
    }

    /// How many convolutions a gradient runs by Winograd's F(2×2, 3×3) (`graph::winograd`): in
    /// its taped forward, and in its reverse pass.
    pub fn winograd_convolutions(&self) -> Result<(usize, usize)> {
        crate::graph::winograd::count(&self.graph)
    }

    fn unsupported(&self, tap: Tap) -> Vec<UnsupportedNode> {
        let Ok(target) = self.tap_outlet(tap) else { return vec![] };
        let Ok(input) = self.graph.input_outlets().map(|i| i[0]) else { return vec![] };
        grad::unsupported_nodes(&self.graph, input, target)
            .into_iter()
            .map(|(op, node)| UnsupportedNode { op, node })
            .collect()
    }

    /// Ok when every node between the input and the scored output has a reverse step.
    pub fn gradient_ready(&self) -> Result<()> {
        self.reverse_pass(Tap::Output).map(|_| ())
    }

    fn tap_outlet(&self, tap: Tap) -> Result<OutletId> {
        match tap {
            Tap::Output => Ok(self.output),
            Tap::BeforeSoftmax => self.before_softmax.ok_or_else(|| {
                anyhow!(
                    "the model {} does not end in a softmax, so there are no logits before one \
                     to score; score its raw output instead",
                    self.path.display()
                )
            }),
        }
    }

    fn reverse_pass(&self, tap: Tap) -> Result<Arc<ReversePass>> {
        let target = self.tap_outlet(tap)?;
        self.built_once(&self.reverse[tap as usize], |input| ReversePass::build(&self.graph, input, target).map(Arc::new))
    }

    /// What `build` makes from the graph's input, made once and kept in `slot` (a failure too, so
    /// it is not retried); a failure says gradients are not available for this model.
    fn built_once<T: Clone>(
        &self,
        slot: &OnceLock<std::result::Result<T, String>>,
        build: impl FnOnce(OutletId) -> Result<T>,
    ) -> Result<T> {
        let built = slot.get_or_init(|| {
            let input = self.graph.input_outlets().map_err(|e| e.to_string())?[0];
            build(input).map_err(|e| format!("{e:#}"))
        });
        built.clone().map_err(|msg| {
            anyhow!("gradients are not available for {}: {msg}", self.path.display())
        })
    }

    fn check_input(&self, x: &ArrayD<f32>) -> Result<()> {
        if x.shape() != self.input_shape.as_slice() {
            bail!(
                "the input tensor has shape {:?} but the model {} takes {:?}; resize or reshape \
                 the input (or load the model with that input shape if its graph allows it)",
                x.shape(),
                self.path.display(),
                self.input_shape
            );
        }
        Ok(())
    }

    fn pick(&self, outputs: TVec<TValue>, tap: Tap) -> Result<Array1<f32>> {
        let ix = match tap {
            Tap::Output => 0,
            Tap::BeforeSoftmax => {
                self.tap_outlet(tap)?;
                1
            }
        };
        let t = outputs[ix].clone().into_tensor();
        let v: Vec<f32> = t.to_plain_array_view::<f32>().map_err(|e| anyhow!("{e}"))?.iter().copied().collect();
        check_finite(&self.path, &v)?;
        Ok(Array1::from(v))
    }

    pub fn forward(&self, x: &ArrayD<f32>, tap: Tap) -> Result<Array1<f32>> {
        self.check_input(x)?;
        self.tap_outlet(tap)?;
        let out = self
            .plan
            .run(tvec!(Tensor::from(x.clone()).into_tvalue()))
            .map_err(|e| anyhow!("running {} failed: {e:#}", self.path.display()))?;
        self.pick(out, tap)
    }

    /// Forwards of many inputs, spread over rayon workers with one plan state each (measured
    /// faster than a batched plan on this CPU, see benches). Order kept; `ctl` advances by one per
    /// input; a cancel stops between inputs with [`Cancelled`].
    pub fn forward_many(
        &self,
        xs: &[ArrayD<f32>],
        tap: Tap,
        ctl: &Control,
    ) -> Result<Vec<Array1<f32>>> {
        self.tap_outlet(tap)?;
        for x in xs {
            self.check_input(x)?;
        }
        xs.par_iter()
            .map_init(
                || self.plan.spawn().map_err(|e| anyhow!("{e}")),
                |state, x| -> Result<Array1<f32>> {
                    ctl.check().map_err(anyhow::Error::new)?;
                    let state = state.as_mut().map_err(|e| anyhow!("{e}"))?;
                    let out = state
                        .run(tvec!(Tensor::from(x.clone()).into_tvalue()))
                        .map_err(|e| anyhow!("running {} failed: {e:#}", self.path.display()))?;
                    let v = self.pick(out, tap)?;
                    ctl.advance(1);
                    Ok(v)
                },
            )
            .collect()
    }

    /// Tapped outputs of `x` with each window `wins[i]` (top-left corner, side `window`, on the
    /// spatial axes `spatial`) replaced by the same window of `xb`. NCHW inputs go through
    /// [`occlude::Occluder`], which recomputes only what a window changes; anything else (or a
    /// graph where that saves nothing) through plain forwards. Order kept; `ctl` advances by one
    /// per window.
    pub fn occluded_outputs(
        &self,
        x: &ArrayD<f32>,
        xb: &ArrayD<f32>,
        spatial: [usize; 2],
        window: usize,
        wins: &[(usize, usize)],
        tap: Tap,
        ctl: &Control,
    ) -> Result<Vec<Array1<f32>>> {
        self.check_input(x)?;
        self.check_input(xb)?;
        self.tap_outlet(tap)?;
        if spatial == [2, 3] && x.ndim() == 4 && std::env::var_os("SPURION_PLAIN_OCCLUSION").is_none() {
            // A graph the occluder cannot prepare still gets plain forwards below.
            if let Ok(Some(occ)) = self.occluder(x, window, wins, tap) {
                let outs = occ.outputs(xb, window, wins, ctl)?;
                for o in &outs {
                    check_finite(&self.path, o.as_slice().unwrap_or(&o.to_vec()))?;
                }
                return Ok(outs);
            }
        }
        let mut outs = Vec::with_capacity(wins.len());
        for chunk in wins.chunks(32) {
            ctl.check().map_err(anyhow::Error::new)?;
            let batch: Vec<ArrayD<f32>> = chunk
                .iter()
                .map(|&corner| {
                    let pick = geometry::window_pick(spatial, corner, window);
                    let mut t = x.clone();
                    t.slice_each_axis_mut(pick).assign(&xb.slice_each_axis(pick));
                    t
                })
                .collect();
            outs.extend(self.forward_many(&batch, tap, ctl)?);
        }
        Ok(outs)
    }

    /// How many nodes the incremental occlusion runs on crops before the rest of the graph
    /// (0: it would use plain forwards). For tests and diagnostics.
    pub fn incremental_occlusion_nodes(&self, x: &ArrayD<f32>, window: usize, wins: &[(usize, usize)], tap: Tap) -> Result<usize> {
        Ok(self.occluder(x, window, wins, tap)?.map_or(0, |o| o.prefix_len()))
    }

    fn occluder(&self, x: &ArrayD<f32>, window: usize, wins: &[(usize, usize)], tap: Tap) -> Result<Option<occlude::Occluder>> {
        let input = self.graph.input_outlets().map_err(|e| anyhow!("{e}"))?[0];
        occlude::Occluder::build(&self.graph, input, self.tap_outlet(tap)?, x, window, wins)
    }

    pub fn gradient(
        &self,
        x: &ArrayD<f32>,
        tap: Tap,
        seed: &(dyn Fn(&Array1<f32>) -> Array1<f32> + Sync),
    ) -> Result<Gradient> {
        self.check_input(x)?;
        let pass = self.reverse_pass(tap)?;
        let mut state = pass.spawn()?;
        self.gradient_with(&pass, &mut state, x, seed)
    }

    fn gradient_with(
        &self,
        pass: &ReversePass,
        state: &mut grad::PassState,
        x: &ArrayD<f32>,
        seed: &(dyn Fn(&Array1<f32>) -> Array1<f32> + Sync),
    ) -> Result<Gradient> {
        let (outputs, grad) = pass
            .run(state, x, &|o: &Array1<f32>| -> Result<Array1<f32>> {
                check_finite(&self.path, o.as_slice().unwrap_or(&o.to_vec()))?;
                let s = seed(o);
                if s.len() != o.len() {
                    bail!("the seed vector has {} entries, the score vector {}", s.len(), o.len());
                }
                Ok(s)
            })
            .with_context(|| format!("reverse pass of {}", self.path.display()))?;
        Ok(Gradient { outputs, grad })
    }

    /// Gradients of many inputs over rayon workers, order kept; `ctl` advances by one per input
    /// and a cancel stops between inputs with [`Cancelled`].
    pub fn gradient_many(
        &self,
        xs: &[ArrayD<f32>],
        tap: Tap,
        seed: &(dyn Fn(&Array1<f32>) -> Array1<f32> + Sync),
        ctl: &Control,
    ) -> Result<Vec<Gradient>> {
        for x in xs {
            self.check_input(x)?;
        }
        let pass = self.reverse_pass(tap)?;
        self.gradients_of(&pass, xs.len(), &|i| Cow::Borrowed(&xs[i]), seed, ctl)
    }

    /// The gradients through `pass` at `point(0)`, …, `point(n − 1)`, over rayon workers with one
    /// pass state each, order kept; `ctl` advances by one per point and a cancel stops between
    /// points with [`Cancelled`].
    fn gradients_of<'a>(
        &self,
        pass: &ReversePass,
        n: usize,
        point: &(dyn Fn(usize) -> Cow<'a, ArrayD<f32>> + Sync),
        seed: &(dyn Fn(&Array1<f32>) -> Array1<f32> + Sync),
        ctl: &Control,
    ) -> Result<Vec<Gradient>> {
        (0..n)
            .into_par_iter()
            .map_init(
                || pass.spawn(),
                |state, i| -> Result<Gradient> {
                    ctl.check().map_err(anyhow::Error::new)?;
                    let state = state.as_mut().map_err(|e| anyhow!("{e:#}"))?;
                    let g = self.gradient_with(pass, state, &point(i), seed)?;
                    ctl.advance(1);
                    Ok(g)
                },
            )
            .collect()
    }
}

/// The ONNX file at `path` as its protobuf message, and the file's sha256 (as
/// [`Model::sha256`] gives it); errors say what is wrong with the file.
pub fn read_proto(path: &Path) -> Result<(pb::ModelProto, String)> {
    load::read(path)
}

/// True when `e` (or its cause chain) is a cancel rather than a failure.
pub fn is_cancelled(e: &anyhow::Error) -> bool {
    e.chain().any(|c| c.downcast_ref::<Cancelled>().is_some())
}

fn check_finite(path: &Path, v: &[f32]) -> Result<()> {
    if let Some(i) = v.iter().position(|x| !x.is_finite()) {
        bail!(
            "the model {} produced a non-finite value ({}) at output position {i}; check the \
             input scaling and the model's weights",
            path.display(),
            v[i]
        );
    }
    Ok(())
}

/// The input of a softmax that produces the scored output, possibly through shape-only ops (flatten).
fn final_softmax_input(g: &TypedModel, output: OutletId) -> Option<OutletId> {
    let mut at = output;
    loop {
        let node = g.node(at.node);
        if let Some(sm) = node.op_as::<Softmax>() {
            return (sm.kind == SoftmaxKind::Softmax).then_some(node.inputs[0]);
        }
        if node.op_is::<AxisOp>() && node.inputs.len() == 1 {
            at = node.inputs[0];
            continue;
        }
        return None;
    }
}

fn onnx_op_counts(proto: &pb::ModelProto) -> Vec<(String, usize)> {
    let mut counts: Vec<(String, usize)> = Vec::new();
    for n in proto.graph.iter().flat_map(|g| g.node.iter()) {
        match counts.iter_mut().find(|(op, _)| *op == n.op_type) {
            Some(c) => c.1 += 1,
            None => counts.push((n.op_type.clone(), 1)),
        }
    }
    counts.sort_by(|a, b| b.1.cmp(&a.1).then(a.0.cmp(&b.0)));
    counts
}
