//! The review in the inspector: the tests a reviewer runs on the current reading (the review
//! panel), each baseline's deletion and insertion curves in the baseline strip, and showing a
//! strip tile's reading on the slide.
//!
//! The panel runs `spurion::review::run` on a worker, with the request the slide shows and the
//! settings of [`ReviewForm`] (the review's own defaults, as `spurion review` takes them), so
//! the inspector and the command line give the same figures. The strip's curves are one
//! `review::Case::curves` call per reading the strip already has, filled from that reading's
//! baseline, as `spurion review --baselines` fills them. Nothing here computes a figure.

use std::collections::HashMap;
use std::sync::Arc;

use egui::{ColorImage, TextureHandle};

use crate::methods::{Method, Request};
use crate::review::convergence::ConvergenceSettings;
use crate::review::curves::{CurveSettings, Curves};
use crate::review::randomise::CascadeSettings;
use crate::review::shapley::{Players, ShapleySettings};
use crate::review::{self, Phase, Review, Settings, defaults as d};

pub(super) mod review_work;

use super::app::Inspector;
use super::short_name;
use super::state::{JobId, Key, NoteKind};
use super::work::Done;

/// What the review panel and the strip's curves ask for.
#[derive(Clone, Debug)]
pub enum ReviewIntent {
    /// Show or hide the review panel.
    Open(bool),
    /// Review the slide's reading with the panel's settings.
    Run,
    Cancel,
    /// Deletion and insertion curves of every reading the strip has.
    StripCurves,
    /// Show the strip's tile number `i` on the slide.
    ShowTile(usize),
}

/// What review jobs send back.
pub enum ReviewDone {
    /// The review has started a phase.
    Phase(Phase),
    Finished { result: Result<Box<ReviewResult>, String>, cancelled: bool },
    /// One strip reading's curves.
    Curves { key: CurveKey, result: Result<Box<Curves>, String>, cancelled: bool },
    /// The strip's curve job has ended (keys it never reached are pending no more).
    StripEnded,
}

/// A finished review with its pictures, made on the worker so the frame only uploads them.
pub struct ReviewResult {
    pub review: Review,
    pub images: ReviewImages,
}

/// Pictures of a review's maps, ready to upload.
pub struct ReviewImages {
    /// Per cascade method: |map| of the original, then of each step, each on its own scale.
    pub cascade: Vec<Vec<ColorImage>>,
    /// Region players' Shapley values over the picture (grid cells are drawn as rectangles).
    pub shapley_regions: Option<ColorImage>,
}

/// The review panel's settings: which tests run and how far. Defaults are the review's own
/// (`review::defaults`), the ones `spurion review` takes without flags.
#[derive(Clone, Debug, PartialEq)]
pub struct ReviewForm {
    pub curves: bool,
    pub curve_steps: usize,
    pub random_orders: usize,
    pub curve_patch: usize,
    pub cascade: bool,
    /// Re-draw every layer (else only `cascade_layers` from the output side).
    pub cascade_all: bool,
    pub cascade_layers: usize,
    pub convergence: bool,
    pub convergence_max: usize,
    pub shapley: bool,
    /// Shapley players: the found regions and the rest (else the grid's cells).
    pub regions: bool,
    pub grid: usize,
    pub permutations: usize,
    pub seed: u64,
}

impl Default for ReviewForm {
    fn default() -> Self {
        ReviewForm {
            curves: true,
            curve_steps: d::CURVE_STEPS,
            random_orders: d::RANDOM_ORDERS,
            curve_patch: d::CURVE_PATCH,
            cascade: true,
            cascade_all: true,
            cascade_layers: 2,
            convergence: true,
            convergence_max: d::CONVERGENCE_MAX_STEPS,
            shapley: true,
            regions: false,
            grid: d::GRID,
            permutations: d::PERMUTATIONS,
            seed: d::SEED,
        }
    }
}

impl ReviewForm {
    pub fn curve_settings(&self) -> CurveSettings {
        CurveSettings { steps: self.curve_steps, random_orders: self.random_orders, seed: self.seed, patch: self.curve_patch }
    }

    /// The engine's settings for reviewing `request`, built as `spurion review`'s flags build
    /// them (src/cli/review.rs), or why they cannot be used.
    pub fn settings(&self, request: &Request) -> Result<Settings, String> {
        // The convergence reports the step count for the gap the reading refines to, if it does.
        let target_gap = match request.method {
            Method::IntegratedGradients { adaptive: Some(g), .. } => g as f64,
            _ => d::CONVERGENCE_GAP,
        };
        let s = Settings {
            fill: None,
            curves: self.curves.then(|| self.curve_settings()),
            strip: vec![],
            cascade: self.cascade.then(|| CascadeSettings {
                layers: (!self.cascade_all).then_some(self.cascade_layers),
                seed: self.seed,
                top_share: d::TOP_SHARE,
                methods: vec![],
            }),
            convergence: self.convergence.then(|| ConvergenceSettings {
                min_steps: d::CONVERGENCE_MIN_STEPS.min(self.convergence_max),
                max_steps: self.convergence_max,
                target_gap,
            }),
            shapley: self.shapley.then_some(ShapleySettings {
                players: if self.regions { Players::Regions } else { Players::Grid(self.grid) },
                permutations: self.permutations,
                seed: self.seed,
            }),
            finder: Default::default(),
        };
        if self.convergence && self.convergence_max == 0 {
            return Err("the convergence ladder needs a largest step count of 1 or more".into());
        }
        review::check(&s).map_err(|e| format!("{e:#}"))?;
        Ok(s)
    }

    /// The settings in a few words, shown with the results they made.
    pub fn summary(&self) -> String {
        let mut parts = vec![];
        if self.curves {
            let patch = if self.curve_patch > 1 { format!(", {0}×{0} patches", self.curve_patch) } else { String::new() };
            parts.push(format!("curves {} steps, {} random orders{patch}", self.curve_steps, self.random_orders));
        }
        if self.cascade {
            parts.push(if self.cascade_all { "cascade all layers".into() } else { format!("cascade {} layers", self.cascade_layers) });
        }
        if self.convergence {
            parts.push(format!("convergence to {} steps", self.convergence_max));
        }
        if self.shapley {
            let who = if self.regions { "regions".to_string() } else { format!("{0}×{0} grid", self.grid) };
            parts.push(format!("Shapley {who}, {} orders", self.permutations));
        }
        parts.push(format!("seed {}", self.seed));
        parts.join(" · ")
    }
}

/// One review of one reading.
pub struct ReviewRun {
    /// The slide's reading it reviews (image and request).
    pub key: Key,
    /// The request it ran: the slide's, with the baseline control's baseline as the fill when
    /// the method takes none (as `spurion review --baseline` gives it).
    pub request: Request,
    pub model_sha: String,
    pub form: ReviewForm,
    pub job: JobId,
    pub state: RunState,
}

pub enum RunState {
    Running { phase: Option<Phase>, started: Vec<Phase> },
    Done(Arc<ReviewResult>),
    Cancelled,
    Failed(String),
}

/// A strip reading's curves: by reading, model and curve settings.
#[derive(Clone, Debug, PartialEq, Eq, Hash)]
pub struct CurveKey {
    pub key: Key,
    pub model: String,
    pub settings: String,
}

impl CurveKey {
    pub fn new(key: &Key, model: &str, settings: &CurveSettings) -> CurveKey {
        CurveKey { key: key.clone(), model: model.to_string(), settings: format!("{settings:?}") }
    }
}

pub enum CurveSlot {
    Pending(JobId),
    Done(Arc<Curves>),
    Failed(String),
}

/// The review's part of the inspector's state.
#[derive(Default)]
pub struct ReviewState {
    pub open: bool,
    pub form: ReviewForm,
    /// The latest review (shown while the slide shows the reading it reviewed).
    pub run: Option<ReviewRun>,
    pub strip_curves: HashMap<CurveKey, CurveSlot>,
    pub strip_job: Option<JobId>,
    /// Textures of the latest review's pictures, by (job, method, step).
    pub(crate) tex: HashMap<(JobId, usize, usize), TextureHandle>,
}

impl Inspector {
    pub(crate) fn apply_review(&mut self, i: ReviewIntent) {
        match i {
            ReviewIntent::Open(open) => {
                self.review.open = open;
                // One click: opening the review runs it on the slide's reading unless it has
                // already run (or runs) for it; "Run review" runs it again with other settings.
                if open && self.current_review().is_none() && !self.review_running() {
                    self.start_review();
                }
            }
            ReviewIntent::Run => self.start_review(),
            ReviewIntent::Cancel => {
                if let Some(r) = &self.review.run {
                    self.workers.cancel(r.job);
                }
            }
            ReviewIntent::StripCurves => self.start_strip_curves(),
            ReviewIntent::ShowTile(i) => self.show_tile(i),
        }
    }

    /// The slide's reading and the request a review of it runs, or why there is none.
    pub fn review_target(&self) -> Result<(Key, Request), String> {
        let key = self.wanted_key()?;
        let mut request = key.request.clone();
        if !request.method.uses_baseline() {
            // The fill of the curves and Shapley values and the convergence's baseline.
            request.baseline = self.form.baseline_of(self.form.baseline, self.image_dir().as_deref())?;
        }
        Ok((key, request))
    }

    /// The latest review if it is of the slide's reading (and fill) under the loaded model.
    pub fn current_review(&self) -> Option<&ReviewRun> {
        let r = self.review.run.as_ref()?;
        let (key, request) = self.review_target().ok()?;
        let sha = self.session.as_ref()?.model.sha256();
        (r.key == key && r.request == request && r.model_sha == sha).then_some(r)
    }

    /// True while the latest review runs.
    pub fn review_running(&self) -> bool {
        self.review.run.as_ref().is_some_and(|r| matches!(r.state, RunState::Running { .. }))
    }

    fn start_review(&mut self) {
        let (key, request) = match self.review_target() {
            Ok(t) => t,
            Err(e) => return self.note(NoteKind::Warning, format!("nothing to review: {e}")),
        };
        let settings = match self.review.form.settings(&request) {
            Ok(s) => s,
            Err(e) => return self.note(NoteKind::Warning, format!("review settings: {e}")),
        };
        let (Some(session), Some(prepared)) = (self.session.clone(), self.current_prepared()) else {
            return self.note(NoteKind::Warning, "the review starts once the model and image are ready");
        };
        if let Some(old) = self.review.run.take()
            && matches!(old.state, RunState::Running { .. })
        {
            self.workers.cancel(old.job);
        }
        self.review.tex.clear();
        let label = format!("review · {} · {}", short_name(&key.image), request.describe());
        let req = request.clone();
        let (job, _) = self.workers.spawn(
            label,
            true,
            move |ctl, outbox| {
                let r = review_work::run(&session, &prepared, &req, &settings, ctl, outbox);
                let cancelled = r.as_ref().err().is_some_and(crate::model::is_cancelled) || ctl.is_cancelled();
                Done::Review(ReviewDone::Finished { result: r.map_err(|e| format!("{e:#}")), cancelled })
            },
            |msg| Done::Review(ReviewDone::Finished { result: Err(msg), cancelled: false }),
        );
        let model_sha = self.session.as_ref().map(|s| s.model.sha256().to_string()).unwrap_or_default();
        let state = RunState::Running { phase: None, started: vec![] };
        self.review.run = Some(ReviewRun { key, request, model_sha, form: self.review.form.clone(), job, state });
    }

    pub(crate) fn review_done(&mut self, id: JobId, d: ReviewDone) {
        match d {
            ReviewDone::Phase(p) => {
                if let Some(ReviewRun { job, state: RunState::Running { phase, started }, .. }) = &mut self.review.run
                    && *job == id
                {
                    *phase = Some(p);
                    started.push(p);
                }
            }
            ReviewDone::Finished { result, cancelled } => {
                let Some(run) = self.review.run.as_mut().filter(|r| r.job == id) else { return };
                run.state = match result {
                    _ if cancelled => RunState::Cancelled,
                    Ok(r) => RunState::Done(Arc::from(r)),
                    Err(e) => RunState::Failed(e),
                };
                if let RunState::Failed(e) = &run.state {
                    let msg = format!("the review of {} failed: {e}", short_name(&run.key.image));
                    self.note(NoteKind::Error, msg);
                }
            }
            ReviewDone::Curves { key, result, cancelled } => {
                if cancelled {
                    self.review.strip_curves.remove(&key);
                    return;
                }
                let slot = match result {
                    Ok(c) => CurveSlot::Done(Arc::from(c)),
                    Err(e) => {
                        self.note(NoteKind::Error, format!("curves of {}: {e}", key.key.request.baseline.title()));
                        CurveSlot::Failed(e)
                    }
                };
                self.review.strip_curves.insert(key, slot);
            }
            ReviewDone::StripEnded => {
                if self.review.strip_job == Some(id) {
                    self.review.strip_job = None;
                }
                self.review.strip_curves.retain(|_, s| !matches!(s, CurveSlot::Pending(j) if *j == id));
            }
        }
    }

    /// The key of a strip reading's curves under the loaded model and the panel's settings.
    pub fn strip_curve_key(&self, key: &Key) -> Option<CurveKey> {
        let sha = self.session.as_ref()?.model.sha256();
        Some(CurveKey::new(key, sha, &self.review.form.curve_settings()))
    }

    /// Starts the curves of every strip reading read so far that has none yet.
    fn start_strip_curves(&mut self) {
        let Some(plan) = self.strip.wanted.clone() else {
            return self.note(NoteKind::Warning, "compute the baseline strip first");
        };
        let done: Vec<_> = plan.keys().into_iter().filter_map(|k| self.cache.done(&k).cloned().map(|s| (k, s))).collect();
        if done.is_empty() {
            return self.note(NoteKind::Warning, "the strip has no maps yet; the curves start once it has");
        }
        let prepared = self.images.iter().find(|e| e.path == plan.image).and_then(|e| match &e.state {
            super::state::ImageState::Ready(p) => Some(p.clone()),
            _ => None,
        });
        let (Some(session), Some(prepared)) = (self.session.clone(), prepared) else { return };
        let todo: Vec<_> = done
            .into_iter()
            .filter_map(|(k, s)| self.strip_curve_key(&k).map(|ck| (ck, s)))
            .filter(|(ck, _)| !self.review.strip_curves.contains_key(ck))
            .collect();
        if todo.is_empty() {
            return;
        }
        let settings = self.review.form.curve_settings();
        let keys: Vec<CurveKey> = todo.iter().map(|(ck, _)| ck.clone()).collect();
        let (id, _) = self.workers.spawn(
            format!("deletion and insertion curves · {} maps", todo.len()),
            true,
            move |ctl, outbox| {
                review_work::strip_curves(&session, &prepared, todo, &settings, ctl, outbox);
                Done::Review(ReviewDone::StripEnded)
            },
            |msg| Done::Failed(format!("the strip's curves stopped: {msg}")),
        );
        for k in keys {
            self.review.strip_curves.insert(k, CurveSlot::Pending(id));
        }
        self.review.strip_job = Some(id);
    }

    /// Shows strip tile `i`'s reading on the slide: the strip's image, and the baseline control
    /// set to the tile's baseline, which makes the slide's request the tile's (it is cached, so
    /// it shows at once, with its regions and figures).
    fn show_tile(&mut self, i: usize) {
        let Some(plan) = self.strip.wanted.clone() else { return };
        let Some((kind, key)) = plan.tiles.get(i) else { return };
        let title = kind.entry().title;
        let key = match key {
            Ok(k) => k,
            Err(why) => return self.note(NoteKind::Warning, format!("the strip has no {title} reading: {why}")),
        };
        if self.current_image().map(|e| &e.path) != Some(&plan.image) {
            self.select_path(&plan.image);
        }
        self.form.baseline = *kind;
        self.review.open = false;
        if self.wanted_key().ok().as_ref() != Some(key) {
            self.note(
                NoteKind::Info,
                format!("the strip was read with earlier settings; the slide reads {title} with the current ones (Compute strip to refresh)"),
            );
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_panels_defaults_are_the_reviews_and_the_command_lines() {
        // spurion review without flags reviews the default request with Settings::default().
        let ours = ReviewForm::default().settings(&Request::default()).unwrap();
        assert_eq!(format!("{ours:?}"), format!("{:?}", Settings::default()));
    }

    #[test]
    fn leaving_tests_out_and_bad_counts() {
        let f = ReviewForm { curves: false, cascade: false, convergence: false, shapley: false, ..ReviewForm::default() };
        let s = f.settings(&Request::default()).unwrap();
        assert!(s.curves.is_none() && s.cascade.is_none() && s.convergence.is_none() && s.shapley.is_none());
        let f = ReviewForm { cascade_all: false, cascade_layers: 0, ..ReviewForm::default() };
        assert!(f.settings(&Request::default()).unwrap_err().contains("at least one layer"));
        let f = ReviewForm { cascade_all: false, cascade_layers: 3, regions: true, ..ReviewForm::default() };
        let s = f.settings(&Request::default()).unwrap();
        assert_eq!(s.cascade.unwrap().layers, Some(3));
        assert_eq!(s.shapley.unwrap().players, Players::Regions);
    }
}
