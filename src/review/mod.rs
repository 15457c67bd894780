//! The reviewer's tests of a reading: whether a map can be trusted before anyone acts on it.
//!
//! One file per test, each with a typed, serialisable result, a [`Control`] for progress and
//! cancel, and its definition cited beside it:
//! - [`curves`]: deletion and insertion curves against random orders (Petsiuk et al. 2018);
//! - [`randomise`]: the model-parameter randomisation cascade (Adebayo et al. 2018), over the
//!   re-drawn models of [`redraw`];
//! - [`convergence`]: integrated gradients' completeness gap against the step count
//!   (Sundararajan et al. 2017);
//! - [`shapley`]: Shapley values of grid cells or found regions by permutation sampling (Castro
//!   et al. 2009), forwards only;
//! - [`against`]: the same image under two models; [`sweeps`]: two sweeps per group.
//!
//! [`run`] runs the tests of one reading in turn; the pieces can be called one by one (on a
//! worker thread, say) through a [`Case`]. The review sits beside `methods` and `regions` in
//! the engine: it imports neither render, report, cli nor gui.

pub mod against;
pub mod convergence;
pub mod curves;
pub mod defaults;
pub mod randomise;
pub mod redraw;
pub mod shapley;
pub mod sweeps;

use std::time::Instant;

use anyhow::{Result, bail};
use ndarray::{Array2, ArrayD};
use serde::Serialize;

use crate::control::Control;
use crate::feed::FeedCard;
use crate::methods::{self, Baseline, Input, Reading, Request, Rule, Scorer, TargetSpec};
use crate::model::{Model, is_cancelled};
use crate::regions::{FinderSettings, Region, find_regions_in};

use convergence::{Convergence, ConvergenceSettings};
use curves::{CurveSettings, Curves};
use randomise::{Cascade, CascadeSettings};
use shapley::{Players, Shapley, ShapleySettings};

/// Where each element of a model-input tensor (in standard order) lies on the model's grid, so
/// that a grid-shaped mask can be spread over the tensor in one pass over flat slices.
pub struct GridIndex {
    shape: Vec<usize>,
    grid: (usize, usize),
    pos: Vec<u32>,
}

impl GridIndex {
    pub fn new(shape: &[usize], spatial: [usize; 2]) -> GridIndex {
        let grid = (shape[spatial[0]], shape[spatial[1]]);
        let len: usize = shape.iter().product();
        let mut pos = Vec::with_capacity(len);
        let mut at = vec![0usize; shape.len()];
        for _ in 0..len {
            pos.push((at[spatial[0]] * grid.1 + at[spatial[1]]) as u32);
            // Odometer over the axes, last fastest (standard order).
            for a in (0..shape.len()).rev() {
                at[a] += 1;
                if at[a] < shape[a] {
                    break;
                }
                at[a] = 0;
            }
        }
        GridIndex { shape: shape.to_vec(), grid, pos }
    }

    /// (rows, columns) of the model grid.
    pub fn grid(&self) -> (usize, usize) {
        self.grid
    }

    /// A tensor-shaped map summed onto the model grid (channels added).
    pub fn grid_map(&self, t: &ArrayD<f32>) -> Array2<f32> {
        assert_eq!(t.shape(), self.shape.as_slice(), "a map of the indexed shape");
        let mut m = Array2::<f32>::zeros(self.grid);
        let flat = m.as_slice_mut().expect("a new array is contiguous");
        for (&p, v) in self.pos.iter().zip(t.as_standard_layout().iter()) {
            flat[p as usize] += v;
        }
        m
    }

    /// `xb + m ⊙ (x − xb)`, `m` given per grid position (row-major, rows × columns). Where m is
    /// 0 or 1 (within 1e-5) the value is xb's or x's exactly, so the two ends are the fill and
    /// the input bit for bit.
    pub fn blend(&self, x: &ArrayD<f32>, xb: &ArrayD<f32>, m: &[f32]) -> ArrayD<f32> {
        assert_eq!(m.len(), self.grid.0 * self.grid.1, "one weight per grid position");
        assert!(x.shape() == self.shape.as_slice() && xb.shape() == self.shape.as_slice(), "tensors of the indexed shape");
        let (xs, bs) = (x.as_standard_layout(), xb.as_standard_layout());
        let (xs, bs) = (xs.as_slice().expect("standard layout"), bs.as_slice().expect("standard layout"));
        let out: Vec<f32> = self
            .pos
            .iter()
            .zip(xs.iter().zip(bs))
            .map(|(&p, (&xv, &bv))| {
                let w = m[p as usize];
                if w >= 1.0 - 1e-5 {
                    xv
                } else if w <= 1e-5 {
                    bv
                } else {
                    bv + w * (xv - bv)
                }
            })
            .collect();
        ArrayD::from_shape_vec(self.shape.clone(), out).expect("same number of elements")
    }
}

/// The reading under review and what its tests share: the model, its card, the input, the
/// request with its target fixed to the reading's class (a re-drawn model or a second model
/// reads the same class), the model-input tensor and its scoring.
pub struct Case<'a> {
    pub model: &'a Model,
    pub card: Option<&'a FeedCard>,
    pub input: &'a Input,
    pub request: Request,
    pub x: ArrayD<f32>,
    pub spatial: [usize; 2],
    pub scorer: Scorer,
    pub index: GridIndex,
}

impl<'a> Case<'a> {
    pub fn new(model: &'a Model, card: Option<&'a FeedCard>, input: &'a Input, request: &Request, reading: &Reading) -> Result<Case<'a>> {
        let request = Request { target: TargetSpec::Index(reading.target.index), ..request.clone() };
        let scorer = Scorer::new(model, card, request.score, reading.target.index)?;
        let (x, spatial) = (input.model_tensor()?, input.spatial_axes()?);
        let index = GridIndex::new(x.shape(), spatial);
        Ok(Case { model, card, input, request, x, spatial, scorer, index })
    }

    /// A baseline as a model-input tensor (the fill of curves and Shapley values).
    pub fn fill(&self, b: &Baseline) -> Result<ArrayD<f32>> {
        methods::baseline_tensor(self.input, b, 0)
    }

    /// A reading's map on the model's grid (channels summed).
    pub fn grid_map(&self, r: &Reading) -> Array2<f32> {
        self.index.grid_map(&r.tensor_map)
    }

    /// Deletion and insertion curves of `reading` filled from `fill`.
    pub fn curves(&self, reading: &Reading, fill: &Baseline, settings: &CurveSettings, ctl: &Control) -> Result<Curves> {
        let xb = self.fill(fill)?;
        curves::curves(self.model, &self.scorer, &self.x, &xb, &fill.label(), self.spatial, &self.grid_map(reading), settings, ctl)
    }

    /// Integrated gradients' convergence from the request's baseline.
    pub fn convergence(&self, settings: &ConvergenceSettings, ctl: &Control) -> Result<Convergence> {
        let xb = self.fill(&self.request.baseline)?;
        convergence::convergence(self.model, &self.scorer, &self.x, &xb, &self.request.baseline.label(), settings, ctl)
    }

    /// The players of a Shapley game on this input.
    pub fn players(&self, players: &Players, regions: &[Region]) -> Result<Vec<shapley::Player>> {
        match players {
            Players::Grid(n) => shapley::grid_players(self.input, *n),
            Players::Regions => shapley::region_players(self.input, regions),
        }
    }

    /// Shapley values of `players`, absent players filled from `fill`.
    pub fn shapley(&self, players: &[shapley::Player], fill: &Baseline, settings: &ShapleySettings, ctl: &Control) -> Result<Shapley> {
        let xb = self.fill(fill)?;
        let game = shapley::Game::new(self.model, self.scorer, &self.x, &xb, self.spatial, players)?;
        let grid = match settings.players {
            Players::Grid(n) => Some(n),
            Players::Regions => None,
        };
        shapley::estimate(&game, settings.permutations, settings.seed, &fill.label(), grid, ctl)
    }

    /// The quadrature rule of the request's integrated gradients (midpoint when it refines or
    /// is another method: the default reading's rule).
    pub fn rule(&self) -> Rule {
        match self.request.method {
            methods::Method::IntegratedGradients { rule, adaptive: None, .. } => rule,
            _ => Rule::Midpoint,
        }
    }
}

/// Which tests a review runs, and how far. `None`: the test is not run.
#[derive(Clone, Debug)]
pub struct Settings {
    /// What takes the place of removed pixels in the curves and of absent players in the
    /// Shapley game; `None`: the request's baseline (and in the strip, each baseline its own).
    pub fill: Option<Baseline>,
    pub curves: Option<CurveSettings>,
    /// The baseline strip: each baseline's reading and its curves.
    pub strip: Vec<Baseline>,
    pub cascade: Option<CascadeSettings>,
    pub convergence: Option<ConvergenceSettings>,
    pub shapley: Option<ShapleySettings>,
    /// How regions are found (Shapley over regions, mark shares).
    pub finder: FinderSettings,
}

impl Default for Settings {
    fn default() -> Self {
        Settings {
            fill: None,
            curves: Some(CurveSettings::default()),
            strip: vec![],
            cascade: Some(CascadeSettings::default()),
            convergence: Some(ConvergenceSettings::default()),
            shapley: Some(ShapleySettings::default()),
            finder: FinderSettings::default(),
        }
    }
}

/// One baseline of the strip.
#[derive(Clone, Debug, Serialize)]
pub struct StripEntry {
    pub baseline: String,
    pub title: String,
    pub reading: Reading,
    pub curves: Curves,
}

/// A test that could not run, and why.
#[derive(Clone, Debug, Serialize)]
pub struct Skipped {
    pub test: String,
    pub reason: String,
}

/// The phases of [`run`], for progress displays.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Phase {
    Reading,
    Curves,
    Strip,
    Randomisation,
    Convergence,
    Shapley,
}

impl Phase {
    pub fn title(self) -> &'static str {
        match self {
            Phase::Reading => "reading",
            Phase::Curves => "deletion and insertion",
            Phase::Strip => "baseline strip",
            Phase::Randomisation => "randomisation cascade",
            Phase::Convergence => "convergence",
            Phase::Shapley => "region Shapley",
        }
    }
}

/// Everything a review found.
#[derive(Clone, Debug, Serialize)]
pub struct Review {
    pub reading: Reading,
    /// The request in words.
    pub request: String,
    pub curves: Option<Curves>,
    pub strip: Vec<StripEntry>,
    pub cascade: Option<Cascade>,
    pub convergence: Option<Convergence>,
    pub shapley: Option<Shapley>,
    #[serde(skip)]
    pub regions: Vec<Region>,
    /// Readings whose completeness gap exceeds the paper's 5 %, ladders that never reach the gap.
    pub warnings: Vec<String>,
    pub skipped: Vec<Skipped>,
    /// Seconds per phase.
    pub seconds: Vec<(String, f64)>,
}

/// A warning for a reading whose completeness gap exceeds [`defaults::WARN_GAP`].
pub fn gap_warning(what: &str, gap: Option<f64>) -> Option<String> {
    gap.filter(|g| *g > defaults::WARN_GAP).map(|g| {
        format!(
            "{what}: completeness gap {:.1} % exceeds the 5 % the method's paper advises checking for (Sundararajan et al. 2017); \
             raise the steps (or samples) before reading the map",
            g * 100.0
        )
    })
}

/// A warning when removing pixels in random order raises the score above both ends of the
/// deletion curve: the curve then measures the model's reaction to the removal pattern (pixels
/// it never saw in training) as much as the map's order.
pub fn curve_warning(what: &str, c: &Curves) -> Option<String> {
    let top = c.score_input.max(c.score_fill);
    (c.deletion.random_auc > top).then(|| {
        format!(
            "{what}: removing pixels in random order raises the score (mean {:.3}) above both the input's {:.3} and the fill's {:.3}; \
             the curves then measure the model's reaction to the removal pattern as much as the map. Larger patches \
             (--curve-patch) or another fill may read better",
            c.deletion.random_auc, c.score_input, c.score_fill
        )
    })
}

/// Runs `f`; a failure other than a cancel becomes a skipped test.
fn attempt<T>(test: &str, skipped: &mut Vec<Skipped>, f: impl FnOnce() -> Result<T>) -> Result<Option<T>> {
    match f() {
        Ok(v) => Ok(Some(v)),
        Err(e) if is_cancelled(&e) => Err(e),
        Err(e) => {
            skipped.push(Skipped { test: test.into(), reason: format!("{e:#}") });
            Ok(None)
        }
    }
}

/// Reads `input` with `request` and runs the tests `settings` asks for. A test that cannot run
/// on this model (no reverse pass, no layers to re-draw) is listed in `skipped`; a cancel stops
/// everything. `phase` is told each phase as it starts; `ctl`'s progress restarts with each.
pub fn run(
    model: &Model,
    card: Option<&FeedCard>,
    input: &Input,
    request: &Request,
    settings: &Settings,
    ctl: &Control,
    phase: &dyn Fn(Phase),
) -> Result<Review> {
    let mut seconds = vec![];
    let mut clock = |p: Phase, t: Instant| seconds.push((p.title().to_string(), t.elapsed().as_secs_f64()));
    phase(Phase::Reading);
    let t = Instant::now();
    let reading = methods::explain(model, card, input, request, ctl)?;
    clock(Phase::Reading, t);
    let case = Case::new(model, card, input, request, &reading)?;
    let regions = match input {
        Input::Picture { picture, .. } => find_regions_in(&picture.pixels, &settings.finder.for_picture(picture.burned_in_annotation())),
        Input::Tensor { .. } => vec![],
    };
    // Players first: a grid that does not fit the image is the user's to fix, before any work.
    let players = match &settings.shapley {
        Some(s) => Some(case.players(&s.players, &regions)?),
        None => None,
    };
    let mut skipped = vec![];
    let mut warnings: Vec<String> = gap_warning(&format!("the reading ({})", reading.method), reading.completeness_gap).into_iter().collect();
    warnings.extend(reading.completeness_shortfall().map(|s| format!("the reading ({}): {s}", reading.method)));

    let fill = settings.fill.clone().unwrap_or_else(|| request.baseline.clone());
    let mut curves = None;
    if let Some(s) = &settings.curves {
        phase(Phase::Curves);
        let t = Instant::now();
        curves = attempt("curves", &mut skipped, || case.curves(&reading, &fill, s, ctl))?;
        warnings.extend(curves.as_ref().and_then(|c| curve_warning("deletion curve", c)));
        clock(Phase::Curves, t);
    }
    let mut strip = vec![];
    if !settings.strip.is_empty() {
        phase(Phase::Strip);
        let t = Instant::now();
        let cs = settings.curves.clone().unwrap_or_default();
        for b in &settings.strip {
            let req = Request { baseline: b.clone(), ..case.request.clone() };
            let entry = attempt(&format!("baseline strip: {}", b.label()), &mut skipped, || {
                let r = methods::explain(model, card, input, &req, ctl)?;
                let c = case.curves(&r, settings.fill.as_ref().unwrap_or(b), &cs, ctl)?;
                Ok(StripEntry { baseline: b.label(), title: b.title(), reading: r, curves: c })
            })?;
            if let Some(e) = entry {
                warnings.extend(gap_warning(&format!("the reading with baseline {}", e.baseline), e.reading.completeness_gap));
                warnings.extend(e.reading.completeness_shortfall().map(|s| format!("the reading with baseline {}: {s}", e.baseline)));
                warnings.extend(curve_warning(&format!("deletion curve of the reading with baseline {}", e.baseline), &e.curves));
                strip.push(e);
            }
        }
        clock(Phase::Strip, t);
    }
    let mut cascade = None;
    if let Some(s) = &settings.cascade {
        phase(Phase::Randomisation);
        let t = Instant::now();
        cascade = attempt("randomisation", &mut skipped, || randomise::cascade(&case, &reading, s, ctl))?;
        for mc in cascade.iter().flat_map(|c| &c.methods) {
            for st in &mc.steps {
                let k = st.layers_randomised;
                let what = format!("the {} map with {k} layer{} re-drawn", mc.method, if k == 1 { "" } else { "s" });
                warnings.extend(gap_warning(&what, st.completeness_gap));
            }
        }
        clock(Phase::Randomisation, t);
    }
    let mut convergence = None;
    if let Some(s) = &settings.convergence {
        phase(Phase::Convergence);
        let t = Instant::now();
        convergence = attempt("convergence", &mut skipped, || {
            model.gradient_ready()?;
            case.convergence(s, ctl)
        })?;
        if let Some(c) = &convergence {
            if c.rules.iter().all(|l| l.steps_to_gap.is_none()) {
                warnings.push(format!(
                    "no quadrature rule reached a completeness gap of {:.2} % within {} steps",
                    c.target_gap * 100.0,
                    s.max_steps
                ));
            }
        }
        clock(Phase::Convergence, t);
    }
    let mut shapley = None;
    if let (Some(s), Some(p)) = (&settings.shapley, &players) {
        phase(Phase::Shapley);
        let t = Instant::now();
        shapley = attempt("shapley", &mut skipped, || case.shapley(p, &fill, s, ctl))?;
        if let Some(sh) = shapley.as_mut() {
            shapley::cross_check(sh, p, &case.grid_map(&reading));
        }
        clock(Phase::Shapley, t);
    }
    if matches!(settings.shapley.as_ref().map(|s| &s.players), Some(Players::Regions)) && regions.is_empty() {
        warnings.push("no regions were found: the Shapley game has one player, the whole image".into());
    }
    Ok(Review {
        request: case.request.describe(),
        reading,
        curves,
        strip,
        cascade,
        convergence,
        shapley,
        regions,
        warnings,
        skipped,
        seconds,
    })
}

/// Checks the review's settings before any work; the message says what to change.
pub fn check(settings: &Settings) -> Result<()> {
    if let Some(c) = &settings.curves {
        if c.steps == 0 {
            bail!("the curves need at least one step");
        }
    }
    if let Some(s) = &settings.shapley {
        if s.permutations == 0 {
            bail!("the Shapley estimate needs at least one permutation");
        }
    }
    if let Some(c) = &settings.cascade {
        if c.layers == Some(0) {
            bail!("the randomisation cascade needs at least one layer");
        }
        if !(c.top_share > 0.0 && c.top_share <= 1.0) {
            bail!("the top share must be above 0 and at most 1, not {}", c.top_share);
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::IxDyn;

    #[test]
    fn blend_puts_each_grid_weight_on_every_channel_of_its_position() {
        // NHWC 1×2×3×2 (spatial axes 1, 2): position (r, c) holds elements 2·(3r + c) and +1.
        let x = ArrayD::from_shape_fn(IxDyn(&[1, 2, 3, 2]), |i| (i[1] * 6 + i[2] * 2 + i[3]) as f32 + 0.1);
        let xb = ArrayD::from_elem(IxDyn(&[1, 2, 3, 2]), -1.0f32);
        let g = GridIndex::new(x.shape(), [1, 2]);
        assert_eq!(g.grid(), (2, 3));
        let m = [1.0, 0.0, 0.5, 0.0, 1.0, 0.25];
        let out = g.blend(&x, &xb, &m);
        for r in 0..2 {
            for c in 0..3 {
                for k in 0..2 {
                    let w = m[r * 3 + c];
                    let (xv, bv) = (x[[0, r, c, k]], xb[[0, r, c, k]]);
                    let want = if w == 1.0 { xv } else if w == 0.0 { bv } else { bv + w * (xv - bv) };
                    assert_eq!(out[[0, r, c, k]], want, "({r},{c},{k})");
                }
            }
        }
        // NCHW, spatial axes 2, 3: all ones give x bit for bit, all zeros the fill.
        let x = ArrayD::from_shape_fn(IxDyn(&[1, 3, 2, 2]), |i| (i[1] * 4 + i[2] * 2 + i[3]) as f32 / 7.0);
        let xb = x.mapv(|v| v * 0.5 + 0.01);
        let g = GridIndex::new(x.shape(), [2, 3]);
        assert_eq!(g.blend(&x, &xb, &[1.0; 4]), x);
        assert_eq!(g.blend(&x, &xb, &[0.0; 4]), xb);
        // Summing back onto the grid adds the channels: position (0, 1) holds 1/7, 5/7, 9/7.
        let m = g.grid_map(&x);
        assert!((m[[0, 1]] - 15.0 / 7.0).abs() < 1e-6);
        assert!((m.sum() - x.sum()).abs() < 1e-5);
    }
}
