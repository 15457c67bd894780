//! Gradients summed along a straight path, the work of integrated gradients.
//!
//! When the graph begins with an affine head (see [`crate::grad::AffineSplit`]) the head's
//! forward runs twice and its reverse once per call instead of once per point; otherwise every
//! point runs the whole reverse pass. `SPURION_NO_AFFINE_SPLIT=1` forces the plain way, for
//! comparison.

use std::borrow::Cow;
use std::sync::Arc;

use anyhow::Result;
use ndarray::{Array1, ArrayD, Zip};

use super::{Model, Tap};
use crate::control::Control;
use crate::grad::AffineSplit;

/// Most bytes of points and gradients held at once per chunk (kept so that the sum runs in point
/// order and a reading is the same from run to run).
const CHUNK_BYTES: usize = 128 << 20;
/// Most points per chunk: a cancel acts between chunks.
const CHUNK_POINTS: usize = 16;

impl Model {
    fn affine_split(&self, tap: Tap) -> Result<Option<Arc<AffineSplit>>> {
        if std::env::var_os("SPURION_NO_AFFINE_SPLIT").is_some_and(|v| v != "0") {
            return Ok(None);
        }
        let target = self.tap_outlet(tap)?;
        self.built_once(&self.split[tap as usize], |input| {
            AffineSplit::build(&self.graph, input, target).map(|s| s.map(Arc::new))
        })
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
        let split = self.affine_split(tap)?;
        // The path where the pass starts: the input's, or the cut's, whose values at the points
        // in between lie on the line joining its values at both ends.
        let (pass, start, along) = match &split {
            Some(s) => {
                let z0 = s.head(x0)?;
                let dz = s.head(&(x0 + d))? - &z0;
                (&s.tail, Cow::Owned(z0), Cow::Owned(dz))
            }
            None => (&*self.reverse_pass(tap)?, Cow::Borrowed(x0), Cow::Borrowed(d)),
        };
        let point_bytes = along.len() * std::mem::size_of::<f32>();
        let per_chunk = (CHUNK_BYTES / point_bytes.max(1)).clamp(2, CHUNK_POINTS);
        let mut acc = ArrayD::<f32>::zeros(along.raw_dim());
        for chunk in nodes.chunks(per_chunk) {
            ctl.check()?;
            let point = |i: usize| {
                let a = chunk[i].0 as f32;
                Cow::Owned(Zip::from(&*start).and(&*along).map_collect(|z, d| z + a * d))
            };
            let gs = self.gradients_of(pass, chunk.len(), &point, seed, ctl)?;
            for (g, (_, w)) in gs.iter().zip(chunk) {
                acc.scaled_add(*w as f32, &g.grad);
            }
        }
        match &split {
            Some(s) => s.head_transpose(x0, &acc),
            None => Ok(acc),
        }
    }
}
