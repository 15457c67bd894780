//! A hotspot's role once the model has been asked: painting it out moved the score or not, and
//! it looks like a mark or not. Only both together make suspect evidence.

use serde::{Deserialize, Serialize};

use super::{Descriptor, Hotspot};
use crate::regions::flag::{Assessment, Evidence, FlagSettings, Removal};

/// What a hotspot turned out to be.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum HotspotRole {
    /// Looks like a mark, and painting it out moves the score: suspect evidence.
    SuspectMark,
    /// Looks like anatomy, and painting it out moves the score: the model's evidence.
    ModelEvidence,
    /// Looks like a mark, but painting it out leaves the score: a mark the model does not use.
    UnusedMark,
    /// Looks like anatomy, and painting it out leaves the score.
    Minor,
    /// No model was asked (a tensor input, or hotspots found without one).
    Untested,
}

impl HotspotRole {
    pub fn name(self) -> &'static str {
        match self {
            HotspotRole::SuspectMark => "suspect mark",
            HotspotRole::ModelEvidence => "the model's evidence",
            HotspotRole::UnusedMark => "mark not used",
            HotspotRole::Minor => "minor",
            HotspotRole::Untested => "not tested",
        }
    }
}

/// What painting one hotspot out did: its whole removal mask, and its strokes alone (for a
/// hotspot that looks like a mark and has strokes).
#[derive(Clone, Debug, PartialEq)]
pub struct HotspotRemoval {
    pub whole: Removal,
    pub strokes: Option<Removal>,
}

/// One hotspot as `reading.json`, the sweep's rows and the inspector carry it.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct HotspotReport {
    #[serde(rename = "box")]
    pub bbox: [usize; 4],
    /// `[width, height]` of the image the box is on.
    pub image_size: [usize; 2],
    /// Share of the map's part on the hotspot, and its lift.
    pub share: f64,
    pub lift: f64,
    pub descriptor: Descriptor,
    pub mark_likeness: f32,
    pub looks_like_mark: bool,
    /// See [`super::appearance`].
    pub appearance: Vec<f32>,
    /// Area of the painted-out mask, pixels.
    pub removal_area: usize,
    /// What painting it out did (absent when no model was asked).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub removal: Option<Removal>,
    /// What painting its strokes alone out did (a hotspot that looks like a mark and has
    /// strokes, thin ink a grey opening takes away): a mark drawn over anatomy is suspect only
    /// when its strokes alone move the score.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub stroke_removal: Option<Removal>,
    /// The top class changed when it was painted out.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub flipped: Option<bool>,
    pub role: HotspotRole,
    pub suspect: bool,
}

impl HotspotReport {
    /// "corner hotspot at [x0, y0, x1, y1]".
    pub fn label(&self) -> String {
        format!("{} hotspot at {:?}", self.descriptor.place.name(), self.bbox)
    }
}

/// The reports of `hotspots`, with what painting each out did (`removals`, one per hotspot,
/// in order; `None` when no model was asked) given the top class at the input. Removal
/// "matters" when it lowers the target's probability by at least `min_probability_drop`.
pub fn judge(hotspots: &[Hotspot], removals: Option<&[HotspotRemoval]>, top: usize, s: &FlagSettings) -> Vec<HotspotReport> {
    let matters = |r: &Removal| r.probability_drop >= s.min_probability_drop;
    hotspots
        .iter()
        .enumerate()
        .map(|(i, h)| {
            let r = removals.and_then(|r| r.get(i)).cloned();
            let role = match &r {
                None => HotspotRole::Untested,
                Some(r) => match (matters(&r.whole), h.looks_like_mark, r.strokes.as_ref().map(matters)) {
                    // The strokes alone leave the answer: what matters lies under them.
                    (true, true, Some(false)) => HotspotRole::ModelEvidence,
                    (true, true, _) => HotspotRole::SuspectMark,
                    (true, false, _) => HotspotRole::ModelEvidence,
                    (false, true, _) => HotspotRole::UnusedMark,
                    (false, false, _) => HotspotRole::Minor,
                },
            };
            let (hh, ww) = h.mask.dim();
            HotspotReport {
                bbox: h.bbox,
                image_size: [ww, hh],
                share: h.share,
                lift: h.lift,
                descriptor: h.descriptor.clone(),
                mark_likeness: h.mark_likeness,
                looks_like_mark: h.looks_like_mark,
                appearance: h.appearance.clone(),
                removal_area: h.removal_mask.iter().filter(|&&m| m).count(),
                flipped: r.as_ref().map(|r| r.whole.top != top),
                stroke_removal: r.as_ref().and_then(|r| r.strokes.clone()),
                removal: r.map(|r| r.whole),
                role,
                suspect: role == HotspotRole::SuspectMark,
            }
        })
        .collect()
}

/// Adds the hotspots to an assessment: the list, and the hotspot evidence when one of them is
/// a suspect mark (the reason then says which); otherwise a word on the hotspots joins the
/// reason of a reading that is not suspect.
pub fn add_hotspot_evidence(a: &mut Assessment, reports: Vec<HotspotReport>, s: &FlagSettings) {
    let best = reports
        .iter()
        .filter(|r| r.suspect)
        .max_by(|x, y| x.removal.as_ref().map_or(0.0, |r| r.probability_drop).total_cmp(&y.removal.as_ref().map_or(0.0, |r| r.probability_drop)));
    if let Some(h) = best {
        let r = h.removal.as_ref().expect("a suspect hotspot was painted out");
        let said = format!(
            "a {} that looks like a mark (mark-likeness {:.2}: saturation {:.2}, edge sharpness {:.2}, thinness {:.2}) holds {:.2} of the {} \
             attribution, and painting it out ({}) lowers the target's probability by {:.2} (at least {}; top class after: {})",
            h.label(),
            h.mark_likeness,
            h.descriptor.saturation,
            h.descriptor.edge_sharpness,
            h.descriptor.thinness,
            h.share,
            s.part.name(),
            r.fill,
            r.probability_drop,
            s.min_probability_drop,
            r.top_class()
        );
        let said = match &h.stroke_removal {
            Some(k) => format!("{said}; its strokes alone, {:.2}", k.probability_drop),
            None => said,
        };
        a.reason = if a.suspect { format!("{}; and {said}", a.reason) } else { said };
        a.suspect = true;
        a.suspect_evidence.push(Evidence::Hotspot);
    } else if !reports.is_empty() && !a.suspect {
        let count = |role: HotspotRole| reports.iter().filter(|r| r.role == role).count();
        let mut parts = vec![];
        for role in [HotspotRole::ModelEvidence, HotspotRole::UnusedMark, HotspotRole::Minor, HotspotRole::Untested] {
            let n = count(role);
            if n > 0 {
                parts.push(format!("{n} {}", role.name()));
            }
        }
        a.reason = format!(
            "{}; {} hotspot{} ({}): none both looks like a mark and moves the score when painted out",
            a.reason,
            reports.len(),
            if reports.len() == 1 { "" } else { "s" },
            parts.join(", ")
        );
    }
    a.hotspots = reports;
}
