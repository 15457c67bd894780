//! The flag rule: a reading is **suspect** when either kind of evidence fires.
//!
//! - **attribution**: its mark share on a region and its lift there both pass thresholds. Both
//!   are needed: a large share on a region that covers half the image says little (lift near 1),
//!   and a high lift on a region that holds a sliver of the map is not what drives the score.
//! - **removal**: painting the region out (see [`super::fill`]) lowers the target's probability
//!   by at least a threshold. This needs no baseline and no attribution method: it asks the
//!   model itself.
//!
//! Regions are tested one by one and, when `check_union` is on, also all together (a tag and a
//! frame that each hold 15% of the support are a shortcut between them).

use anyhow::{Result, bail};
use ndarray::Array2;
use serde::{Deserialize, Serialize};

use super::figures::{Figures, figures};
use super::hotspot::{HotspotReport, HotspotSettings};
use crate::sign::Sign;
use super::{FinderSettings, Region, RegionKind, Side, find_regions};

/// Thresholds of the flag rule.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct FlagSettings {
    /// Part of the map the figures use. Default supporting.
    pub part: Sign,
    /// Smallest mark share for the flag. Default 0.08, set from the demo: integrated gradients
    /// (blur or grey baseline) put 0.09–0.14 of the shortcut model's supporting attribution on
    /// Hillmoor's tag and at most 0.06 of the control model's on any region (tests/regions_e2e.rs).
    pub min_mark_share: f64,
    /// Smallest lift for the flag. Default 3: the region draws three times its area's share.
    pub min_lift: f64,
    /// Pointing game tolerance in pixels. Default 0 (see [`super::figures`]).
    pub pointing_tolerance_px: f64,
    /// Also test the union of all regions. Default true.
    pub check_union: bool,
    /// Region kinds that can raise the flag. Default: all.
    pub kinds: Vec<RegionKind>,
    /// Smallest fall of the target's probability (softmax of the scores, or the output itself
    /// when the model gives probabilities) when regions are painted out, for the removal
    /// evidence. Default 0.25. A regression check set on the demo, not evidence: painting out
    /// Hillmoor's tag and frame lowers the shortcut model's probability of its answer by far
    /// more on the Hillmoor images with a finding, and the control model's by far less
    /// (tests/regions_e2e.rs states the figures).
    pub min_probability_drop: f64,
    /// Hotspots: compact places of the map tested by removal (see [`super::hotspot`]).
    pub hotspot: HotspotSettings,
}

impl Default for FlagSettings {
    fn default() -> Self {
        FlagSettings {
            part: Sign::Supporting,
            min_mark_share: 0.08,
            min_lift: 3.0,
            pointing_tolerance_px: 0.0,
            check_union: true,
            kinds: vec![
                RegionKind::BorderBand,
                RegionKind::BurnedInMark,
                RegionKind::RepeatedPatch,
                RegionKind::DrawnRegion,
            ],
            min_probability_drop: 0.25,
            hotspot: HotspotSettings::default(),
        }
    }
}

/// One region with its figures, as written to `reading.json`'s `regions` list.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct RegionReport {
    pub kind: RegionKind,
    pub label: String,
    #[serde(rename = "box")]
    pub bbox: [usize; 4],
    /// Mark share, lift and the other figures of this region (flat in JSON).
    #[serde(flatten)]
    pub figures: Figures,
    pub confidence: f32,
    pub reason: String,
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub sides: Vec<Side>,
    /// What painting this region out did (absent when no model was asked).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub removal: Option<Removal>,
    /// This region alone passes the attribution thresholds or the removal threshold.
    pub suspect: bool,
}

/// What painting a region (or all of them) out did to the model's answer.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Removal {
    /// How the pixels were painted out: `harmonic`, `edge-carry`, or both in turn.
    pub fill: String,
    /// The target's score with the region painted out (same score kind as the reading's).
    pub score: f32,
    /// The score at the input minus `score`.
    pub drop: f32,
    /// The top class after painting out.
    pub top: usize,
    /// The target's probability at the input minus after painting out.
    pub probability_drop: f64,
}

/// Removals of one image: one per region, in order, and all regions together.
#[derive(Clone, Debug, PartialEq)]
pub struct Removals {
    pub each: Vec<Removal>,
    pub all: Option<Removal>,
}

/// Which kind of evidence made a reading suspect.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Evidence {
    /// The attribution sits on a region (mark share and lift).
    Attribution,
    /// Painting a region out changes the model's answer.
    Removal,
    /// The file itself declares burned-in text: DICOM's Burned In Annotation (0028,0301) is YES.
    BurnedInAnnotation,
    /// A hotspot of the map that looks like a mark, and whose painting out changes the answer.
    Hotspot,
}

impl Evidence {
    pub fn name(self) -> &'static str {
        match self {
            Evidence::Attribution => "attribution",
            Evidence::Removal => "removal",
            Evidence::BurnedInAnnotation => "burned-in-annotation",
            Evidence::Hotspot => "hotspot",
        }
    }
}

/// The regions of one reading, their figures and the flag.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Assessment {
    pub part: Sign,
    pub min_mark_share: f64,
    pub min_lift: f64,
    pub regions: Vec<RegionReport>,
    /// Figures of all flag-eligible regions together, when there are any and `check_union` is on.
    pub all_regions: Option<Figures>,
    pub min_probability_drop: f64,
    /// What painting all regions out together did (absent when no model was asked).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub removal_all: Option<Removal>,
    pub suspect: bool,
    /// Which evidence fired: none, one or both.
    #[serde(default)]
    pub suspect_evidence: Vec<Evidence>,
    /// Why the reading is or is not suspect, in one sentence (`suspect_reason` in JSON).
    #[serde(rename = "suspect_reason")]
    pub reason: String,
    /// The map's hotspots, found whatever their shape, each with what painting it out did.
    #[serde(default)]
    pub hotspots: Vec<HotspotReport>,
}

fn passes(f: &Figures, s: &FlagSettings) -> bool {
    matches!((f.mark_share, f.lift), (Some(m), Some(l)) if m >= s.min_mark_share && l >= s.min_lift)
}

fn fmt(x: Option<f64>) -> String {
    x.map_or("undefined".to_string(), |v| format!("{v:.2}"))
}

fn removal_passes(r: Option<&Removal>, s: &FlagSettings) -> bool {
    r.is_some_and(|r| r.probability_drop >= s.min_probability_drop)
}

/// Figures and flag for a map against given regions (found, drawn, or both), attribution
/// evidence only.
pub fn assess_regions(map: &Array2<f32>, regions: &[Region], s: &FlagSettings) -> Result<Assessment> {
    assess_with_removals(map, regions, None, None, s)
}

/// Figures and flag for a map against given regions, with what painting them out did when
/// `removals` is given (one per region, in order), and what the file declares about burned-in
/// text (`declared`, DICOM's Burned In Annotation).
pub fn assess_with_removals(
    map: &Array2<f32>,
    regions: &[Region],
    removals: Option<&Removals>,
    declared: Option<bool>,
    s: &FlagSettings,
) -> Result<Assessment> {
    if let Some(r) = removals
        && r.each.len() != regions.len()
    {
        bail!("internal: {} removals for {} regions", r.each.len(), regions.len());
    }
    let mut reports = Vec::with_capacity(regions.len());
    let mut union = Array2::from_elem(map.dim(), false);
    let mut eligible = 0usize;
    for (i, r) in regions.iter().enumerate() {
        let f = figures(map, &r.mask, s.part, s.pointing_tolerance_px)?;
        let counts = s.kinds.contains(&r.kind);
        if counts {
            union.zip_mut_with(&r.mask, |u, &m| *u |= m);
            eligible += 1;
        }
        let removal = removals.map(|x| x.each[i].clone());
        reports.push(RegionReport {
            kind: r.kind,
            label: r.label(),
            bbox: r.bbox,
            suspect: counts && (passes(&f, s) || removal_passes(removal.as_ref(), s)),
            figures: f,
            confidence: r.confidence,
            reason: r.reason.clone(),
            sides: r.sides.clone(),
            removal,
        });
    }
    let all_regions = if s.check_union && eligible > 0 {
        Some(figures(map, &union, s.part, s.pointing_tolerance_px)?)
    } else {
        None
    };
    let removal_all = removals.and_then(|r| r.all.clone());
    let eligible_reports: Vec<&RegionReport> = reports.iter().filter(|r| s.kinds.contains(&r.kind)).collect();
    let attribution = attribution_reason(&eligible_reports, all_regions.as_ref(), eligible, s);
    let removal = removal_reason(&eligible_reports, removal_all.as_ref(), eligible, s);
    let mut evidence = vec![];
    let mut said = vec![];
    if let Some(a) = attribution {
        evidence.push(Evidence::Attribution);
        said.push(a);
    }
    if let Some(r) = removal {
        evidence.push(Evidence::Removal);
        said.push(r);
    }
    if declared == Some(true) {
        evidence.push(Evidence::BurnedInAnnotation);
        said.push("the file itself declares burned-in text (Burned In Annotation YES)".to_string());
    }
    let suspect = !evidence.is_empty();
    let reason = if suspect {
        said.join("; and ")
    } else {
        not_suspect_reason(&reports, removals.is_some(), s)
    };
    Ok(Assessment {
        part: s.part,
        min_mark_share: s.min_mark_share,
        min_lift: s.min_lift,
        regions: reports,
        all_regions,
        min_probability_drop: s.min_probability_drop,
        removal_all,
        suspect,
        suspect_evidence: evidence,
        reason,
        hotspots: vec![],
    })
}

/// The attribution evidence, if it fires: the region with the largest passing share, else the
/// regions together.
fn attribution_reason(reports: &[&RegionReport], union: Option<&Figures>, eligible: usize, s: &FlagSettings) -> Option<String> {
    let part = s.part.name();
    let best = reports
        .iter()
        .filter(|r| passes(&r.figures, s))
        .max_by(|a, b| a.figures.mark_share.unwrap_or(0.0).total_cmp(&b.figures.mark_share.unwrap_or(0.0)));
    if let Some(r) = best {
        return Some(format!(
            "the {part} attribution sits on the {} at {:?}: mark share {} (at least {}) and lift {} (at least {})",
            r.label,
            r.bbox,
            fmt(r.figures.mark_share),
            s.min_mark_share,
            fmt(r.figures.lift),
            s.min_lift
        ));
    }
    union.filter(|f| passes(f, s)).map(|f| {
        format!(
            "the {part} attribution sits on the {eligible} regions together: mark share {} (at least {}) and lift {} (at least {})",
            fmt(f.mark_share),
            s.min_mark_share,
            fmt(f.lift),
            s.min_lift
        )
    })
}

/// The removal evidence, if it fires: the region whose painting out lowers the probability
/// most, else all regions together.
fn removal_reason(reports: &[&RegionReport], all: Option<&Removal>, eligible: usize, s: &FlagSettings) -> Option<String> {
    let says = |what: &str, r: &Removal| {
        format!(
            "painting out {what} ({}) lowers the target's probability by {:.2} (at least {}; score drop {:.3}, top class after: {})",
            r.fill, r.probability_drop, s.min_probability_drop, r.drop, r.top
        )
    };
    let best = reports
        .iter()
        .filter_map(|r| r.removal.as_ref().filter(|x| removal_passes(Some(x), s)).map(|x| (r, x)))
        .max_by(|a, b| a.1.probability_drop.total_cmp(&b.1.probability_drop));
    if let Some((r, x)) = best {
        return Some(says(&format!("the {} at {:?}", r.label, r.bbox), x));
    }
    all.filter(|x| eligible > 1 && removal_passes(Some(x), s)).map(|x| says(&format!("the {eligible} regions together"), x))
}

fn not_suspect_reason(reports: &[RegionReport], removal: bool, s: &FlagSettings) -> String {
    if reports.is_empty() {
        return "no border band, burned-in mark or other region found".to_string();
    }
    let top = reports
        .iter()
        .max_by(|a, b| a.figures.mark_share.unwrap_or(-1.0).total_cmp(&b.figures.mark_share.unwrap_or(-1.0)))
        .expect("reports is not empty");
    let mut t = format!(
        "no region passes mark share at least {} and lift at least {}; the largest share is {} on the {} (lift {})",
        s.min_mark_share,
        s.min_lift,
        fmt(top.figures.mark_share),
        top.label,
        fmt(top.figures.lift)
    );
    if removal {
        let most = reports
            .iter()
            .filter_map(|r| r.removal.as_ref())
            .map(|r| r.probability_drop)
            .fold(f64::NEG_INFINITY, f64::max);
        t.push_str(&format!(
            "; painting regions out lowers the target's probability by at most {most:.2} (at least {} needed)",
            s.min_probability_drop
        ));
    }
    t
}

/// Finds regions in `image` and assesses `map` (same grid) against them.
pub fn assess(map: &Array2<f32>, image: &Array2<f32>, finder: &FinderSettings, flag: &FlagSettings) -> Result<Assessment> {
    if map.dim() != image.dim() {
        bail!(
            "the map is {}×{} but the image is {}×{} (width×height); the map must be on the image grid",
            map.dim().1,
            map.dim().0,
            image.dim().1,
            image.dim().0
        );
    }
    let regions = find_regions(image, finder);
    assess_regions(map, &regions, flag)
}
