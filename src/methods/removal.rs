//! Counterfactual removal: each found region painted out with a fill that imitates its
//! surroundings ([`crate::regions::Fill`]), and all of them together, each run through one
//! forward pass. What the target's score and probability do then is evidence that needs no
//! baseline and no attribution method.

use anyhow::{Result, bail};
use ndarray::Array1;

use super::{Input, Reading, Scorer, top_index};
use crate::control::Control;
use crate::feed::FeedCard;
use crate::model::Model;
use crate::regions::{
    Assessment, Fill, FinderSettings, FlagSettings, Region, Removal, Removals, assess_with_removals, find_regions, paint_out, paint_out_all,
};

/// Paints each of `regions` out of the picture `input`, then all of them together, and scores
/// the results for the reading's target and score kind. `None` for a tensor input (no picture
/// to paint) or no regions.
pub fn removals(model: &Model, card: Option<&FeedCard>, input: &Input, reading: &Reading, regions: &[Region]) -> Result<Option<Removals>> {
    let Input::Picture { picture, feeder } = input else { return Ok(None) };
    if regions.is_empty() {
        return Ok(None);
    }
    for r in regions {
        if r.mask.dim() != (picture.height(), picture.width()) {
            bail!("region {} is not on the grid of image {}", r.label(), picture.name());
        }
    }
    let scorer = Scorer::new(model, card, reading.score_kind, reading.target.index)?;
    let mut painted: Vec<(String, ndarray::Array3<f32>)> =
        regions.iter().map(|r| (Fill::for_kind(r.kind).name().to_string(), paint_out(&picture.pixels, &r.mask, Fill::for_kind(r.kind)))).collect();
    let (all, fill) = paint_out_all(&picture.pixels, regions);
    painted.push((fill, all));
    let tensors = painted.iter().map(|(_, px)| feeder.tensor(px)).collect::<Result<Vec<_>>>()?;
    // The tapped vector at the input, as the reading recorded it.
    let clean = Array1::from(reading.scores.clone());
    let outs = model.forward_many(&tensors, scorer.tap, &Control::new())?;
    let removal = |fill: &str, v: &Array1<f32>| {
        let score = scorer.score(v);
        Removal {
            fill: fill.to_string(),
            score,
            drop: scorer.score(&clean) - score,
            top: top_index(v),
            probability_drop: (scorer.probability(&clean) - scorer.probability(v)) as f64,
        }
    };
    let mut each: Vec<Removal> = painted.iter().zip(&outs).map(|((f, _), v)| removal(f, v)).collect();
    let all = each.pop();
    Ok(Some(Removals { each, all }))
}

/// A reading's figures on `regions` and the flag, with both kinds of evidence: the map's share
/// of each region, and what painting each out does; then the map's hotspots, each painted out
/// (`super::hotspot`).
pub fn assess(model: &Model, card: Option<&FeedCard>, input: &Input, reading: &Reading, regions: &[Region], flag: &FlagSettings) -> Result<Assessment> {
    let removals = removals(model, card, input, reading, regions)?;
    let declared = match input {
        Input::Picture { picture, .. } => picture.burned_in_annotation(),
        Input::Tensor { .. } => None,
    };
    let mut a = assess_with_removals(&reading.map2d(), regions, removals.as_ref(), declared, flag)?;
    super::hotspot::add_hotspots(model, card, input, reading, &mut a, flag)?;
    Ok(a)
}

/// For a picture: its regions (the finders', told of the file's own Burned In Annotation, then
/// `drawn`, the ones a person drew) and the reading assessed against them with both kinds of
/// evidence. `None` for a tensor (no image to search). `spurion explain`, the sweep and the
/// inspector all come here, so the same image gets the same verdict from each.
pub fn assess_input(
    model: &Model,
    card: Option<&FeedCard>,
    input: &Input,
    reading: &Reading,
    drawn: Vec<Region>,
    finder: &FinderSettings,
    flag: &FlagSettings,
) -> Result<Option<Assessment>> {
    let Input::Picture { picture, .. } = input else { return Ok(None) };
    let mut regions = find_regions(&picture.luminance(), &finder.for_picture(picture.burned_in_annotation()));
    regions.extend(drawn);
    Ok(Some(assess(model, card, input, reading, &regions, flag)?))
}
