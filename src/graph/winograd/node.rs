//! Where [`Winograd`] runs in a graph: which convolutions take it ([`for_conv`]), and the graph
//! node that runs it in place of tract's `Conv` ([`WinogradConv`], put in by [`substitute`]).

use std::sync::Arc;

use anyhow::{Result, anyhow, bail};
use tract_onnx::prelude::*;
use tract_onnx::tract_core::internal::{
    EvalContext, EvalOp, Op, StaticName, TypedOp, as_op, format_err, op_as_typed_op, op_out_of_plan,
};
use tract_onnx::tract_core::ops::cnn::{Conv, KernelFormat};
use tract_onnx::tract_core::ops::nn::DataFormat;

use super::Winograd;
use crate::graph::geometry;

/// The Winograd form of a convolution, when it has one worth taking: ungrouped 3×3 kernels
/// with stride and dilation 1 in NCHW, padding at most 2, and an output plane of at least
/// 14×14. Below that a plane has too few 2×2 tiles for 16 small matrix products to beat one
/// large one: `cargo bench --bench winograd` (one thread, ResNet-18's stages) gave about
/// 0.5–0.6, 0.6–0.7 and 0.65–0.75 of tract's time on 56², 28² and 14² planes, and 1.0–1.3 on 7².
/// `SPURION_NO_WINOGRAD=1` turns it off everywhere (for comparison).
pub fn for_conv(
    op: &Conv,
    kernel: &Tensor,
    bias: Option<&Tensor>,
    in_shape: &[usize],
    out_shape: &[usize],
) -> Result<Option<Winograd>> {
    if std::env::var_os("SPURION_NO_WINOGRAD").is_some_and(|v| v == "1") {
        return Ok(None);
    }
    let spec = &op.pool_spec;
    if op.group != 1
        || op.q_params.is_some()
        || op.kernel_fmt != KernelFormat::OIHW
        || spec.data_format != DataFormat::NCHW
        || in_shape.len() != 4
        || out_shape.len() != 4
    {
        return Ok(None);
    }
    let axes = geometry::axes(spec, in_shape)?;
    let fits = axes.iter().all(|g| {
        g.kernel == 3 && g.stride == 1 && g.dilation == 1 && g.pad_before <= 2 && g.pad_after <= 2
    });
    if !fits || axes.iter().any(|g| g.out < 14) {
        return Ok(None);
    }
    let k = kernel.cast_to::<f32>().map_err(|e| anyhow!("{e}"))?;
    let k = k.to_plain_array_view::<f32>().map_err(|e| anyhow!("{e}"))?;
    let (cout, cin) = (k.shape()[0], k.shape()[1]);
    if cin != in_shape[1] || cout != out_shape[1] || k.shape()[2..] != [3, 3] {
        return Ok(None);
    }
    let flat: Vec<f32> = k.iter().copied().collect();
    let bias = match bias {
        None => None,
        Some(b) => {
            let b = b.cast_to::<f32>().map_err(|e| anyhow!("{e}"))?;
            let b: Vec<f32> = b
                .to_plain_array_view::<f32>()
                .map_err(|e| anyhow!("{e}"))?
                .iter()
                .copied()
                .collect();
            match b.len() {
                1 => Some(vec![b[0]; cout]),
                l if l == cout => Some(b),
                _ => return Ok(None),
            }
        }
    };
    let pad = [
        axes[0].pad_before,
        axes[1].pad_before,
        axes[0].pad_after,
        axes[1].pad_after,
    ];
    Ok(Some(Winograd::new(&flat, cout, cin, bias, pad, tiles(out_shape))?))
}

/// Whether `node` picks among its input's values by comparing them: max-pools, max/min
/// reductions and arg-max, top-k, and a max, min or comparison of two computed values (its
/// boolean output may steer a select). Not a comparison with a constant, as ReLU's max with
/// 0: a value computed as exactly the constant is as rare with one convolution as the other.
fn selects(g: &TypedModel, node: &TypedNode) -> bool {
    use tract_onnx::tract_core::ops::binary::TypedBinOp;
    use tract_onnx::tract_core::ops::cnn::MaxPool;
    use tract_onnx::tract_core::ops::nn::{Reduce, Reducer};
    let computed = || {
        node.inputs
            .iter()
            .filter(|i| g.outlet_fact(**i).is_ok_and(|f| f.konst.is_none() && f.datum_type.is_float()))
            .count()
    };
    if node.op_is::<MaxPool>() {
        return true;
    }
    if let Some(r) = node.op_as::<Reduce>() {
        return !matches!(r.reducer, Reducer::Sum | Reducer::Prod | Reducer::MeanOfSquares);
    }
    if let Some(op) = node.op_as::<TypedBinOp>()
        && matches!(op.0.name(), "Max" | "Min")
        && computed() > 1
    {
        return true;
    }
    if node.outputs.iter().any(|o| o.fact.datum_type == bool::datum_type()) && computed() > 1 {
        return true;
    }
    let name = node.op.name().to_lowercase();
    name.contains("topk") || name.contains("argm")
}

/// What [`for_conv`] reads of a float32 convolution node: its constant kernel and bias (the
/// bias `None` when it is not a constant), and its concrete input and output shapes.
struct ConvInputs<'g> {
    op: &'g Conv,
    kernel: Arc<Tensor>,
    bias: Option<Arc<Tensor>>,
    x: Vec<usize>,
    y: Vec<usize>,
}

/// Node `id` as [`ConvInputs`], or `None` when it is not a float32 convolution with a constant
/// kernel and concrete shapes.
fn conv_inputs(g: &TypedModel, id: usize) -> Result<Option<ConvInputs<'_>>> {
    let node = g.node(id);
    let Some(op) = node.op_as::<Conv>() else { return Ok(None) };
    if node.inputs.len() != 3 {
        return Ok(None);
    }
    let fact = |o: OutletId| g.outlet_fact(o).map_err(|e| anyhow!("{e}"));
    let input = fact(node.inputs[0])?;
    let (Some(kernel), Some(x), Some(y)) = (
        fact(node.inputs[1])?.konst.clone(),
        input.shape.as_concrete().map(|s| s.to_vec()),
        fact(OutletId::new(id, 0))?.shape.as_concrete().map(|s| s.to_vec()),
    ) else {
        return Ok(None);
    };
    if input.datum_type != f32::datum_type() {
        return Ok(None);
    }
    let bias = fact(node.inputs[2])?.konst.clone();
    Ok(Some(ConvInputs { op, kernel, bias, x, y }))
}

/// How many convolutions of `g` a gradient runs by Winograd: in its taped forward
/// ([`substitute`]), and in its reverse pass (every one [`for_conv`] takes).
pub fn count(g: &TypedModel) -> Result<(usize, usize)> {
    let forward = substitute(&mut g.clone())?;
    let mut reverse = 0;
    for id in 0..g.nodes().len() {
        let Some(c) = conv_inputs(g, id)? else { continue };
        reverse += for_conv(c.op, &c.kernel, None, &c.x, &c.y)?.is_some() as usize;
    }
    Ok((forward, reverse))
}

/// Number of 2×2 tiles on the plane of an NCHW shape.
pub fn tiles(shape: &[usize]) -> usize {
    shape[2..].iter().map(|d| d.div_ceil(2)).product()
}

/// Puts [`WinogradConv`] in place of the convolutions of `g` that [`for_conv`] takes, except
/// those from which an op that compares values ([`selects`]) can be reached, and returns how
/// many. The graph's nodes, outlets and shapes stay as they
/// were.
///
/// A Winograd convolution rounds a value differently at the two positions of a 2×2 tile, so
/// positions whose windows hold the same numbers (along a straight edge, in a burned-in mark)
/// no longer tie exactly. A max-pool downstream would then pick another of the tied positions
/// than tract's convolution lets it pick, and move the gradient to another pixel: far more
/// than rounding. Below the last comparing op the values only add and scale, and only rounding
/// changes.
pub fn substitute(g: &mut TypedModel) -> Result<usize> {
    // Nodes from which a comparing op can be reached (reverse topological sweep).
    let order = g.eval_order().map_err(|e| anyhow!("{e}"))?;
    let mut feeds_selection = vec![false; g.nodes().len()];
    for &id in order.iter().rev() {
        let node = g.node(id);
        let below = node
            .outputs
            .iter()
            .flat_map(|o| o.successors.iter())
            .any(|s| feeds_selection[s.node]);
        feeds_selection[id] = below || selects(g, node);
    }
    let mut count = 0;
    for id in (0..g.nodes().len()).filter(|id| !feeds_selection[*id]) {
        let Some(c) = conv_inputs(g, id)? else { continue };
        let Some(bias) = &c.bias else { continue };
        if let Some(w) = for_conv(c.op, &c.kernel, Some(bias), &c.x, &c.y)? {
            g.node_mut(id).op = Box::new(WinogradConv::new(w));
            count += 1;
        }
    }
    Ok(count)
}

/// A 3×3 stride-1 convolution node run by [`Winograd`], in place of tract's `Conv` in a graph
/// that is then optimized (the taped forward of the reverse pass). Its inputs stay the
/// convolution's own (input, kernel, bias); the kernel and bias are already in `wino`.
#[derive(Clone, Debug)]
pub struct WinogradConv {
    wino: Arc<Winograd>,
}

impl PartialEq for WinogradConv {
    fn eq(&self, other: &Self) -> bool {
        Arc::ptr_eq(&self.wino, &other.wino)
    }
}
impl Eq for WinogradConv {}

impl WinogradConv {
    pub fn new(wino: Winograd) -> WinogradConv {
        WinogradConv {
            wino: Arc::new(wino),
        }
    }
}

impl Op for WinogradConv {
    fn name(&self) -> StaticName {
        "WinogradConv3x3".into()
    }
    op_as_typed_op!();
}

impl EvalOp for WinogradConv {
    op_out_of_plan!();

    fn eval(&self, _ctx: &EvalContext, inputs: TVec<TValue>) -> TractResult<TVec<TValue>> {
        let x = inputs[0].to_plain_array_view::<f32>()?;
        let &[n, _, h, w] = x.shape() else {
            bail!("WinogradConv3x3: input of rank {}", x.ndim())
        };
        let x = x.as_standard_layout();
        let flat = x
            .as_slice()
            .ok_or_else(|| format_err!("WinogradConv3x3: input not contiguous"))?;
        let (ho, wo) = self.wino.output_hw(h, w).map_err(|e| format_err!("{e}"))?;
        // Every entry is written by `run_into`.
        let mut y =
            unsafe { Tensor::uninitialized::<f32>(&[n, self.wino.out_channels(), ho, wo])? };
        let mut plain = y.try_as_plain_ram_mut()?;
        self.wino
            .run_into(flat, n, h, w, plain.as_slice_mut::<f32>()?)
            .map_err(|e| format_err!("{e}"))?;
        Ok(tvec!(y.into_tvalue()))
    }
}

impl TypedOp for WinogradConv {
    as_op!();

    fn output_facts(&self, inputs: &[&TypedFact]) -> TractResult<TVec<TypedFact>> {
        let shape = inputs[0]
            .shape
            .as_concrete()
            .ok_or_else(|| format_err!("WinogradConv3x3: symbolic input shape"))?;
        let &[n, _, h, w] = shape else {
            bail!("WinogradConv3x3: input of rank {}", shape.len())
        };
        let (ho, wo) = self.wino.output_hw(h, w).map_err(|e| format_err!("{e}"))?;
        Ok(tvec!(f32::fact([n, self.wino.out_channels(), ho, wo])))
    }
}

#[cfg(test)]
mod tests {
    use tract_onnx::tract_core::ops::cnn::{MaxPool, PaddingSpec, PoolSpec};
    use tract_onnx::tract_core::ops::nn::{Reduce, Reducer};

    use super::*;

    fn spec(kernel: usize, stride: usize, pad: usize, channels: usize) -> PoolSpec {
        PoolSpec::new(
            DataFormat::NCHW,
            tvec![kernel, kernel],
            PaddingSpec::Explicit(tvec![pad, pad], tvec![pad, pad]),
            None,
            Some(tvec![stride, stride]),
            channels,
            channels,
        )
    }

    fn conv(m: &mut TypedModel, name: &str, x: OutletId, seed: usize) -> OutletId {
        let k: Vec<f32> = (0..4 * 4 * 9)
            .map(|i| (((i + seed) * 7919) % 101) as f32 / 101.0 - 0.5)
            .collect();
        let k = m
            .add_const(
                format!("{name}.k"),
                Tensor::from_shape(&[4, 4, 3, 3], &k).unwrap(),
            )
            .unwrap();
        let b = m
            .add_const(
                format!("{name}.b"),
                Tensor::from_shape(&[4], &[0.1f32, -0.2, 0.0, 0.3]).unwrap(),
            )
            .unwrap();
        let op = Conv::new(spec(3, 1, 1, 4), KernelFormat::OIHW, 1, None);
        m.wire_node(name, op, &[x, k, b]).unwrap()[0]
    }

    /// x (32²) → conv a → 2×2 max-pool → conv b (16²) → `tail`.
    fn net(tail_max: bool) -> TypedModel {
        let mut m = TypedModel::default();
        let x = m.add_source("x", f32::fact([1, 4, 32, 32])).unwrap();
        let a = conv(&mut m, "a", x, 1);
        let p = m
            .wire_node(
                "pool",
                MaxPool {
                    pool_spec: spec(2, 2, 0, 4),
                    with_index_outputs: None,
                },
                &[a],
            )
            .unwrap()[0];
        let b = conv(&mut m, "b", p, 2);
        let reducer = if tail_max { Reducer::Max } else { Reducer::Sum };
        let y = m
            .wire_node("tail", Reduce::new(tvec![2, 3], reducer), &[b])
            .unwrap();
        m.select_output_outlets(&y).unwrap();
        m
    }

    #[test]
    fn only_convolutions_below_the_last_comparing_op_are_replaced() {
        let mut g = net(false);
        assert_eq!(substitute(&mut g).unwrap(), 1);
        let replaced: Vec<&str> = g
            .nodes()
            .iter()
            .filter(|n| n.op_is::<WinogradConv>())
            .map(|n| n.name.as_str())
            .collect();
        assert_eq!(
            replaced,
            ["b"],
            "conv a feeds the max-pool and stays on tract"
        );
        let mut g = net(true);
        assert_eq!(
            substitute(&mut g).unwrap(),
            0,
            "both convolutions feed a max"
        );
    }

    #[test]
    fn the_replaced_graph_computes_the_same_values() {
        let plain = net(false);
        let mut fast = plain.clone();
        substitute(&mut fast).unwrap();
        let x: Vec<f32> = (0..4 * 32 * 32)
            .map(|i| ((i * 104729) % 997) as f32 / 997.0 - 0.5)
            .collect();
        let x = Tensor::from_shape(&[1, 4, 32, 32], &x).unwrap();
        let run = |m: TypedModel| {
            let plan = TypedSimplePlan::new(m.into_optimized().unwrap()).unwrap();
            let out = plan.run(tvec![x.clone().into_tvalue()]).unwrap();
            out[0]
                .to_plain_array_view::<f32>()
                .unwrap()
                .iter()
                .copied()
                .collect::<Vec<f32>>()
        };
        let (want, got) = (run(plain), run(fast));
        assert_eq!(want.len(), 4);
        for (w, g) in want.iter().zip(&got) {
            assert!((w - g).abs() <= 1e-5 * w.abs().max(1.0), "{w} vs {g}");
        }
    }
}
