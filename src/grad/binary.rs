//! Reverse steps of broadcasting binary ops (add, sub, mul, div, max, min, pow) and of select
//! (`Iff`), which relu, clip, hard-sigmoid, hard-swish, elu, prelu and folded batch norm
//! decompose into.

use anyhow::{Result, anyhow};
use ndarray::{ArrayD, ArrayViewD, IxDyn, Zip};
use tract_onnx::prelude::*;
use tract_onnx::tract_core::ops::binary::TypedBinOp;
use tract_onnx::tract_core::ops::logic::Iff;

use super::{Cx, ReverseStep, unbroadcast};

#[derive(Clone, Copy, Debug)]
enum Kind {
    Add,
    Sub,
    /// tract's flipped subtraction: `b - a`.
    SubF,
    Mul,
    Div,
    Max,
    Min,
    Pow,
}

pub(super) fn build(node: &TypedNode) -> Option<Result<Box<dyn ReverseStep>>> {
    if node.op_is::<Iff>() {
        return Some(Ok(Box::new(IffStep)));
    }
    let op = node.op_as::<TypedBinOp>()?;
    let kind = match op.0.name() {
        "Add" => Kind::Add,
        "Sub" => Kind::Sub,
        "SubF" => Kind::SubF,
        "Mul" => Kind::Mul,
        "Div" => Kind::Div,
        "Max" => Kind::Max,
        "Min" => Kind::Min,
        "Pow" => Kind::Pow,
        other => return Some(Err(anyhow!("binary op {other} has no reverse step"))),
    };
    Some(Ok(Box::new(BinStep(kind))))
}

struct BinStep(Kind);

fn bcast<'a>(a: &'a ArrayViewD<'a, f32>, shape: &[usize]) -> Result<ArrayViewD<'a, f32>> {
    a.broadcast(IxDyn(shape)).ok_or_else(|| anyhow!("cannot broadcast {:?} to {:?}", a.shape(), shape))
}

impl ReverseStep for BinStep {
    fn needs_inputs(&self) -> bool {
        !matches!(self.0, Kind::Add | Kind::Sub | Kind::SubF)
    }

    fn back(&self, cx: &Cx, dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        let out = cx.facts.out_shape.clone();
        let (sa, sb) = (&cx.facts.in_shapes[0], &cx.facts.in_shapes[1]);
        let (act_a, act_b) = (cx.active(0), cx.active(1));
        let mut ga: Option<ArrayD<f32>> = None;
        let mut gb: Option<ArrayD<f32>> = None;
        match self.0 {
            Kind::Add | Kind::Sub | Kind::SubF => {
                let (neg_a, neg_b) = match self.0 {
                    Kind::Add => (false, false),
                    Kind::Sub => (false, true),
                    _ => (true, false),
                };
                if act_a {
                    let g = if neg_a { -&dy } else { dy.clone() };
                    ga = Some(unbroadcast(g, sa)?);
                }
                if act_b {
                    let g = if neg_b { -&dy } else { dy };
                    gb = Some(unbroadcast(g, sb)?);
                }
            }
            _ => {
                let a = cx.input(0)?;
                let b = cx.input(1)?;
                let a = bcast(&a, &out)?;
                let b = bcast(&b, &out)?;
                // d(out)/da and d(out)/db as functions of (dy, a, b), each loop monomorphised.
                let shapes = (sa.as_slice(), sb.as_slice());
                (ga, gb) = match self.0 {
                    Kind::Mul => operands(dy, &a, &b, (act_a, act_b), shapes, |d, _a, b| d * b, |d, a, _b| d * a)?,
                    Kind::Div => operands(dy, &a, &b, (act_a, act_b), shapes, |d, _a, b| d / b, |d, a, b| -d * a / (b * b))?,
                    // Ties split the gradient evenly (as torch.maximum/minimum do).
                    Kind::Max => operands(
                        dy,
                        &a,
                        &b,
                        (act_a, act_b),
                        shapes,
                        |d, a, b| if a > b { d } else if a == b { 0.5 * d } else { 0.0 },
                        |d, a, b| if b > a { d } else if a == b { 0.5 * d } else { 0.0 },
                    )?,
                    Kind::Min => operands(
                        dy,
                        &a,
                        &b,
                        (act_a, act_b),
                        shapes,
                        |d, a, b| if a < b { d } else if a == b { 0.5 * d } else { 0.0 },
                        |d, a, b| if b < a { d } else if a == b { 0.5 * d } else { 0.0 },
                    )?,
                    Kind::Pow => operands(
                        dy,
                        &a,
                        &b,
                        (act_a, act_b),
                        shapes,
                        |d, a, b| if b == 0.0 { 0.0 } else { d * b * a.powf(b - 1.0) },
                        |d, a, b| if a > 0.0 { d * a.powf(b) * a.ln() } else { 0.0 },
                    )?,
                    _ => unreachable!(),
                };
            }
        }
        Ok(vec![ga, gb])
    }
}

/// The gradients of the active operands, `fa(dy, a, b)` and `fb(dy, a, b)` element-wise over
/// the output (a and b broadcast to it), each summed back to its operand's shape. The last one
/// computed is written over `dy` itself.
fn operands(
    dy: ArrayD<f32>,
    a: &ArrayViewD<f32>,
    b: &ArrayViewD<f32>,
    (act_a, act_b): (bool, bool),
    (sa, sb): (&[usize], &[usize]),
    fa: impl Fn(f32, f32, f32) -> f32,
    fb: impl Fn(f32, f32, f32) -> f32,
) -> Result<(Option<ArrayD<f32>>, Option<ArrayD<f32>>)> {
    let ga = match (act_a, act_b) {
        (false, _) => None,
        (true, true) => Some(map3(dy.clone(), a, b, sa, fa)?),
        (true, false) => return Ok((Some(map3(dy, a, b, sa, fa)?), None)),
    };
    let gb = if act_b { Some(map3(dy, a, b, sb, fb)?) } else { None };
    Ok((ga, gb))
}

/// `f(g, a, b)` written over `g` element-wise, then summed back to `shape`.
fn map3(mut g: ArrayD<f32>, a: &ArrayViewD<f32>, b: &ArrayViewD<f32>, shape: &[usize], f: impl Fn(f32, f32, f32) -> f32) -> Result<ArrayD<f32>> {
    // One operand a single value broadcast (relu's Max(x, 0), a scale) and the other laid out
    // like `g`: a plain loop over slices, which the compiler vectorises; ndarray's Zip walks a
    // broadcast operand element by element.
    let single = |v: &ArrayViewD<f32>| {
        let one = v.shape().iter().zip(v.strides()).all(|(&n, &s)| n <= 1 || s == 0);
        one.then(|| v.first().copied()).flatten()
    };
    if let Some(gs) = g.as_slice_mut() {
        if let (Some(bv), Some(aa)) = (single(b), a.as_slice()) {
            for (g, &a) in gs.iter_mut().zip(aa) {
                *g = f(*g, a, bv);
            }
            return unbroadcast(g, shape);
        }
        if let (Some(av), Some(bb)) = (single(a), b.as_slice()) {
            for (g, &b) in gs.iter_mut().zip(bb) {
                *g = f(*g, av, b);
            }
            return unbroadcast(g, shape);
        }
    }
    Zip::from(&mut g).and(a).and(b).for_each(|g, &a, &b| *g = f(*g, a, b));
    unbroadcast(g, shape)
}

/// `Iff(cond, t, f)`: the gradient goes to whichever branch was selected.
struct IffStep;
impl ReverseStep for IffStep {
    fn needs_inputs(&self) -> bool {
        true
    }

    fn back(&self, cx: &Cx, dy: ArrayD<f32>) -> Result<Vec<Option<ArrayD<f32>>>> {
        let out = &cx.facts.out_shape;
        let cond = cx.input_tensor(0)?.to_plain_array_view::<bool>().map_err(|e| anyhow!("{e}"))?;
        let cond = cond.broadcast(IxDyn(out)).ok_or_else(|| anyhow!("cannot broadcast condition"))?;
        let mut res = vec![None];
        for (slot, when) in [(1, true), (2, false)] {
            if !cx.active(slot) {
                res.push(None);
                continue;
            }
            let mut g = ArrayD::<f32>::zeros(IxDyn(out));
            Zip::from(&mut g).and(&dy).and(&cond).for_each(|g, &d, &c| {
                if c == when {
                    *g = d
                }
            });
            res.push(Some(unbroadcast(g, &cx.facts.in_shapes[slot])?));
        }
        Ok(res)
    }
}
