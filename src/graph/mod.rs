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

/// An optimised plan of `m` as it is (its own inputs and outputs).
pub fn plan(m: TypedModel) -> Result<Plan> {
    let m = m.into_optimized().map_err(|e| anyhow!("tract could not optimize the graph: {e:#}"))?;
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
