//! `review.json`: a review's results for tools. The reading's own fields first, then one key per
//! test, `null` for a test that was not run (`skipped` says why):
//!
//! - `deletion`, `insertion`: `{fractions, scores, auc, random_auc, random_scores, random_aucs,
//!   lead}`, filled from `curve_fill`;
//! - `baselines`: the strip, each baseline's reading figures and its two curves;
//! - `randomisation`: the reading's method through the cascade (or the first method asked for), `{layers_randomised, layer,
//!   spearman, top_overlap, spearman_signed, top_overlap_signed, …}` in cascade order;
//!   `randomisation_detail`: the layers, the initialisers and every method's cascade;
//! - `convergence`: `{steps, gap, sum}` in increasing steps for the reading's quadrature rule;
//!   `convergence_detail`: all three rules and the step counts reaching the gap;
//! - `shapley`: `{grid, cells: [{box, label, value, stderr}], sum, score_input, score_baseline,
//!   permutations, exact, estimator, efficiency_error}` with boxes in image pixels;
//! - `against`: the second model's side and the maps' agreement;
//! - `feed`: how the input was fed, as in `reading.json`.

use serde::Serialize;

use crate::methods::{Reading, Rule};
use crate::review::against::Against;
use crate::review::convergence::{Convergence, Point};
use crate::review::curves::Curve;
use crate::review::randomise::{Cascade, CascadeStep};
use crate::review::shapley::Shapley;
use crate::review::{Review, Skipped};

#[derive(Serialize)]
pub struct StripFile<'a> {
    pub baseline: &'a str,
    pub title: &'a str,
    pub score_baseline: Option<f32>,
    pub completeness_gap: Option<f64>,
    pub steps: Option<usize>,
    pub deletion: &'a Curve,
    pub insertion: &'a Curve,
}

#[derive(Serialize)]
pub struct ReviewFile<'a> {
    #[serde(flatten)]
    pub reading: &'a Reading,
    pub request: &'a str,
    pub caution: &'static str,
    pub curve_fill: Option<&'a str>,
    pub deletion: Option<&'a Curve>,
    pub insertion: Option<&'a Curve>,
    pub baselines: Vec<StripFile<'a>>,
    pub randomisation: Option<&'a [CascadeStep]>,
    pub randomisation_detail: Option<&'a Cascade>,
    pub convergence_rule: Rule,
    pub convergence: Option<&'a [Point]>,
    pub convergence_detail: Option<&'a Convergence>,
    pub shapley: Option<&'a Shapley>,
    pub against: Option<&'a Against>,
    pub warnings: &'a [String],
    pub skipped: &'a [Skipped],
    /// Seconds per phase, in the order they ran.
    pub seconds: Vec<(&'a str, f64)>,
    /// How the input was fed, as in reading.json.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub feed: Option<super::FeedRecord>,
}

impl<'a> ReviewFile<'a> {
    /// `rule`: the quadrature rule whose ladder goes under `convergence` (the reading's).
    pub fn new(r: &'a Review, rule: Rule, against: Option<&'a Against>) -> ReviewFile<'a> {
        ReviewFile {
            reading: &r.reading,
            request: &r.request,
            caution: crate::CAUTION,
            curve_fill: r.curves.as_ref().map(|c| c.fill.as_str()),
            deletion: r.curves.as_ref().map(|c| &c.deletion),
            insertion: r.curves.as_ref().map(|c| &c.insertion),
            baselines: r
                .strip
                .iter()
                .map(|e| StripFile {
                    baseline: &e.baseline,
                    title: &e.title,
                    score_baseline: e.reading.score_baseline,
                    completeness_gap: e.reading.completeness_gap,
                    steps: e.reading.steps,
                    deletion: &e.curves.deletion,
                    insertion: &e.curves.insertion,
                })
                .collect(),
            // The reading's own method when the cascade ran it, else the first one asked for.
            randomisation: r
                .cascade
                .as_ref()
                .and_then(|c| c.methods.iter().find(|m| m.method == r.reading.method).or(c.methods.first()))
                .map(|m| m.steps.as_slice()),
            randomisation_detail: r.cascade.as_ref(),
            convergence_rule: rule,
            convergence: r.convergence.as_ref().and_then(|c| c.ladder(rule)).map(|l| l.points.as_slice()),
            convergence_detail: r.convergence.as_ref(),
            shapley: r.shapley.as_ref(),
            against,
            warnings: &r.warnings,
            skipped: &r.skipped,
            seconds: r.seconds.iter().map(|(k, v)| (k.as_str(), *v)).collect(),
            feed: None,
        }
    }

    /// With the record of how the input was fed.
    pub fn with_feed(mut self, feed: super::FeedRecord) -> ReviewFile<'a> {
        self.feed = Some(feed);
        self
    }

    pub fn to_json(&self) -> anyhow::Result<serde_json::Value> {
        Ok(serde_json::to_value(self)?)
    }
}
