//! Whether a graph normalises its own input: a shift or scale by constants (Sub, Div, Mul, Add;
//! tract's decluttered graph keeps them as binary ops with one constant operand, Div often as a
//! Mul by the reciprocal) right after the input, through any reshapes and transposes. Such a
//! model wants pixels as they come, not normalised twice; without it a missing feed card is
//! worth a warning.

use tract_onnx::prelude::*;
use tract_onnx::tract_core::ops::binary::TypedBinOp;
use tract_onnx::tract_core::ops::change_axes::AxisOp;

/// The shift and scale ops by constants right after the graph's input, in words
/// (`"Sub, Mul by constants right after the input"`), or `None` when there are none.
pub(super) fn input_normalisation(g: &TypedModel) -> Option<String> {
    let mut at = g.input_outlets().ok()?.first().copied()?;
    let mut found: Vec<String> = vec![];
    loop {
        let next = g.outlet_successors(at);
        if next.len() != 1 {
            break;
        }
        let node = g.node(next[0].node);
        if node.op_is::<AxisOp>() && node.inputs.len() == 1 {
            at = OutletId::new(node.id, 0);
            continue;
        }
        let Some(op) = node.op_as::<TypedBinOp>() else { break };
        let name = op.0.name().to_string();
        if !matches!(name.as_str(), "Add" | "Sub" | "SubF" | "Mul" | "Div") || node.inputs.len() != 2 {
            break;
        }
        let other = node.inputs[1 - next[0].slot];
        if !g.outlet_fact(other).is_ok_and(|f| f.konst.is_some()) {
            break;
        }
        found.push(if name == "SubF" { "Sub".into() } else { name });
        at = OutletId::new(node.id, 0);
    }
    (!found.is_empty()).then(|| format!("{} by constants right after the input (the model normalises its input itself)", found.join(", ")))
}
