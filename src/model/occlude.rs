//! Occlusion forwards that recompute only what a window changes.
//!
//! Occluding a window of an NCHW input changes the early activations of a CNN only near the
//! window: a convolution or pool widens the changed box by its kernel's reach, a stride shrinks
//! it, element-wise ops keep it. The plan here walks tract's decluttered graph once per window:
//! while the changed box is small, each convolution, max pool, 1×1 einsum, element-wise op and
//! downsampling runs on a fixed-size crop around it (a small plan built once per node; padding
//! is taken out of the op and applied by filling the crop), and its output is the clean
//! activation with the crop patched in. Where the box grows past most of the map, or an op is
//! not one of these, the rest of the graph (the *tail*) runs as one optimized tract plan from
//! those activations. The result is the same arithmetic as a full forward (same ops, same
//! kernels, only on fewer positions); `tests/occlusion_incremental.rs` holds it equal to plain
//! forwards and `tests/methods_reference.rs` to an independent onnxruntime occlusion.

use std::collections::HashMap;

use anyhow::{Result, anyhow};
use ndarray::{Array1, ArrayD, IxDyn, Slice};
use rayon::prelude::*;
use tract_onnx::prelude::*;
use tract_onnx::tract_core::ops::binary::TypedBinOp;
use tract_onnx::tract_core::ops::change_axes::InOut;
use tract_onnx::tract_core::ops::cnn::{Conv, MaxPool, PaddingSpec, PoolSpec};
use tract_onnx::tract_core::ops::downsample::Downsample;
use tract_onnx::tract_core::ops::einsum::EinSum;
use tract_onnx::tract_core::ops::element_wise::ElementWiseOp;
use tract_onnx::tract_core::ops::nn::DataFormat;

use crate::control::Control;
use crate::graph::geometry::{self, window_pick};
use crate::graph::{Plan, optimized_plan, plan, run_sub, to_array, to_vec};

/// A changed region of a spatial map: half-open row and column ranges.
type Bx = [(usize, usize); 2];

/// Share of a map's area past which a node's changed box counts as "most of the map" and the
/// node joins the tail. On ResNet-18 at 224² (window 16, stride 8; `cargo bench --bench
/// speed`) 0.35 to 1.0 all ran within the machine's noise of each other (16–20 s), 0.35 the
/// slowest; 0.6 is in the flat part.
const TAIL_AREA: f64 = 0.6;

#[derive(Clone, Copy)]
enum Src {
    Const,
    Val(usize),
}

enum Kind {
    /// Runs on whole tensors; `feeds` are the fed (non-constant) input slots in order.
    Whole { plan: Plan, feeds: Vec<usize> },
    /// Runs on a fixed-size crop: output crop `out` (rows, cols) at the box's corner `o0`, fed
    /// slots `feeds` each cropped to `inp` from row `o0·stride + offset` (negative offsets are
    /// padding; positions outside the map take `fill`). Convolutions and max pools (padding
    /// taken out of the op), 1×1 einsums, element-wise ops and downsampling.
    Crop { plan: Plan, feeds: Vec<usize>, out: [usize; 2], inp: [usize; 2], stride: [usize; 2], offset: [isize; 2], fill: f32 },
}

/// A changed value: the clean activation with `data` written at spatial corner `at`; `data`
/// covers every changed position.
struct Patch {
    at: [usize; 2],
    data: ArrayD<f32>,
}

struct Step {
    inputs: Vec<Src>,
    out: usize,
    growth: Growth,
    kind: Kind,
}

/// A node that joins the prefix, as pass 1 of [`Occluder::build`] found it.
struct Candidate {
    node: usize,
    inputs: Vec<Src>,
    growth: Growth,
    /// The largest changed box over all windows (rows, cols).
    big: [usize; 2],
}

/// How a node maps changed boxes.
enum Growth {
    /// Element-wise: the union of the inputs' boxes.
    Same,
    /// Windowed (conv / pool) with per-axis stride, pad before, reach, output size.
    Window { stride: [usize; 2], pad: [usize; 2], reach: [usize; 2], size: [usize; 2] },
    Downsample { axis: usize, stride: usize, modulo: usize, size: [usize; 2] },
}

/// The prepared incremental occlusion of one model, input and tap.
pub(crate) struct Occluder {
    steps: Vec<Step>,
    /// Clean (unoccluded) values of the prefix outlets; index 0 is the input.
    clean: Vec<ArrayD<f32>>,
    /// Value indices the tail reads, in the order of its sources.
    frontier: Vec<usize>,
    tail: Plan,
    hw: [usize; 2],
}

fn union(a: Option<Bx>, b: Option<Bx>) -> Option<Bx> {
    match (a, b) {
        (None, b) => b,
        (a, None) => a,
        (Some(a), Some(b)) => Some([(a[0].0.min(b[0].0), a[0].1.max(b[0].1)), (a[1].0.min(b[1].0), a[1].1.max(b[1].1))]),
    }
}

impl Growth {
    fn apply(&self, b: Bx) -> Bx {
        match self {
            Growth::Same => b,
            Growth::Window { stride, pad, reach, size } => {
                let mut o = [(0, 0); 2];
                for ax in 0..2 {
                    let (i0, i1) = (b[ax].0 as isize, b[ax].1 as isize);
                    let (s, p, r) = (stride[ax] as isize, pad[ax] as isize, reach[ax] as isize);
                    // Output o reads input rows [o·s − p, o·s − p + r).
                    let lo = (i0 + p - r + 1).max(0);
                    let lo = (lo + s - 1) / s;
                    let hi = ((i1 - 1 + p) / s + 1).min(size[ax] as isize);
                    o[ax] = (lo.min(hi) as usize, hi.max(0) as usize);
                }
                o
            }
            Growth::Downsample { axis, stride, modulo, size } => {
                let mut o = b;
                let ax = axis - 2;
                let (i0, i1) = (b[ax].0 as isize, b[ax].1 as isize);
                let (s, m) = (*stride as isize, *modulo as isize);
                let lo = ((i0 - m).max(0) + s - 1) / s;
                let hi = ((i1 - 1 - m).div_euclid(s) + 1).min(size[ax] as isize).max(lo);
                o[ax] = (lo as usize, hi as usize);
                o
            }
        }
    }
}

/// The spatial size of a rank-4 NCHW fact, if it is one.
fn nchw_hw(fact: &TypedFact) -> Option<[usize; 2]> {
    let s = fact.shape.as_concrete()?;
    (s.len() == 4 && s[0] == 1 && fact.datum_type == f32::datum_type()).then(|| [s[2], s[3]])
}

/// Stride, pad before and reach per axis of a 2-d NCHW conv or pool on a map of size `in_hw`.
fn window_geometry(spec: &PoolSpec, in_hw: [usize; 2]) -> Option<([usize; 2], [usize; 2], [usize; 2])> {
    if spec.data_format != DataFormat::NCHW || spec.rank() != 2 {
        return None;
    }
    let a = geometry::axes_hw(spec, &in_hw);
    Some(([a[0].stride, a[1].stride], [a[0].pad_before, a[1].pad_before], [a[0].reach(), a[1].reach()]))
}

/// Whether an einsum maps the two spatial axes of input 0 straight to the same output axes and
/// no other input or reduction touches them (a 1×1 convolution).
fn pointwise_einsum(op: &EinSum) -> bool {
    (2..4).all(|k| {
        op.axes.axis((InOut::In(0), k)).is_ok_and(|a| {
            a.outputs.len() == 1 && a.outputs[0].as_slice() == [k] && a.inputs.iter().skip(1).all(|i| i.is_empty())
        })
    })
}

/// A one-node model: `node`'s op on sources shaped `src_shapes` (for the fed slots) and the
/// node's constants, optimized.
fn node_plan(g: &TypedModel, node: &TypedNode, op: Box<dyn TypedOp>, src_shapes: &HashMap<usize, Vec<usize>>) -> Result<Plan> {
    let mut m = TypedModel::default();
    let mut wires = vec![];
    for (slot, i) in node.inputs.iter().enumerate() {
        let fact = g.outlet_fact(*i)?;
        let w = match (&fact.konst, src_shapes.get(&slot)) {
            (Some(k), _) => m.add_const(format!("k{slot}"), k.clone())?,
            (None, Some(shape)) => m.add_source(format!("s{slot}"), f32::fact(shape.clone()))?,
            (None, None) => return Err(anyhow!("input {slot} of {} is neither fed nor constant", node.name)),
        };
        wires.push(w);
    }
    let out = m.wire_node(&node.name, op, &wires)?;
    m.select_output_outlets(&out[..1])?;
    plan(m)
}

/// How node `node` maps changed boxes, if it can run on crops: its inputs' sources `srcs` (the
/// fed ones among `vals`) and its output size `out_hw`. `None` sends it to the tail.
fn growth_of(g: &TypedModel, node: &TypedNode, srcs: &[Src], vals: &[usize], out_hw: [usize; 2]) -> Result<Option<Growth>> {
    let in_hw = nchw_hw(g.outlet_fact(node.inputs[0])?);
    let single_fed = vals.len() == 1 && matches!(srcs[0], Src::Val(_));
    let window = |spec: &PoolSpec| {
        in_hw.and_then(|h| window_geometry(spec, h)).map(|(stride, pad, reach)| Growth::Window { stride, pad, reach, size: out_hw })
    };
    Ok(if let Some(c) = node.op_as::<Conv>() {
        if c.q_params.is_some() || !single_fed { None } else { window(&c.pool_spec) }
    } else if let Some(p) = node.op_as::<MaxPool>() {
        if p.with_index_outputs.is_some() { None } else { window(&p.pool_spec) }
    } else if let Some(d) = node.op_as::<Downsample>() {
        ((2..4).contains(&d.axis) && d.stride > 0)
            .then(|| Growth::Downsample { axis: d.axis, stride: d.stride as usize, modulo: d.modulo, size: out_hw })
    } else if node.op_is::<TypedBinOp>() || node.op_is::<ElementWiseOp>() {
        // Every fed input must have the output's spatial size (no spatial broadcast).
        let same = node
            .inputs
            .iter()
            .zip(srcs)
            .all(|(i, s)| matches!(s, Src::Const) || g.outlet_fact(*i).ok().and_then(nchw_hw) == Some(out_hw));
        same.then_some(Growth::Same)
    } else if let Some(e) = node.op_as::<EinSum>() {
        (pointwise_einsum(e) && e.q_params.is_none() && single_fed && in_hw == Some(out_hw)).then_some(Growth::Same)
    } else {
        None
    })
}

/// Pass 1: which nodes can join the prefix, in evaluation order, and the largest box each gets
/// over all windows. In the returned index, value k + 1 is the output of prefix[k] and value 0
/// is the input.
fn find_prefix(
    g: &TypedModel,
    input: OutletId,
    tap: OutletId,
    order: &[usize],
    hw: [usize; 2],
    window: usize,
    wins: &[(usize, usize)],
) -> Result<(HashMap<OutletId, usize>, Vec<Candidate>)> {
    let mut index: HashMap<OutletId, usize> = HashMap::from([(input, 0)]);
    let mut prefix: Vec<Candidate> = vec![];
    let mut boxes: Vec<Vec<Option<Bx>>> = wins
        .iter()
        .map(|&(y0, x0)| vec![Some([(y0, (y0 + window).min(hw[0])), (x0, (x0 + window).min(hw[1]))])])
        .collect();
    for &n in order {
        let node = g.node(n);
        if n == input.node || node.op_is::<tract_onnx::tract_core::ops::konst::Const>() || n == tap.node {
            continue;
        }
        if node.outputs.len() != 1 {
            continue;
        }
        let Some(out_hw) = nchw_hw(&node.outputs[0].fact) else { continue };
        let srcs: Option<Vec<Src>> = node
            .inputs
            .iter()
            .map(|i| {
                if g.outlet_fact(*i).ok()?.konst.is_some() {
                    Some(Src::Const)
                } else {
                    index.get(i).map(|v| Src::Val(*v))
                }
            })
            .collect();
        let Some(srcs) = srcs else { continue };
        let vals: Vec<usize> = srcs.iter().filter_map(|s| if let Src::Val(v) = s { Some(*v) } else { None }).collect();
        if vals.is_empty() {
            continue;
        }
        let Some(growth) = growth_of(g, node, &srcs, &vals, out_hw)? else { continue };
        // Boxes for every window, and the largest.
        let mut big = [0usize; 2];
        for b in boxes.iter_mut() {
            let mut acc = None;
            for v in &vals {
                acc = union(acc, b[*v]);
            }
            let ob = acc.map(|a| growth.apply(a));
            if let Some(o) = ob {
                big = [big[0].max(o[0].1 - o[0].0), big[1].max(o[1].1 - o[1].0)];
            }
            b.push(ob);
        }
        if (big[0] * big[1]) as f64 > TAIL_AREA * (out_hw[0] * out_hw[1]) as f64 {
            for b in boxes.iter_mut() {
                b.pop();
            }
            continue;
        }
        index.insert(OutletId::new(n, 0), prefix.len() + 1);
        prefix.push(Candidate { node: n, inputs: srcs, growth, big: [big[0].max(1), big[1].max(1)] });
    }
    Ok((index, prefix))
}

/// The tail: every node not in the prefix that the tap needs, as one optimised plan whose
/// sources are the prefix values it reads (returned in source order).
fn build_tail(g: &TypedModel, tap: OutletId, order: &[usize], index: &HashMap<OutletId, usize>) -> Result<(Plan, Vec<usize>)> {
    let in_prefix = |o: &OutletId| index.contains_key(o);
    let mut needed = vec![false; g.nodes().len()];
    needed[tap.node] = true;
    for &n in order.iter().rev() {
        if needed[n] && !in_prefix(&OutletId::new(n, 0)) {
            for i in &g.node(n).inputs {
                needed[i.node] = true;
            }
        }
    }
    let mut tail = TypedModel::default();
    let mut map: HashMap<OutletId, OutletId> = HashMap::new();
    let mut frontier = vec![];
    for &n in order {
        if !needed[n] {
            continue;
        }
        let node = g.node(n);
        let o = OutletId::new(n, 0);
        if let Some(&v) = index.get(&o) {
            let w = tail.add_source(format!("frontier{v}"), g.outlet_fact(o)?.without_value())?;
            map.insert(o, w);
            frontier.push(v);
            continue;
        }
        if let Some(k) = node.op_as::<tract_onnx::tract_core::ops::konst::Const>() {
            let w = tail.add_const(&node.name, k.val().clone())?;
            map.insert(o, w);
            continue;
        }
        let wires: Vec<OutletId> = node
            .inputs
            .iter()
            .map(|i| map.get(i).copied().ok_or_else(|| anyhow!("tail input of {} not wired", node.name)))
            .collect::<Result<_>>()?;
        let outs = tail.wire_node(&node.name, node.op.clone(), &wires)?;
        for (k, w) in outs.into_iter().enumerate() {
            map.insert(OutletId::new(n, k), w);
        }
    }
    tail.select_output_outlets(&[map[&tap]])?;
    Ok((plan(tail)?, frontier))
}

/// Clean (unoccluded) values at `x`: the input, then each prefix node's output.
fn clean_values(g: &TypedModel, x: &ArrayD<f32>, prefix: &[Candidate]) -> Result<Vec<ArrayD<f32>>> {
    let outlets: Vec<OutletId> = prefix.iter().map(|c| OutletId::new(c.node, 0)).collect();
    let got = optimized_plan(g, &outlets)?.run(tvec!(Tensor::from(x.clone()).into_tvalue())).map_err(|e| anyhow!("{e:#}"))?;
    let mut clean = vec![x.clone()];
    for t in got.iter() {
        clean.push(to_array(t)?);
    }
    Ok(clean)
}

/// The step of one prefix node (its output is value `out`): a small plan on a fixed-size crop,
/// or on whole tensors where its constants vary over the spatial axes.
fn crop_step(g: &TypedModel, out: usize, c: Candidate) -> Result<Step> {
    let Candidate { node: n, inputs, growth, big } = c;
    let node = g.node(n);
    let feeds: Vec<usize> = (0..inputs.len()).filter(|s| matches!(inputs[*s], Src::Val(_))).collect();
    let channels = |slot: usize| -> Result<usize> {
        Ok(g.outlet_fact(node.inputs[slot])?.shape.as_concrete().ok_or_else(|| anyhow!("symbolic shape"))?[1])
    };
    let crop = |op: Box<dyn TypedOp>, inp: [usize; 2], stride: [usize; 2], offset: [isize; 2], fill: f32| -> Result<Kind> {
        let mut shapes = HashMap::new();
        for &slot in &feeds {
            shapes.insert(slot, vec![1, channels(slot)?, inp[0], inp[1]]);
        }
        let plan = node_plan(g, node, op, &shapes)?;
        Ok(Kind::Crop { plan, feeds: feeds.clone(), out: big, inp, stride, offset, fill })
    };
    let kind = match &growth {
        Growth::Window { stride, pad, reach, .. } => {
            let inp = [(big[0] - 1) * stride[0] + reach[0], (big[1] - 1) * stride[1] + reach[1]];
            let offset = [-(pad[0] as isize), -(pad[1] as isize)];
            if let Some(c) = node.op_as::<Conv>() {
                let mut c = c.clone();
                c.pool_spec.padding = PaddingSpec::Valid;
                crop(Box::new(c), inp, *stride, offset, 0.0)?
            } else {
                let mut p = node.op_as::<MaxPool>().expect("a window growth is a conv or a max pool").clone();
                p.pool_spec.padding = PaddingSpec::Valid;
                crop(Box::new(p), inp, *stride, offset, f32::NEG_INFINITY)?
            }
        }
        Growth::Downsample { axis, stride, modulo, .. } => {
            let ax = axis - 2;
            let mut st = [1, 1];
            st[ax] = *stride;
            let mut off = [0, 0];
            off[ax] = *modulo as isize;
            let inp = [(big[0] - 1) * st[0] + 1, (big[1] - 1) * st[1] + 1];
            let op = Downsample { axis: *axis, stride: *stride as isize, modulo: 0 };
            crop(Box::new(op), inp, st, off, 0.0)?
        }
        Growth::Same => {
            // Constants must not vary over the spatial axes (they are not cropped); a point-wise
            // einsum's weights never touch them (checked in pass 1).
            let flat = node.op_is::<EinSum>()
                || node.inputs.iter().zip(&inputs).all(|(i, s)| match s {
                    Src::Val(_) => true,
                    Src::Const => g.outlet_fact(*i).is_ok_and(|f| {
                        let sh = f.shape.as_concrete().unwrap_or(&[]);
                        sh.iter().rev().take(2).all(|d| *d == 1)
                    }),
                });
            if flat {
                crop(node.op.clone(), big, [1, 1], [0, 0], 0.0)?
            } else {
                let mut shapes = HashMap::new();
                for &slot in &feeds {
                    let shape = g.outlet_fact(node.inputs[slot])?.shape.as_concrete().ok_or_else(|| anyhow!("symbolic shape"))?;
                    shapes.insert(slot, shape.to_vec());
                }
                Kind::Whole { plan: node_plan(g, node, node.op.clone(), &shapes)?, feeds: feeds.clone() }
            }
        }
    };
    Ok(Step { inputs, out, growth, kind })
}

impl Occluder {
    /// Prepares the plan for windows `wins` of side `window` on an NCHW input `x`; `None` when
    /// the graph offers nothing to save (then plain forwards are just as good).
    pub(crate) fn build(
        g: &TypedModel,
        input: OutletId,
        tap: OutletId,
        x: &ArrayD<f32>,
        window: usize,
        wins: &[(usize, usize)],
    ) -> Result<Option<Occluder>> {
        let Some(hw) = nchw_hw(g.outlet_fact(input)?) else { return Ok(None) };
        let order = g.eval_order()?;
        let (index, prefix) = find_prefix(g, input, tap, &order, hw, window, wins)?;
        if !prefix.iter().any(|c| matches!(c.growth, Growth::Window { .. })) {
            return Ok(None);
        }
        let (tail, frontier) = build_tail(g, tap, &order, &index)?;
        let clean = clean_values(g, x, &prefix)?;
        let steps = prefix
            .into_iter()
            .enumerate()
            .map(|(k, c)| crop_step(g, k + 1, c))
            .collect::<Result<Vec<Step>>>()?;
        Ok(Some(Occluder { steps, clean, frontier, tail, hw }))
    }

    /// The tapped output with window (y0, x0) of side `window` taken from `xb`.
    fn one(&self, xb: &ArrayD<f32>, window: usize, (y0, x0): (usize, usize)) -> Result<Array1<f32>> {
        let wb: Bx = [(y0, (y0 + window).min(self.hw[0])), (x0, (x0 + window).min(self.hw[1]))];
        let pick = window_pick([2, 3], (y0, x0), window);
        let mut patches: Vec<Option<Patch>> = (0..self.clean.len()).map(|_| None).collect();
        let mut boxes: Vec<Option<Bx>> = vec![None; self.clean.len()];
        patches[0] = Some(Patch { at: [wb[0].0, wb[1].0], data: xb.slice_each_axis(pick).to_owned() });
        boxes[0] = Some(wb);
        for s in &self.steps {
            let mut acc = None;
            for i in &s.inputs {
                if let Src::Val(v) = i {
                    acc = union(acc, boxes[*v]);
                }
            }
            let Some(acc) = acc else { continue };
            let ob = s.growth.apply(acc);
            let value = |slot: usize| -> usize {
                match s.inputs[slot] {
                    Src::Val(v) => v,
                    Src::Const => unreachable!("constants are not fed"),
                }
            };
            let patch = match &s.kind {
                Kind::Whole { plan, feeds } => {
                    let ins = feeds
                        .iter()
                        .map(|slot| {
                            let v = value(*slot);
                            Tensor::from(materialize(&self.clean[v], patches[v].as_ref()))
                        })
                        .collect();
                    Patch { at: [0, 0], data: run_sub(plan, ins)? }
                }
                Kind::Crop { plan, feeds, out, inp, stride, offset, fill } => {
                    let size = [self.clean[s.out].shape()[2], self.clean[s.out].shape()[3]];
                    let o0 = [ob[0].0.min(size[0] - out[0]), ob[1].0.min(size[1] - out[1])];
                    let r0 = [
                        (o0[0] * stride[0]) as isize + offset[0],
                        (o0[1] * stride[1]) as isize + offset[1],
                    ];
                    let ins = feeds
                        .iter()
                        .map(|slot| {
                            let v = value(*slot);
                            Tensor::from(extract(&self.clean[v], patches[v].as_ref(), r0, *inp, *fill))
                        })
                        .collect();
                    Patch { at: o0, data: run_sub(plan, ins)? }
                }
            };
            patches[s.out] = Some(patch);
            boxes[s.out] = Some(ob);
        }
        let ins = self
            .frontier
            .iter()
            .map(|v| Tensor::from(materialize(&self.clean[*v], patches[*v].as_ref())).into_tvalue())
            .collect();
        let y = self.tail.run(ins).map_err(|e| anyhow!("{e:#}"))?;
        Ok(Array1::from(to_vec(&y[0])?))
    }

    /// How many nodes run on crops or patches before the tail.
    pub(crate) fn prefix_len(&self) -> usize {
        self.steps.len()
    }

    /// Tapped outputs for every window, over rayon workers, order kept; `ctl` advances by one
    /// per window.
    pub(crate) fn outputs(&self, xb: &ArrayD<f32>, window: usize, wins: &[(usize, usize)], ctl: &Control) -> Result<Vec<Array1<f32>>> {
        wins.par_iter()
            .map(|w| {
                ctl.check().map_err(anyhow::Error::new)?;
                let r = self.one(xb, window, *w)?;
                ctl.advance(1);
                Ok(r)
            })
            .collect()
    }
}

/// Rows and columns where the spans [a, a + n) and [b, b + m) meet, as (start, end).
fn meet(a: isize, n: usize, b: isize, m: usize) -> Option<(isize, isize)> {
    let lo = a.max(b);
    let hi = (a + n as isize).min(b + m as isize);
    (lo < hi).then_some((lo, hi))
}

/// The crop of size `size` at spatial corner `r0` (may lie partly outside the map: `fill`
/// there) of the clean value with `patch` written over it.
fn extract(clean: &ArrayD<f32>, patch: Option<&Patch>, r0: [isize; 2], size: [usize; 2], fill: f32) -> ArrayD<f32> {
    let c = clean.shape()[1];
    let mut crop = ArrayD::from_elem(IxDyn(&[1, c, size[0], size[1]]), fill);
    let copy = |crop: &mut ArrayD<f32>, src: &ArrayD<f32>, at: [isize; 2]| {
        let (h, w) = (src.shape()[2], src.shape()[3]);
        let (Some(ys), Some(xs)) = (meet(r0[0], size[0], at[0], h), meet(r0[1], size[1], at[1], w)) else { return };
        let rows = (ys.1 - ys.0) as usize;
        let cols = (xs.1 - xs.0) as usize;
        let (dy, dx) = ((ys.0 - r0[0]) as usize, (xs.0 - r0[1]) as usize);
        let (sy, sx) = ((ys.0 - at[0]) as usize, (xs.0 - at[1]) as usize);
        // Row by row over plain slices (both are fresh, standard-layout arrays).
        if let (Some(d), Some(s)) = (crop.as_slice_mut(), src.as_slice()) {
            for ch in 0..c {
                for r in 0..rows {
                    let di = (ch * size[0] + dy + r) * size[1] + dx;
                    let si = (ch * h + sy + r) * w + sx;
                    d[di..di + cols].copy_from_slice(&s[si..si + cols]);
                }
            }
            return;
        }
        crop.slice_each_axis_mut(|ax| match ax.axis.index() {
            2 => Slice::from(dy..dy + rows),
            3 => Slice::from(dx..dx + cols),
            _ => Slice::from(..),
        })
        .assign(&src.slice_each_axis(|ax| match ax.axis.index() {
            2 => Slice::from(sy..sy + rows),
            3 => Slice::from(sx..sx + cols),
            _ => Slice::from(..),
        }));
    };
    copy(&mut crop, clean, [0, 0]);
    if let Some(p) = patch {
        copy(&mut crop, &p.data, [p.at[0] as isize, p.at[1] as isize]);
    }
    crop
}

/// The whole value: clean with the patch written in.
fn materialize(clean: &ArrayD<f32>, patch: Option<&Patch>) -> ArrayD<f32> {
    let mut out = clean.clone();
    if let Some(p) = patch {
        let (ph, pw) = (p.data.shape()[2], p.data.shape()[3]);
        out.slice_each_axis_mut(|ax| match ax.axis.index() {
            2 => Slice::from(p.at[0]..p.at[0] + ph),
            3 => Slice::from(p.at[1]..p.at[1] + pw),
            _ => Slice::from(..),
        })
        .assign(&p.data);
    }
    out
}
