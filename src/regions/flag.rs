//! The flag rule: a reading is **suspect** when its mark share on a region and its lift there
//! both pass thresholds. Both are needed: a large share on a region that covers half the image
//! says little (lift near 1), and a high lift on a region that holds a sliver of the map is not
//! what drives the score (small share).
//!
//! Regions are tested one by one and, when `check_union` is on, also all together (a tag and a
//! frame that each hold 15% of the support are a shortcut between them).

use anyhow::{Result, bail};
use ndarray::Array2;
use serde::{Deserialize, Serialize};

use super::figures::{Figures, figures};
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
    /// This region alone passes both thresholds.
    pub suspect: bool,
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
    pub suspect: bool,
    /// Why the reading is or is not suspect, in one sentence (`suspect_reason` in JSON).
    #[serde(rename = "suspect_reason")]
    pub reason: String,
}

fn passes(f: &Figures, s: &FlagSettings) -> bool {
    matches!((f.mark_share, f.lift), (Some(m), Some(l)) if m >= s.min_mark_share && l >= s.min_lift)
}

fn fmt(x: Option<f64>) -> String {
    x.map_or("undefined".to_string(), |v| format!("{v:.2}"))
}

/// Figures and flag for a map against given regions (found, drawn, or both).
pub fn assess_regions(map: &Array2<f32>, regions: &[Region], s: &FlagSettings) -> Result<Assessment> {
    let mut reports = Vec::with_capacity(regions.len());
    let mut union = Array2::from_elem(map.dim(), false);
    let mut eligible = 0usize;
    for r in regions {
        let f = figures(map, &r.mask, s.part, s.pointing_tolerance_px)?;
        let counts = s.kinds.contains(&r.kind);
        if counts {
            union.zip_mut_with(&r.mask, |u, &m| *u |= m);
            eligible += 1;
        }
        reports.push(RegionReport {
            kind: r.kind,
            label: r.label(),
            bbox: r.bbox,
            suspect: counts && passes(&f, s),
            figures: f,
            confidence: r.confidence,
            reason: r.reason.clone(),
            sides: r.sides.clone(),
        });
    }
    let all_regions = if s.check_union && eligible > 0 {
        Some(figures(map, &union, s.part, s.pointing_tolerance_px)?)
    } else {
        None
    };
    let part = s.part.name();
    let best = reports
        .iter()
        .filter(|r| r.suspect)
        .max_by(|a, b| a.figures.mark_share.unwrap_or(0.0).total_cmp(&b.figures.mark_share.unwrap_or(0.0)));
    let (suspect, reason) = if let Some(r) = best {
        (
            true,
            format!(
                "the {part} attribution sits on the {} at {:?}: mark share {} (at least {}) and lift {} (at least {})",
                r.label,
                r.bbox,
                fmt(r.figures.mark_share),
                s.min_mark_share,
                fmt(r.figures.lift),
                s.min_lift
            ),
        )
    } else if let Some(f) = all_regions.as_ref().filter(|f| passes(f, s)) {
        (
            true,
            format!(
                "the {part} attribution sits on the {eligible} found regions together: mark share {} (at least {}) and lift {} (at least {})",
                fmt(f.mark_share),
                s.min_mark_share,
                fmt(f.lift),
                s.min_lift
            ),
        )
    } else if reports.is_empty() {
        (false, "no border band, burned-in mark or other region found".to_string())
    } else {
        let top = reports
            .iter()
            .max_by(|a, b| a.figures.mark_share.unwrap_or(-1.0).total_cmp(&b.figures.mark_share.unwrap_or(-1.0)))
            .expect("reports is not empty");
        (
            false,
            format!(
                "no region passes mark share at least {} and lift at least {}; the largest share is {} on the {} (lift {})",
                s.min_mark_share,
                s.min_lift,
                fmt(top.figures.mark_share),
                top.label,
                fmt(top.figures.lift)
            ),
        )
    };
    Ok(Assessment {
        part: s.part,
        min_mark_share: s.min_mark_share,
        min_lift: s.min_lift,
        regions: reports,
        all_regions,
        suspect,
        reason,
    })
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
