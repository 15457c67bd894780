//! The calls into the engine that worker jobs make. Each turns GUI choices into engine types and
//! engine results into [`super::state`] types; none computes anything itself.

use std::path::Path;
use std::sync::Arc;

use anyhow::{Context, Result};

use crate::control::Control;
use crate::feed::{FeedCard, Feeder, Picture};
use crate::methods::agree::Spread;
use crate::methods::{self, Baseline, Input, Method, Request, ScoreKind, TargetSpec};
use crate::model::{LoadOptions, Model, Tap};
use crate::regions::{FinderSettings, FlagSettings, assess_regions, find_regions};

use super::form::{Ask, BaselineSpec, MethodChoice, ScoreChoice, TargetChoice};
use super::paint;
use super::state::{Prepared, Session, Shown};

pub fn load_session(path: &Path) -> Result<Session> {
    let model = Model::load(path, &LoadOptions::default())?;
    let beside = FeedCard::sidecar_path(path).exists();
    let card = FeedCard::for_loaded(&model)?;
    let labels = (0..model.output_len()).map(|i| card.label(i)).collect();
    let card_note = if beside {
        "feed card beside the model".to_string()
    } else {
        format!(
            "no {} beside the model, so the feed card is guessed from the graph; check it",
            short(&FeedCard::sidecar_path(path))
        )
    };
    Ok(Session { model: Arc::new(model), card: Arc::new(card), labels, card_note })
}

fn short(p: &Path) -> String {
    super::short_name(p)
}

/// Opens an image, scores it and finds its regions.
pub fn prepare(session: &Session, path: &Path) -> Result<Prepared> {
    let picture = Picture::open(path)?;
    let feeder = Feeder::for_picture(&session.card, &picture)?;
    let x = feeder.tensor(&picture.pixels)?;
    let scores = session
        .model
        .forward(&x, Tap::Output)
        .with_context(|| format!("scoring {}", path.display()))?
        .to_vec();
    let regions = find_regions(&picture.luminance(), &FinderSettings::default());
    let region_edges = regions.iter().map(|r| paint::mask_edges(&r.mask)).collect();
    let base_image = paint::picture_image(&picture);
    Ok(Prepared { picture: Arc::new(picture), scores, regions, region_edges, base_image })
}

/// The engine request for a GUI ask.
pub fn request_of(ask: &Ask) -> Result<Request> {
    let p = |name: &str| -> Result<String> {
        ask.method_params
            .iter()
            .find(|(k, _)| *k == name)
            .map(|(_, v)| v.clone())
            .with_context(|| format!("internal: {name} missing from the request"))
    };
    let method = match ask.method {
        MethodChoice::Gradient => Method::Gradient,
        MethodChoice::GradientXInput => Method::GradientXInput,
        MethodChoice::IntegratedGradients => match p("refine")?.parse::<bool>()? {
            // Refined as the engine's default reading is; the step count is where it starts.
            true => Method::refined_integrated_gradients(p("steps")?.parse()?, methods::DEFAULT_ADAPTIVE_GAP),
            false => Method::IntegratedGradients {
                steps: p("steps")?.parse()?,
                rule: methods::DEFAULT_RULE,
                adaptive: None,
            },
        },
        MethodChoice::SmoothGrad => Method::SmoothGrad {
            noise: p("noise")?.parse()?,
            samples: p("samples")?.parse()?,
            seed: p("seed")?.parse()?,
        },
        MethodChoice::ExpectedGradients => {
            Method::ExpectedGradients { samples: p("samples")?.parse()?, seed: p("seed")?.parse()? }
        }
        MethodChoice::Occlusion => Method::Occlusion { window: p("window")?.parse()?, stride: p("stride")?.parse()? },
    };
    let baseline = match &ask.baseline {
        BaselineSpec::Black => Baseline::Black,
        BaselineSpec::Grey => Baseline::Grey,
        BaselineSpec::Blur(s) => Baseline::Blur { sigma: s.parse()? },
        BaselineSpec::UniformNoise(seed) => Baseline::UniformNoise { seed: *seed },
        BaselineSpec::GaussianNoise(s, seed) => Baseline::GaussianNoise { sigma: s.parse()?, seed: *seed },
        BaselineSpec::Mean(d) => Baseline::Mean { dir: d.clone() },
        BaselineSpec::Image(p) => Baseline::Image { path: p.clone() },
    };
    let target = match ask.target {
        TargetChoice::Top => TargetSpec::Top,
        TargetChoice::Index(i) => TargetSpec::Index(i),
    };
    let score = match ask.score {
        ScoreChoice::Raw => ScoreKind::Raw,
        ScoreChoice::Softmax => ScoreKind::Softmax,
        ScoreChoice::Logits => ScoreKind::Logits,
    };
    Ok(Request { method, baseline, target, score })
}

/// One reading with its region figures and flag.
pub fn read(session: &Session, prepared: &Prepared, ask: &Ask, ctl: &Control) -> Result<Shown> {
    let req = request_of(ask)?;
    let input = Input::picture((*prepared.picture).clone(), &session.card)?;
    let reading = methods::explain(&session.model, Some(&session.card), &input, &req, ctl)?;
    let map = reading.map2d();
    let spread = Spread::of(&map);
    let assessment = assess_regions(&map, &prepared.regions, &FlagSettings::default())?;
    Ok(Shown { reading: Arc::new(reading), map, spread, assessment })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::gui::form::{BaselineSpec, Form};

    #[test]
    fn integrated_gradients_refine_by_default_and_run_fixed_when_asked() {
        let mut form = Form::default();
        let r = request_of(&form.ask_with(BaselineSpec::Black)).unwrap();
        assert_eq!(
            r.method,
            Method::IntegratedGradients {
                steps: form.steps,
                rule: methods::Rule::Midpoint,
                adaptive: Some(methods::DEFAULT_ADAPTIVE_GAP)
            }
        );
        form.refine = false;
        let r = request_of(&form.ask_with(BaselineSpec::Black)).unwrap();
        assert_eq!(r.method, Method::IntegratedGradients { steps: form.steps, rule: methods::DEFAULT_RULE, adaptive: None });
    }
}
