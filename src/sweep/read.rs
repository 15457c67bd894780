//! One image of a sweep: opened and fed as `spurion explain` would, read, its regions found (and
//! any drawn ones added), assessed with both kinds of evidence, and turned into a row and a map
//! on the model grid.

use std::collections::BTreeMap;
use std::time::Instant;

use anyhow::{Context, Result};
use ndarray::{Array2, ArrayD, Axis};
use serde_json::json;

use super::cache::Entry;
use super::plan::Item;
use super::row::Row;
use crate::control::Control;
use crate::feed::{FeedCard, OpenOptions, Picture};
use crate::methods::{self, Input, Request, top_index};
use crate::model::Model;
use crate::regions::{DrawnFile, FinderSettings, FlagSettings, HotspotReport};

/// Everything that decides each image's result besides the image itself.
pub struct Setup<'a> {
    pub model: &'a Model,
    pub card: &'a FeedCard,
    pub request: &'a Request,
    pub open: OpenOptions,
    pub finder: FinderSettings,
    pub flag: FlagSettings,
    /// Regions a person drew, by image path relative to the images folder (from a ledger).
    pub drawn: BTreeMap<String, DrawnFile>,
}

impl Setup<'_> {
    /// The settings as one canonical text: part of every cache key, and what shards of one
    /// sweep must agree on.
    pub fn settings_text(&self) -> String {
        json!({
            "request": self.request,
            "frame": self.open.frame,
            "window": self.open.window,
            "card": self.card,
            "finder": self.finder,
            "flag": self.flag,
        })
        .to_string()
    }

    /// What besides the settings and the image's content decides one image's result: the
    /// regions drawn on it (empty text when none).
    pub fn image_extra(&self, item: &Item) -> String {
        drawn_extra(self.drawn.get(&item.rel))
    }

    /// Reads one image.
    pub fn read(&self, item: &Item, ctl: &Control) -> Result<Entry> {
        let started = Instant::now();
        let picture = Picture::open_with(&item.path, &self.open)?;
        let declared = picture.burned_in_annotation();
        let (h, w) = (picture.height(), picture.width());
        let drawn = match self.drawn.get(&item.rel) {
            Some(d) => d.to_regions(h, w).with_context(|| format!("the regions drawn on {} in the ledger", item.rel))?,
            None => vec![],
        };
        let input = Input::picture(picture, self.card)?;
        let reading = methods::explain(self.model, Some(self.card), &input, self.request, ctl)?;
        let a = methods::assess_input(self.model, Some(self.card), &input, &reading, drawn, &self.finder, &self.flag)?
            .context("a picture always has an assessment")?;
        let grid = grid_map(&reading.tensor_map, input.spatial_axes()?);
        let scores = ndarray::Array1::from(reading.scores.clone());
        let top = top_index(&scores);
        let all = a.all_regions.as_ref();
        let removal = a.removal_all.as_ref();
        let row = Row {
            path: item.rel.clone(),
            group: item.group.clone(),
            top,
            top_label: reading.labels.get(top).cloned().unwrap_or_default(),
            top_score: scores[top],
            target: reading.target.index,
            target_label: reading.target.label.clone(),
            target_score: reading.score_input,
            mark_share: all.and_then(|f| f.mark_share),
            lift: all.and_then(|f| f.lift),
            removal_drop: removal.map(|r| r.drop),
            removal_probability_drop: removal.map(|r| r.probability_drop),
            top_after_removal: removal.map(|r| r.top),
            suspect: a.suspect,
            evidence: a.suspect_evidence.iter().map(|e| e.name()).collect::<Vec<_>>().join("+"),
            regions: a.regions.len(),
            region_labels: a.regions.iter().map(|r| r.label.clone()).collect::<Vec<_>>().join("; "),
            completeness_gap: reading.completeness_gap,
            steps: reading.steps,
            burned_in_annotation: declared,
            verdict: None,
            seconds: started.elapsed().as_secs_f64(),
            hotspot_summary: hotspot_summary(&a.hotspots),
            hotspots: a.hotspots.clone(),
        };
        Ok(Entry { row, grid })
    }
}

/// The hotspots in words, one per `; `: "corner hotspot at x 4..19 y 43..58: suspect mark
/// (probability drop 0.61)".
pub fn hotspot_summary(hotspots: &[HotspotReport]) -> String {
    hotspots
        .iter()
        .map(|h| {
            let drop = h.removal.as_ref().map(|r| format!(" (probability drop {:.2})", r.probability_drop)).unwrap_or_default();
            // No commas, so that the table's cell stays one plain field.
            let [x0, y0, x1, y1] = h.bbox;
            format!("{} hotspot at x {x0}..{x1} y {y0}..{y1}: {}{drop}", h.descriptor.place.name(), h.role.name())
        })
        .collect::<Vec<_>>()
        .join("; ")
}

/// The part of an image's cache key that its drawn regions make (empty text when none), so a
/// front end that looks a result up finds the one the sweep stored.
pub fn drawn_extra(drawn: Option<&DrawnFile>) -> String {
    drawn.filter(|d| !d.regions.is_empty()).map(|d| json!(d).to_string()).unwrap_or_default()
}

/// A map on the model-input tensor summed over every axis but the two spatial ones: the map on
/// the model's grid (rows × columns).
pub fn grid_map(tensor_map: &ArrayD<f32>, spatial: [usize; 2]) -> Array2<f32> {
    let mut m = tensor_map.clone();
    for a in (0..m.ndim()).rev().filter(|a| !spatial.contains(a)) {
        m = m.sum_axis(Axis(a));
    }
    let m = m.into_dimensionality::<ndarray::Ix2>().expect("two spatial axes remain");
    if spatial[0] < spatial[1] { m } else { m.reversed_axes() }
}
