//! What the forward plans ([`crate::model`]) and the reverse pass ([`crate::grad`]) both need
//! from tract: an optimised plan of a typed graph, running a small sub-graph, tensors as
//! ndarrays, and the window geometry of convolutions and pools ([`geometry`]).
//!
//! It sits below both so that neither imports the other for these.

pub mod geometry;
pub mod winograd;

use std::sync::Arc;

use anyhow::{Result, anyhow};
use ndarray::ArrayD;
use tract_onnx::prelude::*;

/// An optimised, runnable tract plan. Shared between threads; each run spawns its own state.
pub type Plan = Arc<TypedSimplePlan>;

/// tract's declutter; when its axis-moving pass fails (tract 0.23.9 builds a convolution with a
/// [C, 1] bias while pushing axes through some exports that turn NHWC input into NCHW by
/// transposes and add the bias as a separate, reshaped operand), the same passes without that
/// one. The graph then keeps its transposes, which the reverse pass handles as `MoveAxis`.
pub fn declutter(g: TypedModel) -> Result<TypedModel> {
    let spare = g.clone();
    match g.into_decluttered() {
        Ok(g) => Ok(g),
        Err(first) => {
            let mut passes = tract_onnx::tract_core::optim::Optimizer::declutter();
            passes.passes.retain(|p| format!("{p:?}") != "ChangeAxes");
            let mut g = spare;
            passes.optimize(&mut g).map_err(|_| anyhow!("{first:#}"))?;
            Ok(g)
        }
    }
}

/// An optimised plan of `m` as it is (its own inputs and outputs).
pub fn plan(m: TypedModel) -> Result<Plan> {
    let mut m = declutter(m).map_err(|e| anyhow!("tract could not optimize the graph: {e:#}"))?;
    m.optimize().map_err(|e| anyhow!("tract could not optimize the graph: {e:#}"))?;
    TypedSimplePlan::new(m).map_err(|e| anyhow!("tract could not plan the graph: {e:#}"))
}

/// An optimised plan of a copy of `g` whose outputs are `outputs`.
pub fn optimized_plan(g: &TypedModel, outputs: &[OutletId]) -> Result<Plan> {
    let mut m = g.clone();
    m.select_output_outlets(outputs).map_err(|e| anyhow!("{e}"))?;
    plan(m)
}

/// An owned ndarray from a tract tensor.
pub fn to_array(t: &Tensor) -> Result<ArrayD<f32>> {
    Ok(t.to_plain_array_view::<f32>().map_err(|e| anyhow!("{e}"))?.to_owned())
}

/// The values of a tract tensor in order, as a flat vector.
pub fn to_vec(t: &Tensor) -> Result<Vec<f32>> {
    Ok(t.to_plain_array_view::<f32>().map_err(|e| anyhow!("{e}"))?.iter().copied().collect())
}

/// Runs a small plan and returns its single output.
pub fn run_sub(plan: &Plan, inputs: Vec<Tensor>) -> Result<ArrayD<f32>> {
    let out = plan
        .run(inputs.into_iter().map(|t| t.into_tvalue()).collect())
        .map_err(|e| anyhow!("{e:#}"))?;
    to_array(&out[0])
}
