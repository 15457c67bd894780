//! The calls into the engine that worker jobs make. Each hands the engine its own typed request
//! and turns engine results into [`crate::gui::state`] types; none computes anything itself.

use std::path::Path;
use std::sync::Arc;

use anyhow::{Context, Result};
use ndarray::Array2;

use crate::control::Control;
use crate::feed::{FeedCard, Feeder, Picture};
use crate::methods::agree::Spread;
use crate::methods::{self, Input, Reading, Request};
use crate::model::{Model, Tap};
use crate::regions::{FinderSettings, FlagSettings, find_regions_in, paint_out_all};

use crate::gui::slide::paint;
use crate::gui::state::{Drawn, Prepared, Session, Shown};

pub fn load_session(path: &Path) -> Result<Session> {
    let model = Model::load(path, &FeedCard::sidecar_load_options(path)?)?;
    let card = FeedCard::for_loaded(&model)?;
    let labels = (0..model.output_len()).map(|i| card.label(i)).collect();
    let card_note = if !card.guessed() {
        "feed card beside the model".to_string()
    } else if card.origin.graph_normalises.is_some() {
        format!(
            "no {} beside the model; the graph normalises its input itself, the rest of the feed is guessed from the graph",
            short(&FeedCard::sidecar_path(path))
        )
    } else {
        format!("no {} beside the model, so the feed is guessed; see Feed…", short(&FeedCard::sidecar_path(path)))
    };
    let feed = card.summary(path);
    Ok(Session { model: Arc::new(model), card: Arc::new(card), labels, card_note, feed })
}

fn short(p: &Path) -> String {
    crate::gui::short_name(p)
}

/// Opens an image, scores it and finds its regions.
pub fn prepare(session: &Session, path: &Path) -> Result<Prepared> {
    let opts = crate::feed::OpenOptions { frame: 0, window: session.card.input.window.clone() };
    let picture = Picture::open_with(path, &opts)?;
    let feeder = Feeder::for_picture(&session.card, &picture)?;
    let x = feeder.tensor(&picture.pixels)?;
    let scores = session
        .model
        .forward(&x, Tap::Output)
        .with_context(|| format!("scoring {}", path.display()))?
        .to_vec();
    let finder = FinderSettings::default().for_picture(picture.burned_in_annotation());
    let regions = find_regions_in(&picture.pixels, &finder);
    let region_edges = regions.iter().map(|r| paint::mask_edges(&r.mask)).collect();
    let base_image = paint::picture_image(&picture);
    let painted = (!regions.is_empty()).then(|| {
        let (pixels, fill) = paint_out_all(&picture.pixels, &regions);
        (paint::picture_image(&picture.with_pixels(pixels)), fill)
    });
    let feed = crate::report::FeedRecord::of_picture(&picture, &feeder, session.model.path());
    Ok(Prepared { picture: Arc::new(picture), scores, regions, region_edges, base_image, painted, feed })
}

/// A DICOM picture's values through a display window, as a texture image (what is shown, not
/// what the model reads).
pub fn display_image(picture: &Picture, window: &crate::feed::window::Windowing) -> Result<egui::ColorImage> {
    let d = picture.dicom.as_ref().context("only DICOM pictures take a display window")?;
    let w = crate::feed::window::resolve(d, window)?;
    Ok(paint::picture_image(&picture.with_pixels(d.values.mapv(|v| w.map(f64::from(v)) as f32))))
}

/// One reading with its region figures and flag, over the found regions and the drawn ones.
pub fn read(session: &Session, prepared: &Prepared, req: &Request, drawn: &Drawn, ctl: &Control) -> Result<Shown> {
    let input = Input::picture((*prepared.picture).clone(), &session.card)?;
    let reading = methods::explain(&session.model, Some(&session.card), &input, req, ctl)?;
    let map = reading.map2d();
    let spread = Spread::of(&map);
    assess(session, prepared, &input, Arc::new(reading), map, spread, drawn)
}

/// The figures and flag of a reading already made, again, under other drawn regions (a region
/// drawn or deleted asks for no new map, only for the removal runs and the figures).
pub fn reassess(session: &Session, prepared: &Prepared, shown: &Shown, drawn: &Drawn) -> Result<Shown> {
    let input = Input::picture((*prepared.picture).clone(), &session.card)?;
    assess(session, prepared, &input, shown.reading.clone(), shown.map.clone(), shown.spread.clone(), drawn)
}

/// As `spurion explain --ledger` and the sweep do (`methods::assess_input`): the found regions
/// (the same finders, found once when the image opened), then the drawn ones.
fn assess(session: &Session, prepared: &Prepared, input: &Input, reading: Arc<Reading>, map: Array2<f32>, spread: Spread, drawn: &Drawn) -> Result<Shown> {
    let (h, w) = (prepared.picture.height(), prepared.picture.width());
    let drawn_regions = match &drawn.file {
        Some(f) => f.to_regions(h, w).context("the regions drawn on this image in the ledger")?,
        None => vec![],
    };
    let drawn_edges = drawn_regions.iter().map(|r| paint::mask_edges(&r.mask)).collect();
    let mut regions = prepared.regions.clone();
    regions.extend(drawn_regions);
    let assessment = methods::assess(&session.model, Some(&session.card), input, &reading, &regions, &FlagSettings::default())?;
    let painted = (!drawn.is_empty()).then(|| {
        let (pixels, fill) = paint_out_all(&prepared.picture.pixels, &regions);
        (paint::picture_image(&prepared.picture.with_pixels(pixels)), fill)
    });
    Ok(Shown { reading, map, spread, assessment, drawn_edges, painted })
}

/// Writes a feed card beside the session's model from `preset` (and a labels file), then loads
/// the model again so that the card is used. Refuses to replace a card that exists.
pub fn write_card(session: &Session, preset: crate::feed::Preset, labels: Option<std::path::PathBuf>) -> Result<Session> {
    let path = session.model.path();
    let spec = crate::feed::CardSpec { preset: Some(preset), labels, ..Default::default() };
    let card = crate::feed::card_for(&session.model, &spec)?;
    let text = crate::feed::card_text(&card, path, &format!("preset {}, from the inspector", preset.name()))?;
    crate::feed::write_card(&FeedCard::sidecar_path(path), &text, false)?;
    load_session(path)
}
