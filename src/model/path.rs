//! Gradients along a straight path, the work of integrated gradients.
//!
//! When the graph begins with an affine head (see [`crate::grad::AffineSplit`]) the head's
//! forward runs twice and its reverse once per map instead of once per point; otherwise every
//! point runs the whole reverse pass. `SPURION_NO_AFFINE_SPLIT=1` forces the plain way, for
//! comparison.

use std::borrow::Cow;
use std::sync::Arc;

use anyhow::Result;
use ndarray::{Array1, ArrayD, Zip};

use super::{Model, Tap};
use crate::control::Control;
use crate::grad::{AffineSplit, ReversePass};

/// Most bytes of points and gradients held at once per chunk (kept so that the sum runs in point
/// order and a reading is the same from run to run).
const CHUNK_BYTES: usize = 128 << 20;
/// Most points per chunk: a cancel acts between chunks.
const CHUNK_POINTS: usize = 16;

/// The straight path from `x0` along `d`, made ready for gradients: where the reverse passes
/// start (the input, or the cut after the affine head) and the path there.
pub struct StraightPath<'m> {
    model: &'m Model,
    split: Option<Arc<AffineSplit>>,
    whole: Option<Arc<ReversePass>>,
    x0: ArrayD<f32>,
    /// The path where the passes start: its value at α = 0 and its direction. On the cut, the
    /// head's values at the points in between lie on the line joining its values at both ends.
    start: ArrayD<f32>,
    along: ArrayD<f32>,
}

/// One point's gradient on a [`StraightPath`].
pub struct PathPoint {
    /// ∇F where the passes start (the input, or the cut): [`StraightPath::to_input`] takes a
    /// weighted sum of these back to the input.
    pub grad: ArrayD<f32>,
    /// dF/dα at the point: the gradient against the path's direction.
    pub slope: f64,
    /// The tapped outputs at the point.
    pub outputs: Array1<f32>,
}

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

    /// The straight path x0 + α·d, α in [0, 1], ready for gradients of the tapped output.
    pub fn straight_path(&self, x0: &ArrayD<f32>, d: &ArrayD<f32>, tap: Tap) -> Result<StraightPath<'_>> {
        self.check_input(x0)?;
        self.check_input(d)?;
        let split = self.affine_split(tap)?;
        let (whole, start, along) = match &split {
            Some(s) => {
                let z0 = s.head(x0)?;
                let dz = s.head(&(x0 + d))? - &z0;
                (None, z0, dz)
            }
            None => (Some(self.reverse_pass(tap)?), x0.clone(), d.clone()),
        };
        Ok(StraightPath { model: self, split, whole, x0: x0.clone(), start, along })
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
        let path = self.straight_path(x0, d, tap)?;
        let per_chunk = path.points_per_chunk();
        let mut acc = path.zeros();
        for chunk in nodes.chunks(per_chunk) {
            let alphas: Vec<f64> = chunk.iter().map(|n| n.0).collect();
            for (p, (_, w)) in path.gradients(&alphas, seed, ctl)?.iter().zip(chunk) {
                acc.scaled_add(*w as f32, &p.grad);
            }
        }
        path.to_input(&acc)
    }
}

impl StraightPath<'_> {
    fn pass(&self) -> &ReversePass {
        match (&self.split, &self.whole) {
            (Some(s), _) => &s.tail,
            (None, Some(w)) => w,
            (None, None) => unreachable!("a path has a split or a whole pass"),
        }
    }

    /// Zeros shaped like a point's gradient, to sum gradients into.
    pub fn zeros(&self) -> ArrayD<f32> {
        ArrayD::zeros(self.along.raw_dim())
    }

    /// Bytes one point's gradient takes.
    pub fn point_bytes(&self) -> usize {
        self.along.len() * std::mem::size_of::<f32>()
    }

    /// How many points [`StraightPath::gradients`] should be given at once: few enough that a
    /// cancel acts soon and the points and gradients of a chunk stay within memory.
    pub fn points_per_chunk(&self) -> usize {
        (CHUNK_BYTES / self.point_bytes().max(1)).clamp(2, CHUNK_POINTS)
    }

    /// The gradients at the points x0 + α·d for `alphas`, in order, over rayon workers; `ctl`
    /// advances by one per point and a cancel is checked first.
    pub fn gradients(
        &self,
        alphas: &[f64],
        seed: &(dyn Fn(&Array1<f32>) -> Array1<f32> + Sync),
        ctl: &Control,
    ) -> Result<Vec<PathPoint>> {
        ctl.check()?;
        let point = |i: usize| {
            let a = alphas[i] as f32;
            Cow::Owned(Zip::from(&self.start).and(&self.along).map_collect(|z, d| z + a * d))
        };
        let gs = self.model.gradients_of(self.pass(), alphas.len(), &point, seed, ctl)?;
        Ok(gs
            .into_iter()
            .map(|g| {
                let slope = Zip::from(&g.grad).and(&self.along).fold(0f64, |s, g, d| s + (*g as f64) * (*d as f64));
                PathPoint { grad: g.grad, slope, outputs: g.outputs }
            })
            .collect())
    }

    /// A weighted sum of point gradients, taken back to the input (through the head's transpose
    /// when the passes start at the cut).
    pub fn to_input(&self, acc: &ArrayD<f32>) -> Result<ArrayD<f32>> {
        match &self.split {
            Some(s) => s.head_transpose(&self.x0, acc),
            None => Ok(acc.clone()),
        }
    }
}
