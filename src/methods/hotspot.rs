//! The model's part of the hotspot evidence: each hotspot of a reading's map painted out
//! ([`crate::regions::Fill::Harmonic`], from the pixels around it) and run through one
//! forward pass, as the found regions are in [`super::removals`].

use anyhow::{Result, bail};
use ndarray::Array1;

use super::{Input, Reading, Scorer, top_index};
use crate::control::Control;
use crate::feed::FeedCard;
use crate::model::Model;
use crate::regions::hotspot::HotspotRemoval;
use crate::regions::{Assessment, Fill, FlagSettings, Hotspot, Removal, find_hotspots, hotspot, paint_out};

/// What painting each hotspot out does to the reading's target, one per hotspot in order: its
/// removal mask, and for a hotspot that looks like a mark and has strokes, the strokes alone.
/// Empty for a tensor input (no picture to paint) or no hotspots.
pub fn hotspot_removals(model: &Model, card: Option<&FeedCard>, input: &Input, reading: &Reading, hotspots: &[Hotspot]) -> Result<Vec<HotspotRemoval>> {
    let Input::Picture { picture, feeder } = input else { return Ok(vec![]) };
    if hotspots.is_empty() {
        return Ok(vec![]);
    }
    for h in hotspots {
        if h.removal_mask.dim() != (picture.height(), picture.width()) {
            bail!("a hotspot is not on the grid of image {}", picture.name());
        }
    }
    let scorer = Scorer::new(model, card, reading.score_kind, reading.target.index)?;
    let fill = Fill::Harmonic;
    // The masks to paint: each hotspot's, then the strokes of those that look like marks.
    let mut masks: Vec<&ndarray::Array2<bool>> = hotspots.iter().map(|h| &h.removal_mask).collect();
    let strokes: Vec<Option<usize>> = hotspots
        .iter()
        .map(|h| match (&h.stroke_mask, h.looks_like_mark) {
            (Some(m), true) => {
                masks.push(m);
                Some(masks.len() - 1)
            }
            _ => None,
        })
        .collect();
    let tensors = masks.iter().map(|m| feeder.tensor(&paint_out(&picture.pixels, m, fill))).collect::<Result<Vec<_>>>()?;
    let clean = Array1::from(reading.scores.clone());
    let outs = model.forward_many(&tensors, scorer.tap, &Control::new())?;
    let removal = |v: &Array1<f32>| {
        let score = scorer.score(v);
        Removal {
            fill: fill.name().to_string(),
            score,
            drop: scorer.score(&clean) - score,
            top: top_index(v),
            probability_drop: (scorer.probability(&clean) - scorer.probability(v)) as f64,
        }
    };
    Ok(strokes
        .iter()
        .enumerate()
        .map(|(i, s)| HotspotRemoval { whole: removal(&outs[i]), strokes: s.map(|j| removal(&outs[j])) })
        .collect())
}

/// Finds the hotspots of `reading`'s map on a picture, paints each out, and adds them (and the
/// hotspot evidence when one is a suspect mark) to `assessment`. Nothing for a tensor input.
pub fn add_hotspots(model: &Model, card: Option<&FeedCard>, input: &Input, reading: &Reading, assessment: &mut Assessment, flag: &FlagSettings) -> Result<()> {
    let Input::Picture { picture, .. } = input else { return Ok(()) };
    let map = reading.map2d();
    let found = find_hotspots(&picture.luminance(), &map, flag.part, &flag.hotspot)?;
    let removals = hotspot_removals(model, card, input, reading, &found)?;
    let top = top_index(&Array1::from(reading.scores.clone()));
    let reports = hotspot::judge(&found, (!found.is_empty()).then_some(&removals[..]), top, flag);
    hotspot::add_hotspot_evidence(assessment, reports, flag);
    Ok(())
}
