//! The calls into the engine that worker jobs make. Each hands the engine its own typed request
//! and turns engine results into [`super::state`] types; none computes anything itself.

use std::path::Path;
use std::sync::Arc;

use anyhow::{Context, Result};

use crate::control::Control;
use crate::feed::{FeedCard, Feeder, Picture};
use crate::methods::agree::Spread;
use crate::methods::{self, Input, Request};
use crate::model::{LoadOptions, Model, Tap};
use crate::regions::{FinderSettings, FlagSettings, find_regions, paint_out_all};

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
    let painted = (!regions.is_empty()).then(|| {
        let (pixels, fill) = paint_out_all(&picture.pixels, &regions);
        (paint::picture_image(&Picture { path: None, pixels, bit_depth: picture.bit_depth }), fill)
    });
    Ok(Prepared { picture: Arc::new(picture), scores, regions, region_edges, base_image, painted })
}

/// One reading with its region figures and flag.
pub fn read(session: &Session, prepared: &Prepared, req: &Request, ctl: &Control) -> Result<Shown> {
    let input = Input::picture((*prepared.picture).clone(), &session.card)?;
    let reading = methods::explain(&session.model, Some(&session.card), &input, req, ctl)?;
    let map = reading.map2d();
    let spread = Spread::of(&map);
    let assessment = methods::assess(&session.model, Some(&session.card), &input, &reading, &prepared.regions, &FlagSettings::default())?;
    Ok(Shown { reading: Arc::new(reading), map, spread, assessment })
}
