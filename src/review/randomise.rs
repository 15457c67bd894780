//! Model-parameter randomisation (Adebayo, Gilmer, Muelly, Goodfellow, Hardt, Kim 2018, "Sanity
//! Checks for Saliency Maps", NeurIPS, section 3): re-draw the weights of the model's layers
//! from the output side down, cascading (step k has the top k layers re-drawn), recompute the
//! map after each step and compare it with the original map by Spearman's rank correlation and
//! the top-k % overlap, of the magnitudes (|map|) and of the signed maps, as the paper reports
//! them with and without absolute values. A map that explains the model must change as the
//! model is destroyed; one that barely changes depends on the input, not on the model.
//!
//! Each step's map is computed with the reading's settings, for the reading's class; integrated
//! gradients that refined their step count are recomputed at the count the original needed,
//! fixed (midpoint rule), so every step costs the same and the steps compare like with like.
//! The layers and their initialisers are described in [`super::redraw`].

use anyhow::{Context, Result, bail};
use ndarray::Array2;
use serde::{Deserialize, Serialize};

use super::redraw::{INIT, Layer, layers, redraw};
use super::{Case, defaults};
use crate::control::Control;
use crate::methods::agree::{spearman, top_overlap, view};
use crate::methods::{self, Method, Reading, Request, Rule};
use crate::model::{LoadOptions, Model, read_proto};
use crate::sign::Sign;

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CascadeSettings {
    /// Re-draw at most this many layers (from the output side); `None`: all of them.
    pub layers: Option<usize>,
    pub seed: u64,
    /// Share of pixels for the top-k overlap.
    pub top_share: f64,
    /// Methods whose maps go through the cascade; empty: the reading's method only.
    pub methods: Vec<Method>,
}

impl Default for CascadeSettings {
    fn default() -> Self {
        CascadeSettings { layers: None, seed: defaults::SEED, top_share: defaults::TOP_SHARE, methods: vec![] }
    }
}

/// One step of the cascade for one method.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CascadeStep {
    pub layers_randomised: usize,
    /// The layer this step added to the re-drawn ones.
    pub layer: String,
    /// Spearman's ρ of |map| against the original's |map|.
    pub spearman: Option<f64>,
    /// Share of the original's top pixels by |map| that are among this map's.
    pub top_overlap: Option<f64>,
    /// The same two figures on the signed maps (top: most supporting).
    pub spearman_signed: Option<f64>,
    pub top_overlap_signed: Option<f64>,
    /// The target's score at the input under this step's model.
    pub score_input: f32,
    pub completeness_gap: Option<f64>,
    /// The map on the model's grid.
    #[serde(skip)]
    pub map: Array2<f32>,
}

/// The cascade of one method.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct MethodCascade {
    pub method: String,
    /// The settings the steps used, in words.
    pub settings: String,
    pub steps: Vec<CascadeStep>,
    /// Whether the map still ranks with ρ ≥ the threshold after the last step: it does not
    /// depend on the model.
    pub independent: bool,
    /// One sentence for people.
    pub verdict: String,
    /// The original map on the model's grid.
    #[serde(skip)]
    pub original: Array2<f32>,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Cascade {
    /// How the weights were re-drawn, in words.
    pub init: String,
    pub seed: u64,
    pub top_share: f64,
    /// The ρ at or above which a map is flagged as not depending on the model.
    pub threshold: f64,
    /// All layers of the model, input side first.
    pub layers: Vec<Layer>,
    pub methods: Vec<MethodCascade>,
}

impl Cascade {
    /// The layer that step `k` of the cascade (`layers_randomised`) added, counted from the
    /// output side.
    pub fn layer_of_step(&self, k: usize) -> Option<&Layer> {
        self.layers.len().checked_sub(k).and_then(|i| self.layers.get(i))
    }
}

/// The method as the cascade runs it: refined integrated gradients fixed at the step count the
/// original reading needed.
/// With a distribution baseline the original's gradients were spread over
/// `methods::defaults::IG_DRAWS` paths, and so are the frozen ones.
fn frozen(method: &Method, original: &Reading, baseline: &methods::Baseline) -> Method {
    match method {
        Method::IntegratedGradients { steps, adaptive: Some(_), .. } => {
            let paths = if baseline.is_distribution() { methods::defaults::IG_DRAWS } else { 1 };
            let total = original.steps.unwrap_or(*steps * paths);
            Method::IntegratedGradients { steps: total.div_ceil(paths).max(1), rule: Rule::Midpoint, adaptive: None }
        }
        m => m.clone(),
    }
}

/// Runs the cascade on the case's model. `reading` is the case's reading (the original map of
/// its method); other methods in the settings get their original map first. Progress: one unit
/// per map.
pub fn cascade(case: &Case, reading: &Reading, settings: &CascadeSettings, ctl: &Control) -> Result<Cascade> {
    let model = case.model;
    let (proto, sha) = read_proto(model.path())?;
    if sha != model.sha256() {
        bail!("the model file {} changed since it was loaded; load it again before the randomisation test", model.path().display());
    }
    let all = layers(&proto);
    if all.is_empty() {
        bail!(
            "the model {} has no layers with constant weights (Conv, Gemm or MatMul with a constant weight, normalisation), \
             so there is nothing to re-draw",
            model.path().display()
        );
    }
    let k_max = settings.layers.unwrap_or(all.len()).clamp(1, all.len());
    let methods_asked: Vec<Method> = if settings.methods.is_empty() { vec![reading.settings.clone()] } else { settings.methods.clone() };
    let extra = methods_asked.iter().filter(|m| **m != reading.settings).count();
    ctl.begin((extra + k_max * methods_asked.len()) as u64);
    let request = |m: &Method| Request { method: m.clone(), ..case.request.clone() };
    // The original reading of each method, and the settings its steps run with.
    let mut originals: Vec<(Reading, Method)> = vec![];
    for m in &methods_asked {
        let r = if *m == reading.settings {
            reading.clone()
        } else {
            let r = methods::explain(model, case.card, case.input, &request(m), &ctl.linked())?;
            ctl.advance(1);
            r
        };
        let f = frozen(m, &r, &case.request.baseline);
        originals.push((r, f));
    }
    let mut out: Vec<MethodCascade> = originals
        .iter()
        .map(|(r, f)| MethodCascade {
            method: r.method.clone(),
            settings: request(f).describe(),
            steps: vec![],
            independent: false,
            verdict: String::new(),
            original: case.grid_map(r),
        })
        .collect();
    // The same output as the model under review, whatever its feed card says.
    let opts = LoadOptions {
        input_shape: Some(model.input_shape().to_vec()),
        output: Some(model.output_name().to_string()),
        classes: None,
    };
    for k in 1..=k_max {
        ctl.check()?;
        let chosen = &all[all.len() - k..];
        let changed = redraw(&proto, chosen, settings.seed)?;
        let m_k = Model::load_proto(model.path(), &changed, &opts)
            .with_context(|| format!("the model with its top {k} layers re-drawn"))?;
        for ((_, f), mc) in originals.iter().zip(out.iter_mut()) {
            let r = methods::explain(&m_k, case.card, case.input, &request(f), &ctl.linked())
                .with_context(|| format!("{} with the top {k} layers re-drawn", f.name()))?;
            let map = case.grid_map(&r);
            let (a, b) = (&mc.original, &map);
            let share = settings.top_share;
            mc.steps.push(CascadeStep {
                layers_randomised: k,
                layer: chosen[0].label(),
                spearman: spearman(&view(a, Sign::Magnitude), &view(b, Sign::Magnitude)),
                top_overlap: top_overlap(&view(a, Sign::Magnitude), &view(b, Sign::Magnitude), share),
                spearman_signed: spearman(a, b),
                top_overlap_signed: top_overlap(a, b, share),
                score_input: r.score_input,
                completeness_gap: r.completeness_gap,
                map,
            });
            ctl.advance(1);
        }
    }
    for mc in &mut out {
        judge(mc, all.len());
    }
    Ok(Cascade {
        init: INIT.to_string(),
        seed: settings.seed,
        top_share: settings.top_share,
        threshold: defaults::INDEPENDENT_SPEARMAN,
        layers: all,
        methods: out,
    })
}

/// Sets the flag and the verdict from the last step.
fn judge(mc: &mut MethodCascade, total: usize) {
    let Some(last) = mc.steps.last() else { return };
    let k = last.layers_randomised;
    let of = if k == total { format!("all {total} layers") } else { format!("the top {k} of {total} layers") };
    let thr = defaults::INDEPENDENT_SPEARMAN;
    match last.spearman {
        Some(rho) if rho >= thr => {
            mc.independent = true;
            mc.verdict = format!(
                "{}: with {of} re-drawn the map still ranks with ρ {rho:.2} (|map|) against the original: it does not depend \
                 on the model (flagged at ρ ≥ {thr})",
                mc.method
            );
        }
        Some(rho) => {
            mc.verdict = format!("{}: with {of} re-drawn the map ranks with ρ {rho:.2} (|map|) against the original: it changes with the model", mc.method);
        }
        None => mc.verdict = format!("{}: with {of} re-drawn the map is constant; no rank correlation", mc.method),
    }
}
