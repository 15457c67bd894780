//! Gradients summed along a straight path, the work of integrated gradients.
//!
//! When the graph begins with an affine head (see [`crate::grad::AffineSplit`]) the head's
//! forward runs twice and its reverse once per call instead of once per point; otherwise every
//! point runs the whole reverse pass. `SPURION_NO_AFFINE_SPLIT=1` forces the plain way, for
//! comparison.

use std::sync::Arc;

use anyhow::{Result, anyhow};
use ndarray::{Array1, ArrayD};
use rayon::prelude::*;

use super::{Model, Tap};
use crate::control::Control;
use crate::grad::{AffineSplit, PassState, ReversePass};

/// Most bytes of cut gradients held at once (one per point of a chunk, kept so that the sum runs
/// in point order and a reading is the same from run to run).
const CHUNK_BYTES: usize = 128 << 20;
/// Most points per chunk: a cancel acts between chunks.
const CHUNK_POINTS: usize = 16;

impl Model {
    fn affine_split(&self, tap: Tap) -> Result<Option<Arc<AffineSplit>>> {
        if std::env::var_os("SPURION_NO_AFFINE_SPLIT").is_some_and(|v| v != "0") {
            return Ok(None);
        }
        let target = self.tap_outlet(tap)?;
        let slot = &self.split[tap as usize];
        let built = slot.get_or_init(|| {
            let input = self.graph.input_outlets().map_err(|e| e.to_string())?[0];
            AffineSplit::build(&self.graph, input, target).map(|s| s.map(Arc::new)).map_err(|e| format!("{e:#}"))
        });
        built.clone().map_err(|msg| anyhow!("gradients are not available for {}: {msg}", self.path.display()))
    }

    /// How many nodes of the graph's affine head a path sum skips per point (0: none, every
    /// point runs the whole reverse pass). For tests and diagnostics.
    pub fn affine_head_len(&self, tap: Tap) -> Result<usize> {
        Ok(self.affine_split(tap)?.map_or(0, |s| s.head_len))
    }

    /// Σₖ wₖ·∇F(x₀ + αₖ·d) over `nodes` = [(αₖ, wₖ)]: the gradients of the scored output
    /// (`seed` maps the scores to their cotangent) at points of the straight path from `x0` along
    /// `d`, weighted and summed in node order. Spread over rayon workers; `ctl` advances by one per
    /// node, and a cancel stops between chunks of nodes.
    pub fn gradient_path_sum(
        &self,
        x0: &ArrayD<f32>,
        d: &ArrayD<f32>,
        nodes: &[(f64, f64)],
        tap: Tap,
        seed: &(dyn Fn(&Array1<f32>) -> Array1<f32> + Sync),
        ctl: &Control,
    ) -> Result<ArrayD<f32>> {
        self.check_input(x0)?;
        self.check_input(d)?;
        let Some(split) = self.affine_split(tap)? else {
            // The plain way: whole gradients at every point.
            let mut acc = ArrayD::<f32>::zeros(x0.raw_dim());
            for chunk in nodes.chunks(CHUNK_POINTS) {
                ctl.check()?;
                let pts: Vec<ArrayD<f32>> = chunk.iter().map(|(a, _)| x0 + &(d * *a as f32)).collect();
                let gs = self.gradient_many(&pts, tap, seed, ctl)?;
                for (g, (_, w)) in gs.iter().zip(chunk) {
                    acc.scaled_add(*w as f32, &g.grad);
                }
            }
            return Ok(acc);
        };
        // The head's values at both ends; the points in between are on the line joining them.
        let z0 = split.head(x0)?;
        let dz = split.head(&(x0 + d))? - &z0;
        let cut_bytes = dz.len() * std::mem::size_of::<f32>();
        let per_chunk = (CHUNK_BYTES / cut_bytes.max(1)).clamp(2, CHUNK_POINTS);
        let tail: &ReversePass = &split.tail;
        let mut acc = ArrayD::<f32>::zeros(dz.raw_dim());
        for chunk in nodes.chunks(per_chunk) {
            ctl.check()?;
            let gs: Vec<ArrayD<f32>> = chunk
                .par_iter()
                .map_init(
                    || tail.spawn(),
                    |state, (a, _)| -> Result<ArrayD<f32>> {
                        ctl.check().map_err(anyhow::Error::new)?;
                        let state: &mut PassState = state.as_mut().map_err(|e| anyhow!("{e:#}"))?;
                        let a = *a as f32;
                        let z = ndarray::Zip::from(&z0).and(&dz).map_collect(|z, d| z + a * d);
                        let g = self.gradient_with(tail, state, &z, seed)?;
                        ctl.advance(1);
                        Ok(g.grad)
                    },
                )
                .collect::<Result<_>>()?;
            for (g, (_, w)) in gs.iter().zip(chunk) {
                acc.scaled_add(*w as f32, g);
            }
        }
        let mut state = split.head_state()?;
        split.head_transpose(&mut state, x0, &acc)
    }
}
